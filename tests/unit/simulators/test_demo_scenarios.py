"""The shipped EF-3 scenarios tell the story their comments promise, measured with scipy alone.

Overall velocity: Welch PSD of acceleration integrated to velocity by 1/(2 pi f) over 10-1000 Hz
(ISO 10816-3 measurement band, from memory; integration as in ISO 10816-1 Annex A; references.md sections
1 and 5). Zones: ISO 20816-3 group 2 rigid boundaries 1.4 / 2.8 / 4.5 mm/s (references.md section 1,
from memory, unconfirmed). Envelope: Butterworth band-pass over the configured 2-7 kHz band,
scipy.signal.hilbert, RMS of the envelope spectrum over +/- 3 % of the first three defect harmonics
(our own measure here, independent of rotorwatch.analysis).
"""

from __future__ import annotations

import math
from functools import cache
from pathlib import Path

import numpy as np
import pytest
from scipy import signal

from rotorwatch.simulators.rates import bearing_orders
from rotorwatch.simulators.render import ScenarioRenderer
from rotorwatch.simulators.scenario import load_scenario

SCENARIOS = Path(__file__).resolve().parents[3] / "config" / "scenarios"
FS = 51200.0
DAY = 86400.0
ZONE_AB, ZONE_BC, ZONE_CD = 1.4, 2.8, 4.5  # ISO 20816-3 group 2 rigid, mm/s (from memory)


@cache
def _renderer(name: str) -> ScenarioRenderer:
    return ScenarioRenderer(load_scenario(SCENARIOS / f"{name}.toml"))


def overall_mm_s(a: np.ndarray, fs: float = FS) -> float:
    f, p = signal.welch(a, fs, nperseg=16384)
    band = (f >= 10) & (f <= 1000)
    return 1000 * math.sqrt(np.sum(p[band] / (2 * np.pi * f[band]) ** 2) * (f[1] - f[0]))


