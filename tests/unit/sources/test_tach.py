"""Speed from a once-per-revolution pulse train.

Check values are computed from the definition rpm = 60 / T_rev (T_rev the time of one revolution):
the synthetic pulse trains below have an exactly known period, including a non-integer number of
samples per revolution, so an error in edge placement or in the formula shows up directly.
"""

from __future__ import annotations

import numpy as np
import pytest

from rotorwatch.sources.tach import Tachometer, rpm_from_pulses

FS = 51200.0


def pulse_train(rpm: float, seconds: float, *, pulses_per_rev: int = 1, high_v: float = 5.0, duty: float = 0.1,
                rise_samples: float = 4.0, noise_v: float = 0.0, drop: tuple[int, ...] = (), seed: int = 0,
                start_phase: float = 0.3) -> np.ndarray:
    """A key-phasor-like signal: pulses of ``duty`` of the period with linear edges of ``rise_samples``."""
    n = int(seconds * FS)
    t = np.arange(n) / FS
    f_pulse = rpm / 60.0 * pulses_per_rev
    cycles = t * f_pulse + start_phase
    phase_s = (cycles % 1.0) / f_pulse          # seconds since the start of the current pulse period
    rise_s = rise_samples / FS
    high_s = duty / f_pulse
    x = np.clip(phase_s / rise_s, 0, 1) * high_v
    x = np.where(phase_s > high_s, np.clip(1 - (phase_s - high_s) / rise_s, 0, 1) * high_v, x)
    for k in drop:  # remove whole pulses (a missed mark on the shaft)
        x[np.floor(cycles).astype(int) == k] = 0.0
    if noise_v:
        x = x + np.random.default_rng(seed).normal(0, noise_v, n)
    return x


@pytest.mark.parametrize("rpm", [297.0, 1482.0, 2950.0, 11_870.5])
def test_rpm_exact_from_pulse_train(rpm):
    x = pulse_train(rpm, 4.0)
    got = rpm_from_pulses(x, FS, threshold_v=2.5)
    assert got == pytest.approx(rpm, rel=1e-3)  # brief: exact to < 0.1 %
    assert got == pytest.approx(rpm, rel=1e-5)  # what linear interpolation of the edge gives here


def test_missing_pulse_and_noise():
    rpm = 1482.0
    x = pulse_train(rpm, 4.0, drop=(20, 41, 42), noise_v=0.2)  # noise well below the 0.5 V hysteresis
    tach = Tachometer(FS, threshold_v=2.5, hysteresis_v=1.0, window_s=4.0)
    tach.feed(x)
    assert tach.rpm() == pytest.approx(rpm, rel=1e-3)
    assert tach.edges.size == pytest.approx(4.0 * rpm / 60 - 3, abs=1.5)


def test_hysteresis_rejects_chatter_on_a_slow_noisy_edge():
    rpm = 600.0
    x = pulse_train(rpm, 3.0, rise_samples=400.0, noise_v=0.15, seed=4)
    with_hyst = Tachometer(FS, threshold_v=2.5, hysteresis_v=1.0, window_s=3.0)
    with_hyst.feed(x)
    assert with_hyst.edges.size == pytest.approx(3.0 * rpm / 60, abs=1.0)
    assert with_hyst.rpm() == pytest.approx(rpm, rel=1e-3)
    chatter = Tachometer(FS, threshold_v=2.5, hysteresis_v=1e-6, window_s=3.0)
    chatter.feed(x)
    assert chatter.edges.size > with_hyst.edges.size  # the check above is not vacuous


def test_several_pulses_per_rev():
    x = pulse_train(1800.0, 2.0, pulses_per_rev=4)
    assert rpm_from_pulses(x, FS, 2.5, pulses_per_rev=4) == pytest.approx(1800.0, rel=1e-4)
    assert rpm_from_pulses(x, FS, 2.5, pulses_per_rev=1) == pytest.approx(7200.0, rel=1e-4)


def test_streamed_in_chunks_equals_whole_record():
    x = pulse_train(1482.0, 3.0, noise_v=0.05)
    whole = Tachometer(FS, 2.5, window_s=10.0)
    whole.feed(x)
    streamed = Tachometer(FS, 2.5, window_s=10.0)
    rng = np.random.default_rng(2)
    pos = 0
    while pos < x.size:
        n = int(rng.integers(1, 5000))
        streamed.feed(x[pos:pos + n])
        pos += n
    np.testing.assert_allclose(streamed.edges, whole.edges, rtol=0, atol=1e-9)
    assert streamed.rpm() == whole.rpm()


def test_no_pulses_or_stopped_gives_none():
    assert rpm_from_pulses(np.zeros(int(FS)), FS, 2.5) is None           # unplugged probe
    assert rpm_from_pulses(np.full(int(FS), 5.0), FS, 2.5) is None       # stuck high
    one = pulse_train(60.0, 1.5)                                         # a single pulse in the record
    assert rpm_from_pulses(one, FS, 2.5) is None
    tach = Tachometer(FS, 2.5, window_s=2.0, timeout_s=1.0)
    tach.feed(pulse_train(1482.0, 2.0))
    assert tach.rpm() == pytest.approx(1482.0, rel=1e-3)
    tach.feed(np.zeros(int(1.5 * FS)))                                   # the machine stops
    assert tach.rpm() is None
    tach.reset()
    assert tach.rpm() is None and tach.edges.size == 0


def test_window_follows_a_speed_change():
    tach = Tachometer(FS, 2.5, window_s=1.0)
    tach.feed(pulse_train(1500.0, 2.0))
    assert tach.rpm() == pytest.approx(1500.0, rel=1e-3)
    tach.feed(pulse_train(1200.0, 2.0))
    assert tach.rpm() == pytest.approx(1200.0, rel=2e-3)


def test_bad_arguments():
    with pytest.raises(ValueError):
        Tachometer(FS, 2.5, pulses_per_rev=0)
    with pytest.raises(ValueError):
        Tachometer(FS, 2.5, hysteresis_v=-1)
