"""Sensor checks on the parts of a window: a fault that fills only the newest part of an overlapping
window is found, and healthy signals (loud, slow, quiet) never trip a part check.

Streamed like the daemon streams: a 4 s window that moves by 1 s per update over one long signal (so
consecutive windows overlap by 3 s). Thresholds are common practice (no single source), as in
agent/alarms/sensor_checks.py. The mean of a sine over whole and partial periods is plain calculus
(|mean| <= 2A / (omega T)); no outside value is needed.
"""

from __future__ import annotations

import numpy as np
import pytest

from rotorwatch.alarms.sensor_checks import DEFAULT_LIMITS, check_block, part_edges
from rotorwatch.settings.models import Sensor

FS_HZ = 25600.0
WINDOW_S = 4.0
STEP_S = 1.0
SENSOR = Sensor(channel=0, sensitivity_mv_per_g=100.0, input_range_v=1.0)


def live_signal(duration_s: float, rms_v: float = 0.02, seed: int = 3) -> np.ndarray:
    """A running machine at the input: 1x at 24.7 Hz, 2x, broadband noise (volts)."""
    rng = np.random.default_rng(seed)
    t = np.arange(int(duration_s * FS_HZ)) / FS_HZ
    x = rms_v * np.sqrt(2) * (0.8 * np.sin(2 * np.pi * 24.7 * t) + 0.3 * np.sin(2 * np.pi * 49.4 * t + 1.0))
    return x + rng.normal(0, rms_v / 4, t.size)


def windows(x: np.ndarray):
    """(end time s, window) as the daemon takes them: the newest WINDOW_S every STEP_S."""
    n_win, n_step = int(WINDOW_S * FS_HZ), int(STEP_S * FS_HZ)
    for end in range(n_win, x.size + 1, n_step):
        yield end / FS_HZ, x[end - n_win:end]


def faults_over_time(x: np.ndarray) -> list[tuple[float, str | None]]:
    return [(t, check_block(w, SENSOR).fault) for t, w in windows(x)]


def apply(fault: str, x: np.ndarray, a_s: float, b_s: float) -> np.ndarray:
    y = x.copy()
    s = slice(int(a_s * FS_HZ), int(b_s * FS_HZ))
    rng = np.random.default_rng(9)
    if fault == "disconnected":
        y[s] = rng.normal(0, 2e-5, y[s].size)  # the interface's own noise, 20 uV RMS
    elif fault == "clipping":
        y[s] = np.clip(y[s] * 200.0, -1.0, 1.0)  # an overload into a 1 V input
    elif fault == "bias_shift":
        y[s] += 0.08
    elif fault == "flatline":
        y[s] = 0.0123  # a converter that holds its last value
    return y


@pytest.mark.parametrize("fault", ["disconnected", "clipping", "bias_shift", "flatline"])
def test_fault_inside_overlapping_windows_is_found_within_two_updates_and_clears(fault):
    start_s, end_s = 20.4, 31.7  # not on the update grid
    x = apply(fault, live_signal(48.0), start_s, end_s)
    seen = faults_over_time(x)
    touched = [(t, f) for t, f in seen if t > start_s]  # windows holding at least one faulty sample
    assert all(f is None for t, f in seen if t <= start_s), seen  # no false alarm before
    # the second update after the fault started reads it (the first may see too little of it)
    assert touched[1][1] == fault, touched[:3]
    # ... and every update while any faulty sample is in the window
    assert all(f == fault for t, f in touched if start_s + STEP_S <= t <= end_s), touched
    # once the faulty samples have left the window, the point is healthy again
    after = [(t, f) for t, f in seen if t - WINDOW_S >= end_s]
    assert after and all(f is None for _, f in after), after


def test_whole_window_checks_alone_would_be_late():
    """The reason for the parts: the same unplugged cable judged on whole windows is found only once
    the noise floor fills the window, WINDOW_S / STEP_S updates later."""
    limits_whole = type(DEFAULT_LIMITS)(max_parts=1)
    x = apply("disconnected", live_signal(40.0), 20.4, 40.0)
    whole = [(t, check_block(w, SENSOR, limits_whole).fault) for t, w in windows(x) if t > 20.4]
    first = next(i for i, (_, f) in enumerate(whole) if f is not None)
    assert first >= 3  # a check that cannot fail would not tell these apart
    parts = [(t, check_block(w, SENSOR).fault) for t, w in windows(x) if t > 20.4]
    assert next(i for i, (_, f) in enumerate(parts) if f is not None) <= 1


