"""Small machines and synthetic signals for the analysis tests (invented test data, not check values)."""

from __future__ import annotations

import numpy as np

from rotorwatch.settings.models import Machine

G_N = 9.80665  # m/s^2, 3rd CGPM (1901); ISO 80000-3


def machine(*, rpm: float = 1800.0, mode: str = "fixed", bands: list[dict] | None = None, envelope: dict | None = None,
            analysis: dict | None = None, bearing: dict | None = None, **extra) -> Machine:
    """A one-point machine; the bearing is the university rig's drive-end geometry unless given."""
    speed = {"mode": mode, "rpm": rpm}
    if mode == "estimated":
        speed.update(min_rpm=rpm * 0.9, max_rpm=rpm * 1.1)
    if mode == "tach":
        speed.update(tach_channel=1)
    if mode == "mqtt":
        speed.update(mqtt_topic="plant/drive/speed")
    an = {"lines": 3200, "envelope": envelope if envelope is not None else {"band_hz": [2000.0, 5000.0]}}
    an.update(analysis or {})
    doc = {
        "id": "m1",
        "speed": speed,
        "bearings": [bearing or {"id": "b1", "elements": 9, "element_diameter": 0.3126, "pitch_diameter": 1.537,
                                 "diameter_unit": "in"}],
        "points": [{"id": "p1", "bearing": "b1", "sensor": {"channel": 0, "sensitivity_mv_per_g": 100.0}}],
        "bands": bands or [],
        "analysis": an,
    }
    doc.update(extra)
    return Machine.model_validate(doc)


def impact_train(fs_hz: float, seconds: float, rate_hz: float, resonance_hz: float = 3000.0, *, amplitude: float = 5.0,
                 damping: float = 0.05, jitter: float = 0.005, noise_rms: float = 0.5, seed: int = 0) -> np.ndarray:
    """Impacts at ``rate_hz`` (random jitter, fraction of the period) each ringing a decaying resonance, in
    white noise: the usual simulated bearing-fault signal (Randall & Antoni 2011; from memory)."""
    rng = np.random.default_rng(seed)
    n = int(round(seconds * fs_hz))
    period = fs_hz / rate_hz
    count = int(n / period)
    at = np.round(np.arange(count) * period + rng.normal(0.0, jitter * period, count)).astype(int)
    pulses = np.zeros(n)
    pulses[at[(at >= 0) & (at < n)]] = amplitude
    t = np.arange(int(8 / (damping * 2 * np.pi * resonance_hz) * fs_hz)) / fs_hz
    ring = np.exp(-damping * 2 * np.pi * resonance_hz * t) * np.sin(2 * np.pi * resonance_hz * t)
    return np.convolve(pulses, ring)[:n] + rng.normal(0.0, noise_rms, n)
