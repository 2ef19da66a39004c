"""Sensor checks on raw volts blocks: each fault found, a good signal passes.

The thresholds are common practice (no single source): 0.1 mV RMS noise floor, 1 % clip margin with
0.1 % of samples, 5 % of the input range for a bias shift, 32 exact zeros in a row for a dropout.
"""

from __future__ import annotations

import numpy as np
import pytest

from rotorwatch.alarms.sensor_checks import check_block
from rotorwatch.settings.models import Sensor

FS_HZ = 25600.0
SENSOR = Sensor(channel=0, sensitivity_mv_per_g=100.0, input_range_v=1.0)


def good_block(n: int = 25600, rms_v: float = 0.05, seed: int = 1) -> np.ndarray:
    rng = np.random.default_rng(seed)
    t = np.arange(n) / FS_HZ
    return rms_v * np.sqrt(2) * np.sin(2 * np.pi * 24.7 * t) + rng.normal(0, rms_v / 5, n)


def test_good_signal_passes():
    h = check_block(good_block(), SENSOR)
    assert h.ok and h.fault is None
    assert h.rms_v == pytest.approx(np.sqrt(0.05**2 + 0.01**2), rel=0.02)
    assert abs(h.mean_v) < 1e-3 and h.clipped_fraction == 0.0


def test_quiet_but_live_signal_is_not_disconnected():
    assert check_block(good_block(rms_v=0.0005), SENSOR).ok  # 0.5 mV RMS: a quiet machine


def test_disconnected_sensor_at_noise_floor():
    rng = np.random.default_rng(2)
    h = check_block(rng.normal(0, 2e-5, 25600), SENSOR)  # 20 uV RMS
    assert (h.ok, h.fault) == (False, "disconnected")
    assert "noise floor" in h.reason


def test_clipping():
    x = np.clip(good_block(rms_v=0.8), -1.0, 1.0)  # 1.13 V peak into a 1 V input
    h = check_block(x, SENSOR)
    assert (h.ok, h.fault) == (False, "clipping")
    assert h.clipped_fraction > 0.001


def test_a_few_peaks_at_full_scale_are_not_clipping():
    x = good_block()
    x[:10] = 1.0  # 10 of 25600 samples, 0.04 %
    assert check_block(x, SENSOR).ok


def test_flatline():
    h = check_block(np.full(4096, 0.0123), SENSOR)
    assert (h.ok, h.fault) == (False, "flatline")
    assert check_block(np.zeros(4096), SENSOR).fault == "flatline"


def test_bias_shift():
    h = check_block(good_block() + 0.3, SENSOR)
    assert (h.ok, h.fault) == (False, "bias_shift")
    assert h.mean_v == pytest.approx(0.3, abs=0.01)


def test_dropout_run_of_exact_zeros():
    x = good_block()
    x[1000:1100] = 0.0
    h = check_block(x, SENSOR)
    assert (h.ok, h.fault) == (False, "dropout")
    assert "100 consecutive" in h.reason


def test_single_zero_samples_are_fine():
    x = good_block()
    x[::500] = 0.0
    assert check_block(x, SENSOR).ok


def test_non_finite_samples():
    x = good_block()
    x[5] = np.nan
    h = check_block(x, SENSOR)
    assert (h.ok, h.fault) == (False, "invalid")


def test_empty_block():
    assert check_block(np.array([]), SENSOR).fault == "dropout"
