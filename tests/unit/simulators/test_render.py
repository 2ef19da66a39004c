"""Shaft-rate components, determinism and additivity, checked with scipy rather than our analysis."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import signal

from rotorwatch.errors import InputError
from rotorwatch.simulators.components import ShaftPhasor, order_tone

from .helpers import QUIET, renderer_for

FS = 48000.0


def _tone_rms(x: np.ndarray, fs: float, f_hz: float) -> float:
    """RMS of the tone near f_hz read off a flat-top 'spectrum' Welch estimate (peak = RMS^2).

    scipy.signal.welch docstring example (references.md section 4): a flat-top window reads a tone's
    RMS^2 within about 0.01 dB wherever it falls between bins.
    """
    f, p = signal.welch(x, fs, window="flattop", nperseg=min(1 << 15, len(x)), scaling="spectrum")
    near = np.abs(f - f_hz) <= 3 * (f[1] - f[0])
    return float(np.sqrt(np.max(p[near])))


def test_one_g_at_100_hz_is_15_6_mm_s():
    # references.md section 5: a = 1 g_n RMS at 100 Hz <-> v = 15.6078 mm/s RMS (|v| = |a| / (2 pi f))
    t = np.arange(48000) / 48000.0
    frac = (100.0 * t) % 1.0
    a = order_tone(frac, 100.0, 1.0, 15.6078, 0.3)
    assert np.sqrt(np.mean(a ** 2)) == pytest.approx(9.80665, rel=1e-4)


def test_phasor_equals_the_plain_tone():
    rng = np.random.default_rng(2)
    frac, f = rng.uniform(0, 1, 4000), 24.7 + rng.normal(0, 0.01, 4000)
    ph = ShaftPhasor(frac, f)
    for order in (1, 2, 5, 8, 11, 22, 33, 1.5):
        ref = order_tone(frac, f, order, 0.7, 1.1)
        assert np.max(np.abs(ph.tone(order, 0.7, 1.1) - ref)) <= 1e-12 * np.max(np.abs(ref))


@pytest.mark.parametrize("v_mm_s,rpm", [(1.0, 1797.0), (4.5, 1482.0), (0.3, 3000.0)])
def test_unbalance_reads_its_velocity(tmp_path, v_mm_s, rpm):
    # 1x of v mm/s RMS: acceleration tone / (2 pi f) read with scipy.signal.welch = v (ISO 10816-1 Annex A)
    r = renderer_for(tmp_path, config_kwargs={"rpm": rpm}, healthy={**QUIET, "unbalance_mm_s": v_mm_s})
    a = r.snapshot_accel(3600.0, 8.0, FS)["p1"]
    f_r = rpm / 60.0
    v = _tone_rms(a, FS, f_r) / (2 * math.pi * f_r) * 1000.0
    assert v == pytest.approx(v_mm_s, rel=0.01)


def test_blade_pass_at_blades_times_speed(tmp_path):
    # 8 blades at 1480 r/min -> blade pass 197.33 Hz (references.md section 8, common practice)
    r = renderer_for(tmp_path, config_kwargs={"rpm": 1480.0, "blades": 8},
                     healthy={**QUIET, "blade_pass_mm_s": 2.0, "noise_m_s2": 0.05})
    a = r.snapshot_accel(0.0, 8.0, FS)["p1"]
    f, p = signal.welch(a, FS, window="flattop", nperseg=1 << 15, scaling="spectrum")
    velocity_power = p[1:] / (2 * np.pi * f[1:]) ** 2
    assert f[1:][np.argmax(velocity_power)] == pytest.approx(197.33, abs=f[1])
    v1 = _tone_rms(a, FS, 197.33) / (2 * math.pi * 197.33) * 1000
    v2 = _tone_rms(a, FS, 2 * 197.33) / (2 * math.pi * 2 * 197.33) * 1000
    assert v1 == pytest.approx(2.0, rel=0.02)
    assert v2 == pytest.approx(1.0, rel=0.02)


def test_misalignment_and_looseness_orders(tmp_path):
    r = renderer_for(tmp_path, config_kwargs={"rpm": 1500.0},
                     healthy={**QUIET, "misalignment_mm_s": 1.2, "looseness_mm_s": 2.0})
    a = r.snapshot_accel(0.0, 8.0, FS)["p1"]
    v = {k: _tone_rms(a, FS, 25.0 * k) / (2 * math.pi * 25.0 * k) * 1000 for k in range(1, 10)}
    assert v[2] == pytest.approx(1.2, rel=0.01)
    assert v[1] < 0.01 and v[9] < 0.01
    assert math.sqrt(sum(v[k] ** 2 for k in range(3, 9))) == pytest.approx(2.0, rel=0.02)
    assert v[3] > v[4] > v[8]


def test_noise_rms(tmp_path):
    r = renderer_for(tmp_path, healthy={**QUIET, "noise_m_s2": 0.7})
    a = r.snapshot_accel(100.0, 4.0, FS)["p1"]
    assert np.std(a) == pytest.approx(0.7, rel=0.01)
    assert abs(np.mean(a)) < 0.01


def test_rms_squares_add(tmp_path):
    # independent components: RMS^2 of the sum = sum of RMS^2 (uncorrelated tones and noise)
    parts = {"unbalance_mm_s": 2.0, "misalignment_mm_s": 0.8, "looseness_mm_s": 0.6, "noise_m_s2": 0.4}
    outer = [{"start_day": 0, "component": "outer_race", "bearing": "b1", "to": 6.0, "shape": "step"}]
    (tmp_path / "all").mkdir()
    total = renderer_for(tmp_path / "all", healthy={**QUIET, **parts}, changes=outer)
    x = total.snapshot_accel(7200.0, 8.0, FS)["p1"]
    ms_parts = 0.0
    for key, value in parts.items():
        d = tmp_path / key
        d.mkdir()
        ms_parts += np.mean(renderer_for(d, healthy={**QUIET, key: value}).snapshot_accel(7200.0, 8.0, FS)["p1"] ** 2)
    d = tmp_path / "outer"
    d.mkdir()
    ms_parts += np.mean(renderer_for(d, changes=outer).snapshot_accel(7200.0, 8.0, FS)["p1"] ** 2)
    assert np.mean(x ** 2) == pytest.approx(ms_parts, rel=0.02)


def test_same_seed_same_signal_other_seed_other_signal(tmp_path):
    healthy = {**QUIET, "unbalance_mm_s": 1.0, "noise_m_s2": 0.3, "speed_drift_pct": 0.3}
    ch = [{"start_day": 0.1, "end_day": 1.0, "component": "inner_race", "bearing": "b1", "to": 5.0}]
    for name in ("a", "b", "c"):
        (tmp_path / name).mkdir()
    a = renderer_for(tmp_path / "a", healthy=healthy, changes=ch, seed=3).snapshot(50000.0, 1.0, FS)["p1"]
    b = renderer_for(tmp_path / "b", healthy=healthy, changes=ch, seed=3).snapshot(50000.0, 1.0, FS)["p1"]
    c = renderer_for(tmp_path / "c", healthy=healthy, changes=ch, seed=4).snapshot(50000.0, 1.0, FS)["p1"]
    assert np.array_equal(a, b)
    assert not np.allclose(a, c)


def test_query_order_does_not_matter(tmp_path):
    r = renderer_for(tmp_path, healthy={**QUIET, "noise_m_s2": 0.3, "unbalance_mm_s": 1.0},
                     changes=[{"start_day": 0, "end_day": 2, "component": "outer_race", "bearing": "b1", "to": 4.0}])
    late_first = r.snapshot(90000.0, 0.5, FS)["p1"]
    r.snapshot(10.0, 0.5, FS)
    assert np.array_equal(late_first, r.snapshot(90000.0, 0.5, FS)["p1"])


def test_speed_drift_and_speed_changes(tmp_path):
    r = renderer_for(tmp_path, healthy={**QUIET, "speed_drift_pct": 0.5, "unbalance_mm_s": 1.0},
                     changes=[{"start_day": 1.0, "end_day": 1.5, "component": "speed_rpm", "to": 1500.0}],
                     duration_days=2.0)
    t = np.linspace(0, 86400, 2001)
    rpm = r.true_rpm(t)
    assert np.max(np.abs(rpm / 1797.0 - 1)) <= 0.005 + 1e-9
    assert np.std(rpm) > 0.5  # it does wander
    assert abs(r.true_rpm(1.75 * 86400) - 1500.0) <= 0.005 * 1797 + 1e-9
    # the 1x line follows the speed (Welch peak within one bin)
    a = r.snapshot_accel(1.8 * 86400, 8.0, FS)["p1"]
    f, p = signal.welch(a, FS, nperseg=1 << 17)
    assert f[np.argmax(p)] == pytest.approx(r.true_rpm(1.8 * 86400) / 60, abs=f[1] - f[0])


def test_times_follow_the_cadence(tmp_path):
    r = renderer_for(tmp_path, duration_days=1.0, cadence_s=600.0)
    t = r.times()
    assert t[0] == 0.0 and len(t) == 144 and np.allclose(np.diff(t), 600.0)


def test_beyond_the_duration_the_last_state_holds(tmp_path):
    r = renderer_for(tmp_path, duration_days=1.0,
                     changes=[{"start_day": 0.5, "end_day": 2.0, "component": "unbalance", "to": 4.0}])
    end = r.severities(86400.0)["p1"]["unbalance"]
    assert end == pytest.approx(4.0 / 3.0)  # a third of the way along the ramp when the scenario ends
    assert r.severities(10 * 86400.0)["p1"]["unbalance"] == pytest.approx(end)
    a = r.snapshot_accel(10 * 86400.0, 4.0, FS)["p1"]
    assert _tone_rms(a, FS, 29.95) / (2 * math.pi * 29.95) * 1000 == pytest.approx(4.0 / 3.0, rel=0.01)


def test_bad_render_requests_are_one_line_errors(tmp_path):
    # with an impact train, a rate that cannot carry the 3.5 kHz housing resonance is refused
    r = renderer_for(tmp_path, changes=[{"start_day": 0, "component": "ball", "bearing": "b1", "to": 1.0, "shape": "step"}])
    for call in (lambda: r.snapshot(0.0, 1.0, 5000.0), lambda: r.snapshot(-1.0, 1.0, FS),
                 lambda: r.snapshot(0.0, float("nan"), FS), lambda: next(r.stream(FS, 0))):
        with pytest.raises(InputError) as info:
            call()
        assert "\n" not in str(info.value)


def test_low_rates_are_fine_without_impacts(tmp_path):
    r = renderer_for(tmp_path, healthy={**QUIET, "unbalance_mm_s": 2.0})
    a = r.snapshot_accel(0.0, 4.0, 2000.0)["p1"]
    assert _tone_rms(a, 2000.0, 29.95) / (2 * math.pi * 29.95) * 1000 == pytest.approx(2.0, rel=0.01)
