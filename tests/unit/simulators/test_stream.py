"""The continuous stream: chunks concatenate to one long render, channel map, tach pulses."""

from __future__ import annotations

import itertools

import numpy as np
import pytest

from .helpers import renderer_for

FS = 51200.0
DAY = 86400.0

EVERYTHING = dict(
    healthy={"unbalance_mm_s": 1.0, "misalignment_mm_s": 0.3, "looseness_mm_s": 0.4, "blade_pass_mm_s": 0.4,
             "noise_m_s2": 0.3, "speed_drift_pct": 0.3},
    changes=[
        {"start_day": 0.0, "end_day": 1.0, "component": "outer_race", "bearing": "b1", "to": 3.0},
        {"start_day": 0.0, "end_day": 1.0, "component": "inner_race", "bearing": "b1", "to": 2.0, "shape": "exponential"},
        {"start_day": 0.0, "end_day": 1.0, "component": "ball", "bearing": "b1", "to": 2.0},
        {"start_day": 0.0, "end_day": 1.0, "component": "speed_rpm", "to": 1700.0},
        {"start_day": 0.04, "end_day": 0.05, "component": "sensor", "points": ["p1"], "fault": "dropouts", "value": 0.3},
        {"start_day": 0.04, "end_day": 0.05, "component": "sensor", "points": ["p2"], "fault": "bias_step", "value": 0.01},
    ],
)
POINTS = [
    {"id": "p1", "bearing": "b1", "sensor": {"channel": 0, "sensitivity_mv_per_g": 100.0}},
    {"id": "p2", "sensor": {"channel": 2, "sensitivity_mv_per_g": 50.0}},
]


def _renderer(tmp_path, **config):
    return renderer_for(tmp_path, config_kwargs={"points": POINTS, "blades": 7, "fs_hz": FS, **config}, **EVERYTHING)


def test_chunks_equal_one_long_render(tmp_path):
    r = _renderer(tmp_path)
    start = 0.04 * DAY + 0.3  # inside the fault spans, mid-ramp, mid-second
    chunk, count = 3000, 20
    chunks = list(itertools.islice(r.stream(FS, chunk, start_s=start), count))
    stream = np.concatenate([c for _, c in chunks])
    whole = r.snapshot(start, chunk * count / FS, FS)
    assert stream.shape == (chunk * count, 3) and stream.dtype == np.float32
    for pid, col in (("p1", 0), ("p2", 2)):
        # bit for bit: every sample is a function of its absolute index alone
        assert np.array_equal(stream[:, col], whole[pid].astype(np.float32))
    assert np.count_nonzero(stream[:, 0] == 0) > 0  # the dropouts are in it
    t0 = [t for t, _ in chunks]
    assert t0[0] == pytest.approx(round(start * FS) / FS)
    assert np.allclose(np.diff(t0), chunk / FS)


def test_chunks_late_in_the_scenario(tmp_path):
    # at day 29 the absolute-time arithmetic still lines chunks up with a long render
    r = _renderer(tmp_path)
    start = 29 * DAY + 0.123
    stream = np.concatenate([c for _, c in itertools.islice(r.stream(FS, 4096, start_s=start), 8)])
    whole = r.snapshot(start, 8 * 4096 / FS, FS)["p1"].astype(np.float32)
    assert np.array_equal(stream[:, 0], whole)


def test_unused_channels_carry_the_floor(tmp_path):
    r = _renderer(tmp_path)
    _, frames = next(r.stream(FS, 8192))
    assert np.std(frames[:, 1]) == pytest.approx(2e-5, rel=0.1)


def test_channel_count(tmp_path):
    r = _renderer(tmp_path)
    assert next(r.stream(FS, 256, channels=5))[1].shape == (256, 5)
    with pytest.raises(Exception, match="uses input channel 2"):
        next(r.stream(FS, 256, channels=2))


def test_tach_channel_pulses_once_per_revolution(tmp_path):
    speed = {"mode": "tach", "rpm": 1797.0, "tach_channel": 3}
    r = _renderer(tmp_path, speed=speed, channels=4)
    _, frames = next(r.stream(FS, int(FS * 2)))
    high = frames[:, 3] > 0.45
    pulses = np.count_nonzero(high[1:] & ~high[:-1])
    expected = 2.0 * r.true_rpm(0.0) / 60.0
    assert abs(pulses - expected) <= 1.5