def envelope_band(a: np.ndarray, centre_hz: float, fs: float = FS) -> float:
    sos = signal.butter(4, (2000.0, 7000.0), btype="bandpass", fs=fs, output="sos")
    env = np.abs(signal.hilbert(signal.sosfiltfilt(sos, a)))
    env -= env.mean()
    f, p = signal.welch(env, fs, nperseg=len(env) // 2, scaling="spectrum")
    total = 0.0
    for k in (1, 2, 3):
        near = np.abs(f - k * centre_hz) <= 0.03 * k * centre_hz
        total += np.sum(p[near]) / 1.5  # Hann ENBW 1.5 bins (references.md section 4)
    return math.sqrt(total)


def _accel(name: str, day: float, point: str) -> np.ndarray:
    return _renderer(name).snapshot_accel(day * DAY, 4.0, FS)[point]


def _defect_hz(name: str, bearing: str, defect: str, day: float) -> float:
    r = _renderer(name)
    return bearing_orders(r.machine.bearing(bearing)).impact_order(defect) * r.true_rpm(day * DAY) / 60.0


def test_healthy_month_stays_in_zone_a():
    for day in (0.0, 7.3, 15.0, 29.9):
        for point in ("de-h", "nde-h"):
            assert 1.0 <= overall_mm_s(_accel("healthy", day, point)) < ZONE_AB
    rpm = _renderer("healthy").true_rpm(np.linspace(0, 30 * DAY, 3001))
    assert np.max(np.abs(rpm / 1482.0 - 1)) <= 0.003 + 1e-9  # +/- 0.3 % drift


def test_demo_outer_race_envelope_leads_the_overall_zone():
    name = "demo-outer-race"
    base = np.median([envelope_band(_accel(name, d, "de-h"), _defect_hz(name, "fan-de", "outer_race", d))
                      for d in (0.5, 1.5, 2.5)])
    ratio = {d: envelope_band(_accel(name, d, "de-h"), _defect_hz(name, "fan-de", "outer_race", d)) / base
             for d in (6.0, 20.0, 29.9)}
    assert ratio[6.0] < 1.5  # healthy stretch
    assert ratio[20.0] > 2.5  # the envelope has seen it ...
    assert overall_mm_s(_accel(name, 20.0, "de-h")) < ZONE_AB  # ... while the overall is still zone A
    assert 3.0 <= ratio[29.9] <= 12.0
    assert ZONE_AB <= overall_mm_s(_accel(name, 29.9, "de-h")) < ZONE_BC  # zone B at the very end


def test_inner_race_grows_in_its_band():
    name = "inner-race"
    bpfi = lambda d: _defect_hz(name, "fan-de", "inner_race", d)  # noqa: E731
    base = np.median([envelope_band(_accel(name, d, "de-h"), bpfi(d)) for d in (0.5, 1.5, 2.5)])
    assert 3.0 <= envelope_band(_accel(name, 29.0, "de-h"), bpfi(29.0)) / base <= 12.0
    assert overall_mm_s(_accel(name, 29.0, "de-h")) < ZONE_AB


def test_unbalance_reaches_zone_c():
    assert overall_mm_s(_accel("unbalance", 1.0, "de-h")) < ZONE_AB
    assert ZONE_BC <= overall_mm_s(_accel("unbalance", 29.0, "de-h")) < ZONE_CD
    assert ZONE_BC <= overall_mm_s(_accel("unbalance", 29.0, "nde-h")) < ZONE_CD


def test_blade_pass_grows_fourfold():
    r = _renderer("blade-damage")

    def blade_mm_s(day):
        a = _accel("blade-damage", day, "de-h")
        f_bp = 11 * r.true_rpm(day * DAY) / 60
        f, p = signal.welch(a, FS, window="flattop", nperseg=1 << 15, scaling="spectrum")
        near = np.abs(f - f_bp) < 3 * (f[1] - f[0])
        return math.sqrt(np.max(p[near])) / (2 * np.pi * f_bp) * 1000

    assert blade_mm_s(1.0) == pytest.approx(0.4, rel=0.03)
    assert blade_mm_s(28.0) == pytest.approx(1.6, rel=0.03)


def test_sensor_faults_at_their_hours():
    r = _renderer("sensor-fault")
    v = lambda hour, point="de-h": r.snapshot(hour * 3600.0, 4.0, FS)[point]  # noqa: E731
    assert np.sqrt(np.mean(v(132) ** 2)) == pytest.approx(2e-5, rel=0.05)  # unplugged
    assert np.sqrt(np.mean(v(131) ** 2)) > 1e-3
    for hour in (252, 253, 254):
        assert np.count_nonzero(np.abs(v(hour)) == 1.0) > 1000  # clipped at the 1 V input range
    assert np.count_nonzero(v(372, "nde-h") == 0.0) > 0.02 * 4 * FS  # dropouts
    # bias step at hour 480 on an AC-coupled input (0.5 Hz, tau 0.32 s): the snapshot that starts with it
    # holds the coupling's decaying step response (its first sample reads the whole 0.08 V step) ...
    at_step = v(20 * 24) - r.snapshot_accel(20 * 24 * 3600.0, 4.0, FS, through_chain=True)["de-h"] * 0.1 / 9.80665
    assert at_step[0] == pytest.approx(0.08, abs=1e-3)
    assert np.mean(at_step[:int(0.32 * FS)]) == pytest.approx(0.08 * (1 - math.exp(-1)), abs=2e-3)
    # ... and an hour later the input shows nothing of the bias, which stays (the coupling removes DC)
    assert abs(np.mean(v(20 * 24 + 1))) < 1e-3 and abs(np.mean(v(29 * 24))) < 1e-3
    assert r.severities(29 * 24 * 3600.0)["de-h"]["sensor:bias_step"] == pytest.approx(0.08)
    assert abs(np.mean(v(19 * 24))) < 1e-3
