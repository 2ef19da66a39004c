"""Edge response of the overall velocity band: what a 1 mm/s tone reads near the band's edges.

Three columns per tone frequency: rotorwatch's reading (the point analysis on a 4 s window), an ideal band
(1 inside, 0 outside, by definition) and the band of an ISO 2954:2012 instrument, band-limited by a
3rd-order Butterworth high-pass and low-pass (references.md section 1, confirmed (search)), computed with
``scipy.signal.butter`` + ``scipy.signal.sosfilt`` as the reference implementation.

``python tests/unit/analysis/edge_response.py`` prints the table that deploy/numbers.md holds;
test_overall_band.py checks the document against a fresh measurement.
"""

from __future__ import annotations

import numpy as np

FS_HZ = 51200.0
WINDOW_S = 4.0
HIGH_HZ = 1000.0
# (low edge, the tone frequencies as multiples of an edge): (edge name, multiple)
ROWS = [("low", 0.5), ("low", 0.8), ("low", 0.9), ("low", 1.0), ("low", 1.1), ("low", 1.2), ("low", 1.5), ("low", 2.0),
        ("high", 0.8), ("high", 0.9), ("high", 1.0), ("high", 1.1), ("high", 1.25)]
LOW_EDGES_HZ = (10.0, 2.0)


def _machine(low_hz: float, rpm: float):
    from rotorwatch.settings.models import Machine

    return Machine.model_validate({
        "id": "m", "speed": {"mode": "fixed", "rpm": rpm},
        "points": [{"id": "p", "sensor": {"channel": 0, "sensitivity_mv_per_g": 100.0}}],
        "overall": {"low_hz": low_hz, "high_hz": HIGH_HZ},
        "analysis": {"fmax_hz": 10000, "lines": 3200, "window_s": WINDOW_S, "envelope": {"band_hz": [2000, 5000]}},
    })


def tone_m_s2(f_hz: float, velocity_mm_s: float, seconds: float = WINDOW_S, phase: float = 0.4) -> np.ndarray:
    """A sine of ``velocity_mm_s`` RMS velocity as acceleration: |a| = 2 pi f |v| (formula)."""
    t = np.arange(int(round(seconds * FS_HZ))) / FS_HZ
    return velocity_mm_s / 1000.0 * 2 * np.pi * f_hz * np.sqrt(2) * np.sin(2 * np.pi * f_hz * t + phase)


def rotorwatch_reading(f_hz: float, low_hz: float) -> float:
    """Overall velocity (mm/s) rotorwatch reads for a 1 mm/s tone at ``f_hz``, band ``low_hz``-1000 Hz."""
    from rotorwatch.analysis.point import PointAnalyzer

    m = _machine(low_hz, 1500.0)
    return PointAnalyzer(m, m.points[0], FS_HZ).analyze(tone_m_s2(f_hz, 1.0)).overall_velocity_mm_s


def butterworth_reading(f_hz: float, low_hz: float, high_hz: float = HIGH_HZ) -> float:
    """RMS gain of a 3rd-order Butterworth high-pass at ``low_hz`` followed by a 3rd-order low-pass at
    ``high_hz`` for a tone at ``f_hz``: scipy.signal.butter + sosfilt, measured in the steady state."""
    import scipy.signal

    fs = 20.0 * max(f_hz, high_hz)
    settle_s = 40.0 / min(f_hz, low_hz)  # the high-pass rings for a few periods of its corner
    t = np.arange(int((settle_s + 20.0 / f_hz) * fs)) / fs
    x = np.sqrt(2) * np.sin(2 * np.pi * f_hz * t)
    hp = scipy.signal.butter(3, low_hz, btype="highpass", fs=fs, output="sos")
    lp = scipy.signal.butter(3, high_hz, btype="lowpass", fs=fs, output="sos")
    y = scipy.signal.sosfilt(lp, scipy.signal.sosfilt(hp, x))
    tail = y[int(settle_s * fs):]
    n_periods = int(tail.size * f_hz / fs)
    tail = tail[: int(round(n_periods * fs / f_hz))]  # whole periods
    return float(np.sqrt(np.mean(tail**2)))


def rows() -> list[dict]:
    out = []
    for low in LOW_EDGES_HZ:
        for edge, mult in ROWS:
            f = mult * (low if edge == "low" else HIGH_HZ)
            ideal = 1.0 if low <= f <= HIGH_HZ else 0.0
            if edge == "high" and low != LOW_EDGES_HZ[0]:
                continue  # the high edge does not depend on the low one
            out.append({"low_hz": low, "edge": edge, "multiple": mult, "f_hz": f,
                        "rotorwatch": rotorwatch_reading(f, low), "ideal": ideal,
                        "butterworth": butterworth_reading(f, low)})
    return out


def table() -> str:
    lines = ["| band | tone | tone Hz | rotorwatch | ideal band | 3rd-order Butterworth (ISO 2954) |",
             "|---|---|---|---|---|---|"]
    for r in rows():
        band = f"{r['low_hz']:g}-{HIGH_HZ:g} Hz"
        where = f"{r['multiple']:g} x {r['edge']} edge"
        lines.append(f"| {band} | {where} | {r['f_hz']:.4g} | {r['rotorwatch']:.3f} | {r['ideal']:.3f} | "
                     f"{r['butterworth']:.3f} |")
    return "\n".join(lines)


if __name__ == "__main__":
    print(table())
