"""Hand-built records for the status-page tests: the demo fan with a chosen outer-race fault size.

The numbers are invented for the demo (they are not a check of the analysis): a velocity spectrum with
lines at 1x and blade pass, an envelope spectrum with BPFO harmonics whose height grows with
``fault``, and an acceleration spectrum with a resonance hump. States follow the levels by hand.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from rotorwatch import kinematics
from rotorwatch.alarms.records import AlarmEvent, MachineUpdate, PointUpdate, SensorHealth, ValueStatus
from rotorwatch.analysis.result import Finding, PointResult, Spectrum, Waveform
from rotorwatch.settings.loading import load_config

REPO = Path(__file__).resolve().parents[3]
DEMO_CONFIG = REPO / "config" / "demo-fan.toml"


def demo_config():
    return load_config(DEMO_CONFIG)


def _lines(freqs, peaks, floor):
    amp = np.full(freqs.size, floor)
    df = freqs[1] - freqs[0]
    for f0, a0 in peaks:
        amp += a0 * np.exp(-0.5 * ((freqs - f0) / (0.8 * df)) ** 2)
    return amp


def point_result(config, point_id: str, time_s: float, fault: float, rpm: float = 1482.0) -> PointResult:
    machine = config.machines[0]
    table = kinematics.frequency_table(machine, rpm)
    bearing = machine.point(point_id).bearing
    bpfo = table[f"bpfo:{bearing}"]
    f_v = np.linspace(0, 10000, 3201)
    velocity = _lines(f_v, [(table["1x"], 1.1), (table["2x"], 0.35), (table["blade_pass"], 0.6)], 0.004)
    accel = _lines(f_v, [(table["1x"], 0.2), (table["blade_pass"], 0.9)], 0.01)
    accel += (0.05 + 0.3 * fault) * np.exp(-0.5 * ((f_v - 4200) / 900) ** 2)
    f_e = np.linspace(0, 500, 1601)
    envelope = _lines(f_e, [(k * bpfo, fault * 0.4 / k) for k in range(1, 6)] + [(table["1x"], 0.02)], 0.003)
    overall = 1.3 + 2.0 * fault
    bands = {"shaft-1x": 1.1, "shaft-2x": 0.35, "blade-pass": 0.6, "bearing-hf": 0.2 + 0.6 * fault}
    if point_id == "de-h":
        bands.update({"de-outer-race": 0.01 + 0.4 * fault, "de-inner-race": 0.01, "de-ball": 0.008})
    else:
        bands.update({"nde-outer-race": 0.01})
    findings = [Finding("BPFO", bearing, expected_hz=bpfo, measured_hz=bpfo * 1.002, prominence_db=18.0 + 6.0 * fault, harmonics_found=4, severity_m_s2=0.05 * fault)] if fault > 0.2 else []
    return PointResult(
        machine_id=machine.id, point_id=point_id, time_s=time_s, fs_hz=51200.0, n_samples=204800,
        rpm=rpm, rpm_source="fixed", overall_velocity_mm_s=overall,
        iso_zone="A" if overall < 1.4 else "B" if overall < 2.8 else "C" if overall < 4.5 else "D",
        bands=bands,
        waveform=Waveform(peak_m_s2=3.0 + 20 * fault, rms_m_s2=1.0 + fault, crest_factor=3.0 + 8 * fault,
                          kurtosis=3.0 + 6 * fault, mean_m_s2=0.001),
        envelope_band_hz=(2000.0, 7000.0), findings=findings,
        acceleration=Spectrum(f_v, accel, "m/s^2"), velocity=Spectrum(f_v, velocity, "mm/s"),
        envelope=Spectrum(f_e, envelope, "m/s^2"),
    )


def _state(value, warning, alarm):
    if alarm is not None and value >= alarm:
        return "alarm"
    if warning is not None and value >= warning:
        return "warning"
    return "normal"


def machine_update(config, time_s: float, fault: float, events: list | None = None) -> MachineUpdate:
    """The demo fan's update with outer-race fault size ``fault`` (0 healthy, 1 severe) on de-h."""
    machine = config.machines[0]
    points = {}
    for p in machine.points:
        res = point_result(config, p.id, time_s, fault if p.id == "de-h" else 0.0)
        values = {"overall": ValueStatus("overall", res.overall_velocity_mm_s, "mm/s",
                                         _state(res.overall_velocity_mm_s, 2.8, 4.5), 2.8, 4.5, 1.3)}
        for band in machine.bands_for(p.id):
            v = res.bands[band.name]
            unit = {"velocity": "mm/s"}.get(band.quantity, "m/s^2")
            base = v if band.name not in ("de-outer-race", "bearing-hf") else (0.01 if band.name == "de-outer-race" else 0.2)
            warn = band.levels.warning or base * (band.levels.relative_warning or 2.0)
            alarm = band.levels.alarm or base * (band.levels.relative_alarm or 4.0)
            values[band.name] = ValueStatus(band.name, v, unit, _state(v, warn, alarm), warn, alarm, base)
        worst = max((v.state for v in values.values()), key=["normal", "warning", "alarm"].index)
        reason = "all values within their levels" if worst == "normal" else \
            "; ".join(f"{v.name} {v.value:.3g} {v.unit} above its {v.state} level" for v in values.values() if v.state == worst)
        raw = np.random.default_rng(int(time_s)).normal(0, 0.05, 51200 // 5)
        points[p.id] = (PointUpdate(p.id, worst, reason, res, SensorHealth(ok=True, rms_v=0.05), values), raw)
    order = ["alarm", "warning", "normal"]
    m_state = min((pu.state for pu, _ in points.values()), key=order.index)
    m_reason = next((f"{pid}: {pu.reason}" for pid, (pu, _) in points.items() if pu.state == m_state), "")
    update = MachineUpdate(machine.id, time_s, 1482.0, "fixed", m_state, m_reason,
                           {pid: pu for pid, (pu, _) in points.items()}, events or [])
    return update, {pid: raw for pid, (_, raw) in points.items()}


def event(time_s: float, old: str, new: str) -> AlarmEvent:
    return AlarmEvent(time_s, "ef3", "de-h", "de-outer-race", old, new, 0.2, "m/s^2", 0.1, "warning",
                      "above 2.5 x baseline")