@pytest.mark.parametrize("rms_v,shaft_hz", [(0.0004, 24.7), (0.25, 24.7), (0.05, 4.0)])
def test_healthy_signals_pass_every_part(rms_v, shaft_hz):
    """Quiet (0.4 mV), loud (0.25 V RMS, near the range without touching it) and slow (4 Hz shaft):
    no part reads as disconnected, clipped or biased."""
    rng = np.random.default_rng(5)
    t = np.arange(int(12 * FS_HZ)) / FS_HZ
    x = rms_v * np.sqrt(2) * np.sin(2 * np.pi * shaft_hz * t) + rng.normal(0, rms_v / 3, t.size)
    assert np.abs(x).max() < 0.99  # never within the clip margin
    assert [f for _, f in faults_over_time(x)] == [None] * len(list(windows(x)))


def test_part_mean_of_a_slow_sine_stays_below_the_bias_limit():
    """Bound check: a part holds >= 2 periods of a 25 Hz shaft at 51.2 kHz, so |mean| <= A / (2 pi)."""
    fs, n = 51200.0, 51200 * 4
    edges = part_edges(n)
    part_s = np.diff(edges).min() / fs
    assert part_s * 24.7 >= 2.0
    amplitude_v = 0.3  # 0.3 V of 1x at 100 mV/g is ~3 g, ~140 mm/s RMS: far beyond any running machine
    assert amplitude_v / (2 * np.pi) < DEFAULT_LIMITS.bias_fraction * SENSOR.input_range_v


def test_a_few_full_scale_peaks_in_one_part_are_not_clipping():
    x = live_signal(4.0)
    x[1000:1010] = 1.0  # ten samples of 12800 in the first part: 0.08 %, under the 1 % part bound
    assert check_block(x, SENSOR).ok


def test_reason_names_the_part():
    x = apply("disconnected", live_signal(4.0), 3.4, 4.0)  # parts of 0.5 s
    h = check_block(x, SENSOR)
    assert h.fault == "disconnected"
    assert "newest 1/8 of the window" in h.reason and "noise floor" in h.reason


def test_part_edges_bounds():
    assert list(part_edges(1000)) == [0, 1000]  # too short to split
    e = part_edges(204800)
    assert len(e) == DEFAULT_LIMITS.max_parts + 1 and e[0] == 0 and e[-1] == 204800
    assert np.diff(e).min() >= DEFAULT_LIMITS.min_part_samples


@pytest.mark.parametrize("corner_hz", [0.16, 0.5, 1.0])
def test_bias_change_through_ac_coupling_is_seen_while_it_settles(corner_hz):
    """An AC-coupled input shows a bias step only as the coupling's decaying step response (reference:
    the step through scipy.signal.lfilter of the bilinear first-order high-pass s / (s + w_c)). The check
    reads it in every window that holds the start of the transient, and not once it has left."""
    from scipy import signal

    start_s = 20.4
    x = live_signal(40.0)
    b, a = signal.bilinear([1.0, 0.0], [1.0, 2 * np.pi * corner_hz], fs=FS_HZ)
    step = np.where(np.arange(x.size) >= int(start_s * FS_HZ), 0.08, 0.0)
    seen = faults_over_time(x + signal.lfilter(b, a, step))
    assert all(f is None for t, f in seen if t <= start_s), seen
    holding_start = [(t, f) for t, f in seen if start_s < t <= start_s + WINDOW_S]
    assert holding_start and all(f == "bias_shift" for _, f in holding_start), holding_start
    tau_s = 1 / (2 * np.pi * corner_hz)
    settled = [(t, f) for t, f in seen if t - WINDOW_S > start_s + 4 * tau_s]  # < 2 % of the step left
    assert settled and all(f is None for _, f in settled), settled
    # (with 0.5 s parts alone, the means of the 0.5 and 1 Hz transients stay under 5 % of the range:
    # the running mean over min_part_samples is what sees them)
