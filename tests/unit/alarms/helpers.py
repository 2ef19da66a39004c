"""Small machines and hand-made analysis results for the alarm tests."""

from __future__ import annotations

from rotorwatch.analysis.result import PointResult, Waveform
from rotorwatch.settings.models import Machine


def machine(
    *,
    learning_hours: float = 1.0,
    min_learning_updates: int = 5,
    overall_levels: dict | None = None,
    band_levels: dict | None = None,
    band_quantity: str = "envelope",
    **extra,
) -> Machine:
    doc = {
        "id": "fan1",
        "speed": {"mode": "fixed", "rpm": 1500},
        "bearings": [{"id": "b1", "elements": 9, "element_diameter": 10.0, "pitch_diameter": 50.0}],
        "points": [
            {"id": "p1", "bearing": "b1", "sensor": {"channel": 0, "sensitivity_mv_per_g": 100.0}},
            {"id": "p2", "bearing": "b1", "sensor": {"channel": 1, "sensitivity_mv_per_g": 100.0}},
        ],
        "bands": [
            {
                "name": "outer",
                "quantity": band_quantity,
                "feature": "bpfo",
                "bearing": "b1",
                "levels": band_levels if band_levels is not None else {"relative_warning": 2.0, "relative_alarm": 4.0, "on_delay_updates": 2},
            }
        ],
        "overall": {"levels": overall_levels if overall_levels is not None else {"warning": 2.8, "alarm": 4.5, "on_delay_updates": 2}},
        "alarms": {"learning_hours": learning_hours, "min_learning_updates": min_learning_updates},
    }
    doc.update(extra)
    return Machine.model_validate(doc)


def result(point_id: str, time_s: float, overall: float = 1.0, outer: float = 0.1, rpm: float = 1500.0) -> PointResult:
    return PointResult(
        machine_id="fan1",
        point_id=point_id,
        time_s=time_s,
        fs_hz=25600.0,
        n_samples=102400,
        rpm=rpm,
        rpm_source="fixed",
        overall_velocity_mm_s=overall,
        iso_zone="A" if overall < 1.4 else "B" if overall < 2.8 else "C" if overall < 4.5 else "D",
        bands={"outer": outer},
        waveform=Waveform(peak_m_s2=1.0, rms_m_s2=0.3, crest_factor=3.3, kurtosis=3.0, mean_m_s2=0.0),
        envelope_band_hz=(2000.0, 7000.0),
    )
