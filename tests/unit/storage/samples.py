"""Invented machine updates for the storage tests (a scenario of our own: fan "ahu-3" at a made-up site)."""

from __future__ import annotations

import numpy as np

from rotorwatch.alarms.records import AlarmEvent, MachineUpdate, PointUpdate, SensorHealth, ValueStatus
from rotorwatch.analysis.result import PointResult, Spectrum, Waveform

T0 = 1_767_225_600.0  # 2026-01-01T00:00:00Z (GNU date -u -d @1767225600)


def value(name: str, v: float, unit: str, state: str = "normal", warn: float | None = 4.5,
          alarm: float | None = 7.1, baseline: float | None = 2.0) -> ValueStatus:
    return ValueStatus(name=name, value=v, unit=unit, state=state, warning_level=warn, alarm_level=alarm,
                       baseline=baseline)


def spectra(fs_hz: float = 12800.0, n_lines: int = 2048, shaft_hz: float = 24.5):
    """Line spectra with peaks at 1x, 2x and an envelope line at 3.6x (invented values)."""
    f = np.linspace(0, fs_hz / 2.56, n_lines)
    acc = 0.01 + 0.2 * np.exp(-0.5 * ((f - shaft_hz) / 1.0) ** 2) + 0.05 * np.exp(-0.5 * ((f - 2 * shaft_hz) / 1.0) ** 2)
    vel = 1e3 * acc / (2 * np.pi * np.maximum(f, 1.0))
    fe = np.linspace(0, 500.0, 800)
    env = 0.002 + 0.03 * np.exp(-0.5 * ((fe - 3.6 * shaft_hz) / 0.5) ** 2)
    return Spectrum(f, acc, "m/s^2"), Spectrum(f, vel, "mm/s"), Spectrum(fe, env, "m/s^2")


def point_result(point_id: str, t: float, fs_hz: float = 12800.0, with_spectra: bool = False,
                 rpm: float = 1470.0, overall_mm_s: float = 2.2) -> PointResult:
    acc = vel = env = None
    if with_spectra:
        acc, vel, env = spectra(fs_hz, shaft_hz=rpm / 60.0)
    return PointResult(
        machine_id="ahu-3", point_id=point_id, time_s=t, fs_hz=fs_hz, n_samples=int(4 * fs_hz), rpm=rpm,
        rpm_source="fixed", overall_velocity_mm_s=overall_mm_s, iso_zone="A",
        bands={"shaft_1x": 1.8, "bearing_env": 0.05},
        waveform=Waveform(peak_m_s2=3.1, rms_m_s2=0.9, crest_factor=3.44, kurtosis=3.1, mean_m_s2=0.001),
        envelope_band_hz=(2000.0, 4000.0), acceleration=acc, velocity=vel, envelope=env,
    )


def update(t: float, overall: float = 2.2, state: str = "normal", points=("de", "nde"),
           with_spectra: bool = False, events: list[AlarmEvent] | None = None, rpm: float = 1470.0) -> MachineUpdate:
    pts = {}
    for pid in points:
        values = {
            "overall": value("overall", overall, "mm/s", state),
            "shaft_1x": value("shaft_1x", 1.8, "mm/s", "normal", 3.0, 5.0),
            "bearing_env": value("bearing_env", float("nan"), "m/s^2", "learning", None, None, None),
        }
        pts[pid] = PointUpdate(point_id=pid, state=state, reason="", health=SensorHealth(ok=True),
                               result=point_result(pid, t, with_spectra=with_spectra, overall_mm_s=overall, rpm=rpm),
                               values=values)
    return MachineUpdate(machine_id="ahu-3", time_s=t, rpm=rpm, rpm_source="fixed", state=state, reason="",
                         points=pts, events=list(events or []))


def transition(t: float, point_id: str = "de", new: str = "alarm") -> AlarmEvent:
    return AlarmEvent(time_s=t, machine_id="ahu-3", point_id=point_id, value_name="overall", old_state="normal",
                      new_state=new, value=7.5, unit="mm/s", level=7.1, level_kind="alarm",
                      reason="above the absolute alarm level")
