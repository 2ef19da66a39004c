"""Bearing-defect impact trains: rates, modulation and the ringing kernel, checked with scipy/numpy.

The envelope is computed here with scipy (Butterworth band-pass, scipy.signal.hilbert) and numpy's FFT,
not with rotorwatch's analysis, so the two stay independent. Rates: CWRU drive-end bearing at 1797 r/min
(references.md section 2, Ex. 1: BPFO 3.58478, BPFI 5.41522, FTF 0.39831, 2xBSF 4.71344 x f_r).
Tolerance 2 % covers the simulated slip (references.md: match bearing lines within 2-3 %, common practice).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import signal

from rotorwatch.simulators.components import ImpactKernel, ring, ring_slow

from .helpers import CWRU_ORDERS, QUIET, renderer_for

FS = 48000.0
F_R = 1797.0 / 60.0
SECONDS = 10.0


def _envelope_spectrum(x: np.ndarray, fs: float, band=(2000.0, 5000.0)):
    sos = signal.butter(4, band, btype="bandpass", fs=fs, output="sos")
    env = np.abs(signal.hilbert(signal.sosfiltfilt(sos, x)))
    env -= env.mean()
    spec = np.abs(np.fft.rfft(env * np.hanning(len(env)))) / len(env)
    return np.fft.rfftfreq(len(env), 1 / fs), spec


def _peak(f, spec, centre_hz, tol_frac=0.02):
    near = np.abs(f - centre_hz) <= tol_frac * centre_hz
    i = np.argmax(np.where(near, spec, 0.0))
    return f[i], spec[i]


def _defect_signal(tmp_path, defect: str, size: float = 5.0, **structure):
    r = renderer_for(tmp_path, healthy={**QUIET, "unbalance_mm_s": 1.0, "noise_m_s2": 0.2},
                     structure=structure or None,
                     changes=[{"start_day": 0, "component": defect, "bearing": "b1", "to": size, "shape": "step"}])
    return r.snapshot_accel(600.0, SECONDS, FS)["p1"]


def test_outer_race_rate_is_bpfo(tmp_path):
    x = _defect_signal(tmp_path, "outer_race")
    f, spec = _envelope_spectrum(x, FS)
    search = (f > 20) & (f < 400)
    f_top = f[search][np.argmax(spec[search])]
    assert f_top == pytest.approx(CWRU_ORDERS["bpfo"] * F_R, rel=0.02)  # 107.36 Hz
    # harmonics of BPFO stand out too
    for k in (2, 3):
        _, amp = _peak(f, spec, k * CWRU_ORDERS["bpfo"] * F_R)
        assert amp > 10 * np.median(spec[search])


def test_outer_race_has_no_shaft_sidebands(tmp_path):
    # a stationary outer-race spall is not modulated (R&A 2011, from memory)
    x = _defect_signal(tmp_path, "outer_race")
    f, spec = _envelope_spectrum(x, FS)
    bpfo = CWRU_ORDERS["bpfo"] * F_R
    _, line = _peak(f, spec, bpfo, 0.01)
    for side in (bpfo - F_R, bpfo + F_R):
        _, amp = _peak(f, spec, side, 0.005)
        assert amp < 0.1 * line


def test_inner_race_rate_and_shaft_sidebands(tmp_path):
    # BPFI with sidebands at +/- f_r: the spall turns through the load zone (R&A 2011, from memory)
    x = _defect_signal(tmp_path, "inner_race")
    f, spec = _envelope_spectrum(x, FS)
    bpfi = CWRU_ORDERS["bpfi"] * F_R  # 162.19 Hz
    f_line, line = _peak(f, spec, bpfi)
    assert f_line == pytest.approx(bpfi, rel=0.02)
    floor = np.median(spec[(f > 20) & (f < 400)])
    assert line > 20 * floor
    for side in (bpfi - F_R, bpfi + F_R):
        f_side, amp = _peak(f, spec, side, 0.01)
        assert f_side == pytest.approx(side, abs=0.5)
        assert amp > 5 * floor
    # and the shaft rate itself shows in the envelope (the load-zone modulation)
    assert _peak(f, spec, F_R, 0.01)[1] > 5 * floor


def test_ball_rate_is_twice_bsf_with_cage_sidebands(tmp_path):
    # a spalled element strikes at 2 x BSF, modulated at FTF (R&A 2011; references.md section 2)
    x = _defect_signal(tmp_path, "ball")
    f, spec = _envelope_spectrum(x, FS)
    two_bsf = CWRU_ORDERS["two_bsf"] * F_R  # 141.17 Hz
    ftf = CWRU_ORDERS["ftf"] * F_R  # 11.93 Hz
    floor = np.median(spec[(f > 20) & (f < 400)])
    f_line, line = _peak(f, spec, two_bsf)
    assert f_line == pytest.approx(two_bsf, rel=0.02)
    assert line > 10 * floor
    sides = [_peak(f, spec, two_bsf + s, 0.003)[1] for s in (-ftf, ftf)]
    assert max(sides) > 5 * floor
    assert _peak(f, spec, ftf, 0.02)[1] > 5 * floor


def test_impact_count_matches_bpfo(tmp_path):
    # no slip jitter, no noise: one impact per BPFO period, counted from the envelope's threshold crossings
    r = renderer_for(tmp_path, healthy=QUIET, structure={"slip_jitter_pct": 0.0, "impact_scatter_pct": 0.0},
                     changes=[{"start_day": 0, "component": "outer_race", "bearing": "b1", "to": 5.0, "shape": "step"}])
    x = r.snapshot_accel(0.0, SECONDS, FS)["p1"]
    env = np.abs(signal.hilbert(x))
    above = env > 0.5 * env.max()
    rises = np.count_nonzero(above[1:] & ~above[:-1])
    assert rises == pytest.approx(CWRU_ORDERS["bpfo"] * F_R * SECONDS, abs=2)


def test_impact_peak_is_the_severity(tmp_path):
    r = renderer_for(tmp_path, healthy=QUIET, structure={"impact_scatter_pct": 0.0},
                     changes=[{"start_day": 0, "component": "outer_race", "bearing": "b1", "to": 7.5, "shape": "step"}])
    x = r.snapshot_accel(0.0, 2.0, 1e6)["p1"]  # fine sampling: the sampled peak is the true peak
    assert np.max(np.abs(x)) == pytest.approx(7.5, rel=2e-3)


def test_cross_transfer_to_other_points(tmp_path):
    points = [
        {"id": "on", "bearing": "b1", "sensor": {"channel": 0, "sensitivity_mv_per_g": 100.0}},
        {"id": "off", "sensor": {"channel": 1, "sensitivity_mv_per_g": 100.0}},
    ]
    r = renderer_for(tmp_path, config_kwargs={"points": points}, healthy=QUIET,
                     structure={"cross_transfer": 0.25},
                     changes=[{"start_day": 0, "component": "outer_race", "bearing": "b1", "to": 4.0, "shape": "step"}])
    s = r.snapshot_accel(0.0, 2.0, FS)
    assert np.allclose(s["off"], 0.25 * s["on"])


def test_kernel_is_a_resonance_with_no_net_motion():
    k = ImpactKernel(3500.0, 0.05)
    fs = 1e6
    h = k(np.arange(0, k.length_s, 1 / fs))
    spec = np.abs(np.fft.rfft(h, 1 << 22))
    f = np.fft.rfftfreq(1 << 22, 1 / fs)
    assert f[np.argmax(spec)] == pytest.approx(3500.0, rel=0.01)
    velocity = np.cumsum(h) / fs
    assert abs(velocity[-1]) < 1e-3 * np.max(np.abs(velocity))  # velocity returns to rest
    assert np.max(np.abs(h)) == pytest.approx(1.0, rel=1e-4)
    # free decay of a damped oscillator: the envelope falls by exp(-zeta w_n dt) over dt
    def window_peak(t_ms):
        return np.max(np.abs(h[int(t_ms * 1e-3 * fs):int((t_ms + 0.3) * 1e-3 * fs)]))
    assert window_peak(2.0) / window_peak(1.0) == pytest.approx(math.exp(-0.05 * 2 * math.pi * 3500 * 1e-3), rel=0.02)


def test_fast_ring_equals_slow_twin():
    k = ImpactKernel(4200.0, 0.04)
    rng = np.random.default_rng(8)
    times = np.sort(rng.uniform(100.0, 100.4, 50))
    amps = rng.uniform(0.2, 3.0, 50)
    n0, n = int(100.0 * FS) + 17, int(0.42 * FS)
    fast = ring(k, times, amps, n0, n, FS)
    slow = ring_slow(k, times, amps, n0, n, FS)
    assert np.max(np.abs(fast - slow)) <= 1e-9 * np.max(np.abs(slow))


def test_ring_on_grid_equals_fftconvolve():
    # impacts exactly on samples: the sum of kernels is the convolution of an impulse train with the
    # sampled kernel (scipy.signal.fftconvolve)
    k = ImpactKernel(3000.0, 0.06)
    n_idx = np.array([100, 700, 705, 2400])
    amps = np.array([1.0, -0.5, 2.0, 0.7])
    n = 4000
    fast = ring(k, (n_idx - 1e-9) / FS, amps, 0, n, FS)  # a hair before the sample: the sample is tau ~ 0
    train = np.zeros(n)
    train[n_idx] = amps
    kernel = k(np.arange(k.n_samples(FS)) / FS)
    ref = signal.fftconvolve(train, kernel)[:n]
    assert np.max(np.abs(fast - ref)) <= 1e-6 * np.max(np.abs(ref))
