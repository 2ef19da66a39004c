"""Small records for the service tests: a MachineUpdate as the alarm logic would emit it.

The numbers are invented (demo values), chosen only so that every field has a distinct, checkable value.
"""

from __future__ import annotations

from rotorwatch.alarms.records import AlarmEvent, MachineUpdate, PointUpdate, SensorHealth, ValueStatus
from rotorwatch.analysis.result import Finding, PointResult, Waveform

T0 = 1_700_000_000.0  # 2023-11-14T22:13:20Z (POSIX time, UTC)


def point_result(machine: str, point: str, t: float = T0, overall_mm_s: float = 1.3, zone: str = "A") -> PointResult:
    w = Waveform(peak_m_s2=3.0, rms_m_s2=1.0, crest_factor=3.0, kurtosis=3.1, mean_m_s2=0.01)
    return PointResult(machine, point, t, 51200.0, 204800, 1482.0, "fixed", overall_mm_s, zone,
                       {"shaft-1x": 0.9, "bearing-hf": 0.5, "de-outer-race": 0.02}, w, (2000.0, 7000.0),
                       [Finding("BPFO", "fan-de", expected_hz=85.45, measured_hz=85.6, prominence_db=21.5, harmonics_found=3, severity_m_s2=0.031)])


def machine_update(machine: str = "ef3", t: float = T0, state: str = "warning",
                   points: tuple[str, ...] = ("de-h", "nde-h"), nan_band: bool = False) -> MachineUpdate:
    pts = {}
    for pid in points:
        r = point_result(machine, pid, t)
        if nan_band:
            r = PointResult(**{**r.__dict__, "bands": {**r.bands, "shaft-1x": float("nan")}})
        vals = {
            "overall": ValueStatus("overall", 1.3, "mm/s", "normal", 2.8, 4.5, 1.2),
            "shaft-1x": ValueStatus("shaft-1x", 0.9, "mm/s", "warning", 0.8, 3.5, 0.4, latched=True),
            "de-outer-race": ValueStatus("de-outer-race", 0.02, "m/s^2", "learning", None, None, None),
            "bearing-hf": ValueStatus("bearing-hf", 0.5, "m/s^2", "normal", 1.0, 2.0, 0.25),
        }
        pts[pid] = PointUpdate(pid, state, "shaft-1x above warning", r, SensorHealth(True), vals)
    ev = [AlarmEvent(t, machine, points[0], "shaft-1x", "normal", "warning", 0.9, "mm/s", 0.8, "warning",
                     "0.9 mm/s above warning 0.8 (absolute)")]
    return MachineUpdate(machine, t, 1482.0, "fixed", state, "de-h: shaft-1x above warning", pts, ev)


def stalled_update(machine: str = "ef3", t: float = T0, points: tuple[str, ...] = ("de-h", "nde-h")) -> MachineUpdate:
    h = SensorHealth(ok=False, fault="stalled", reason="input stalled")
    pts = {pid: PointUpdate(pid, "sensor_fault", "sensor stalled: input stalled", None, h, {}) for pid in points}
    return MachineUpdate(machine, t, None, "", "sensor_fault", "stalled", pts, [])
