"""The measurement chain of the simulator: what a mounted, AC-coupled sensor behind an anti-alias filter
delivers, checked against scipy.signal as the reference implementation (time-domain filtering of the
housing's own acceleration), plus the coloured machine noise and 2xLF.

References: the mounted accelerometer is the base-excited single-degree-of-freedom system
w^2 / (s^2 + 2 zeta w s + w^2) (textbook, common practice; ISO 5348 for how mounting moves it, confirmed
in the shared references); the AC coupling a first-order high-pass s / (s + w_c); the bilinear transform
prewarped at a frequency is exact at that frequency (a property of the transform), so the reference
filters each tone with a filter prewarped at its own frequency. Welch with a flat-top window reads a
tone's RMS (references section 4, confirmed with scipy).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import signal

from .helpers import QUIET, renderer_for

G_N = 9.80665  # m/s^2 (references section 5)


def _phasor(x: np.ndarray, f_hz: float, fs_hz: float) -> complex:
    """Complex amplitude of the tone at f_hz (Hann-weighted projection)."""
    n = np.arange(x.size)
    w = np.hanning(x.size)
    return complex(2.0 * np.sum(w * x * np.exp(-2j * np.pi * f_hz * n / fs_hz)) / np.sum(w))


def _prewarped(b, a, f0_hz: float, fs_hz: float):
    """Analog (b, a) to digital, exact at f0_hz: bilinear with the prewarped constant."""
    w0 = 2 * math.pi * f0_hz
    k = w0 / math.tan(w0 / (2 * fs_hz))  # s = k (z - 1) / (z + 1) maps w0 onto itself
    return signal.bilinear(b, a, fs=k / 2.0)


def test_tones_pass_the_mounted_resonance_and_ac_coupling_as_scipy_filters_them(tmp_path):
    fs = 204800.0
    mount_hz, zeta, ac_hz = 8000.0, 0.03, 3.0
    # 100 blades at 1800 r/min: blade pass 3 kHz with harmonics at 6 and 9 kHz (below and past the resonance)
    r = renderer_for(tmp_path, config_kwargs={"blades": 100, "rpm": 1800.0, "fs_hz": fs},
                     healthy={**QUIET, "unbalance_mm_s": 1.0, "blade_pass_mm_s": 0.2},
                     chain={"mount_resonance_hz": mount_hz, "mount_damping_ratio": zeta, "ac_coupling_hz": ac_hz,
                            "anti_alias_fraction": 0.0})
    housing = r.snapshot_accel(3600.0, 3.0, fs)["p1"]
    chain = r.snapshot_accel(3600.0, 3.0, fs, through_chain=True)["p1"]
    settle = int(2.0 * fs)  # 6 time constants of the 3 Hz coupling
    wm, wc = 2 * math.pi * mount_hz, 2 * math.pi * ac_hz
    for f in (30.0, 3000.0, 6000.0, 9000.0):
        bm, am = _prewarped([wm * wm], [1.0, 2 * zeta * wm, wm * wm], f, fs)
        bc, ac = _prewarped([1.0, 0.0], [1.0, wc], f, fs)
        ref = signal.lfilter(bc, ac, signal.lfilter(bm, am, housing))
        want = _phasor(ref[settle:], f, fs) / _phasor(housing[settle:], f, fs)
        got = _phasor(chain[settle:], f, fs) / _phasor(housing[settle:], f, fs)
        assert abs(got - want) < 2e-3 * abs(want), (f, got, want)
    # and the response is what makes it a resonance: 9 kHz reads more than 3 x, in opposite phase
    assert abs(_phasor(chain[settle:], 9000.0, fs)) > 3 * abs(_phasor(housing[settle:], 9000.0, fs))


def test_anti_alias_rolls_off_towards_nyquist_like_scipys_butterworth(tmp_path):
    fs = 51200.0
    # 200 blades at 1400 r/min: blade pass 4.67 kHz and 9.33 kHz against a corner at 0.3 fs = 15.4 kHz
    r = renderer_for(tmp_path, config_kwargs={"blades": 200, "rpm": 1400.0, "fs_hz": fs},
                     healthy={**QUIET, "blade_pass_mm_s": 0.2},
                     chain={"mount_resonance_hz": 0.0, "ac_coupling_hz": 0.0, "anti_alias_fraction": 0.3,
                            "anti_alias_order": 8})
    housing = r.snapshot_accel(3600.0, 2.0, fs)["p1"]
    chain = r.snapshot_accel(3600.0, 2.0, fs, through_chain=True)["p1"]
    sos = signal.butter(8, 0.3 * fs, fs=fs, output="sos")  # the reference: the same filter run in time
    ref = signal.sosfilt(sos, housing)
    settle = int(0.5 * fs)
    for f in (200 * 1400 / 60, 2 * 200 * 1400 / 60):  # 4.67 kHz and 9.33 kHz (corner 15.4 kHz)
        want = _phasor(ref[settle:], f, fs) / _phasor(housing[settle:], f, fs)
        got = _phasor(chain[settle:], f, fs) / _phasor(housing[settle:], f, fs)
        assert abs(got - want) < 2e-3, (f, got, want)


def test_noise_is_coloured_and_the_recorded_spectrum_falls_off_before_nyquist(tmp_path):
    """Not flat to Nyquist: the housing noise falls above noise_high_hz, the chain's anti-alias filter
    takes the top of the band, the mounted resonance stands out of the recorded noise."""
    fs = 51200.0
    r = renderer_for(tmp_path, config_kwargs={"fs_hz": fs}, healthy={**QUIET, "noise_m_s2": 0.3},
                     chain={"mount_resonance_hz": 12000.0, "mount_damping_ratio": 0.03})
    housing = r.snapshot_accel(7200.0, 8.0, fs)["p1"]
    chain = r.snapshot_accel(7200.0, 8.0, fs, through_chain=True)["p1"]
    assert np.std(housing) == pytest.approx(0.3, rel=0.03)  # noise_m_s2 is the housing noise's RMS
    f, p_h = signal.welch(housing, fs, nperseg=8192)
    _, p_c = signal.welch(chain, fs, nperseg=8192)
    band = lambda p, lo, hi: float(np.mean(p[(f >= lo) & (f < hi)]))  # noqa: E731
    assert band(p_h, 8000, 10000) < band(p_h, 100, 500) / 30  # coloured: down > 15 dB at 8-10 kHz
    assert band(p_c, 11500, 12500) > 10 * band(p_h, 11500, 12500)  # the mounted resonance (Q ~ 17)
    assert band(p_c, 24500, 25500) < band(p_c, 100, 500) / 1e4  # the anti-alias filter's roll-off


def test_noise_segments_join_without_a_trace(tmp_path):
    """The noise is built from cross-faded segments: its variance must not change across their joins."""
    from rotorwatch.simulators.chain import NOISE_HOP

    fs = 51200.0
    r = renderer_for(tmp_path, config_kwargs={"fs_hz": fs}, healthy={**QUIET, "noise_m_s2": 1.0})
    x = r.snapshot_accel(0.0, 40.0, fs)["p1"]
    phase = np.arange(x.size) % NOISE_HOP
    near_join = x[(phase < NOISE_HOP // 16) | (phase >= NOISE_HOP - NOISE_HOP // 16)]
    mid = x[np.abs(phase - NOISE_HOP // 2) < NOISE_HOP // 8]
    assert np.var(near_join) == pytest.approx(np.var(mid), rel=0.03)


def test_twice_line_frequency_is_on_the_supply_clock_not_the_shaft(tmp_path):
    fs = 25600.0
    r = renderer_for(tmp_path, config_kwargs={"rpm": 1440.0, "fs_hz": fs},
                     healthy={**QUIET, "unbalance_mm_s": 1.0, "twice_line_mm_s": 0.5},
                     structure={"line_frequency_hz": 50.0})
    a = r.snapshot_accel(3 * 3600.0, 8.0, fs)["p1"]
    f, p = signal.welch(a, fs, window="flattop", nperseg=1 << 17, scaling="spectrum")

    def mm_s_at(f0):
        near = np.abs(f - f0) < 3 * (f[1] - f[0])
        return math.sqrt(np.max(p[near])) / (2 * np.pi * f0) * 1000

    assert mm_s_at(100.0) == pytest.approx(0.5, rel=0.02)  # 2xLF at exactly 100 Hz
    assert mm_s_at(4 * 1440 / 60) < 0.01  # and nothing at the shaft's 4x (96 Hz)


def test_twice_line_needs_a_line_frequency(tmp_path):
    from rotorwatch.errors import ConfigError

    with pytest.raises(ConfigError, match="twice_line needs the line frequency"):
        renderer_for(tmp_path, healthy={**QUIET, "twice_line_mm_s": 0.5})


def test_recorded_volts_are_deterministic_per_seed_and_chunk_free(tmp_path):
    fs = 51200.0
    r = renderer_for(tmp_path, config_kwargs={"fs_hz": fs}, healthy={**QUIET, "noise_m_s2": 0.3, "unbalance_mm_s": 1.0})
    whole = r.snapshot(5000.0, 1.0, fs)["p1"]
    halves = np.concatenate([r.snapshot(5000.0, 0.5, fs)["p1"], r.snapshot(5000.5, 0.5, fs)["p1"]])
    assert np.array_equal(whole, halves)
    assert abs(np.mean(whole)) > 0  # an AC-coupled chain's window mean is near, not exactly, zero
    assert abs(np.mean(whole)) < 1e-3 * np.std(whole) * 10
