"""Envelope analysis: the frequency-domain analytic signal against scipy.signal.hilbert and
scipy.signal.envelope, impact trains, spectral kurtosis and the band search."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.signal

from rotorwatch.analysis.envelope import spectral_kurtosis
from rotorwatch.analysis.point import PointAnalyzer
from rotorwatch.analysis.reference import reference_analyze
from rotorwatch.errors import InputError
from rotorwatch.kinematics import multiples_from_geometry

from .helpers import impact_train, machine

BPFO_ORDER = multiples_from_geometry(9, 0.3126, 1.537).bpfo


def _am_signal(fs=20000.0, n=2**16):
    """Carrier on an FFT line, 50 % amplitude modulation on another: periodic over the block."""
    df = fs / n
    fc, fm = 9830 * df, 120 * df  # ~3000 Hz, ~36.6 Hz
    t = np.arange(n) / fs
    return (1.0 + 0.5 * np.cos(2 * np.pi * fm * t)) * np.cos(2 * np.pi * fc * t), fs, fm


def _kernel(fs, band=(2000.0, 4000.0), **env):
    m = machine(envelope={"band_hz": list(band) if band else None, **env})
    a = PointAnalyzer(m, m.points[0], fs)
    return a, a._envelope


def test_envelope_equals_scipy_hilbert_on_an_am_signal():
    # reference: |scipy.signal.hilbert(x)| (analytic signal by FFT; scipy docs, references.md section 3)
    x, fs, fm = _am_signal()
    _, ek = _kernel(fs)
    bs = ek.block_spectrum(x - x.mean())
    z, fs_c, _ = ek.band_signal(bs, (2000.0, 4000.0))
    ref = np.abs(scipy.signal.hilbert(x))
    t_ref = np.arange(x.size) / fs
    # z[0] is the first sample after the tapered start of the block
    offset = int(np.ceil(bs.n_trim * (fs_c / bs.df_hz) / bs.n_fft)) / fs_c
    t_z = np.arange(z.size) / fs_c
    env = np.abs(z)
    ref_at = np.interp(t_z + offset, t_ref, ref)
    mid = slice(z.size // 10, -z.size // 10)
    np.testing.assert_allclose(env[mid], ref_at[mid], atol=2e-3)
    assert env.max() == pytest.approx(1.5, abs=2e-3) and env.min() == pytest.approx(0.5, abs=2e-3)


def test_envelope_equals_scipy_envelope_on_an_am_signal():
    # reference: scipy.signal.envelope (FFT band selection + resampling; scipy docs, references.md section 3)
    x, fs, fm = _am_signal()
    _, ek = _kernel(fs)
    bs = ek.block_spectrum(x - x.mean())
    z, fs_c, band = ek.band_signal(bs, (2000.0, 4000.0))
    n_out = int(round(x.size * fs_c / fs))
    ref = scipy.signal.envelope(x, bp_in=(int(band[0] / bs.df_hz), int(band[1] / bs.df_hz)), n_out=n_out,
                                residual=None)
    cut = int(np.ceil(bs.n_trim * n_out / x.size))
    ref = ref[cut: cut + z.size]
    mid = slice(z.size // 10, -z.size // 10)
    np.testing.assert_allclose(np.abs(z)[mid], ref[mid], atol=2e-3)


def test_envelope_spectrum_line_of_the_modulation():
    # 50 % AM: envelope 1 + 0.5 cos(2 pi fm t) -> a line of RMS 0.5 / sqrt(2) at fm (analytic)
    x, fs, fm = _am_signal()
    a, _ = _kernel(fs, lines=200, fmax_hz=200.0)
    r = a.analyze(x, keep_spectra=True)
    env = r.envelope
    df = env.freqs_hz[1]
    near = np.abs(env.freqs_hz - fm) <= 2 * df
    rms = np.sqrt(np.sum(env.amplitude[near] ** 2) / 1.5)  # lines of a Hann spectrum: divide by ENBW 1.5
    assert rms == pytest.approx(0.5 / np.sqrt(2), rel=0.01)


def test_impact_train_rate_shows_in_the_envelope_spectrum():
    # impacts at 87.4 /s ringing a 3 kHz resonance (simulated bearing signal, Randall & Antoni 2011, from
    # memory): the squared-envelope spectrum's strongest line is the rate, with its harmonics
    fs, rate = 51200.0, 87.4
    rpm = rate / BPFO_ORDER * 60.0  # make it the rig bearing's BPFO
    m = machine(rpm=rpm, envelope={"band_hz": [2000.0, 5000.0]}, analysis={"fmax_hz": 10000})
    a = PointAnalyzer(m, m.points[0], fs)
    r = a.analyze(impact_train(fs, 4.0, rate, 3000.0), keep_spectra=True)
    env = r.envelope
    above = env.freqs_hz > 10
    f_peak = env.freqs_hz[above][np.argmax(env.amplitude[above])]
    assert f_peak == pytest.approx(rate, abs=env.freqs_hz[1])
    assert r.findings and r.findings[0].name == "BPFO"
    assert r.findings[0].measured_hz == pytest.approx(rate, abs=0.1)
    assert r.findings[0].harmonics_found >= 2


@pytest.mark.parametrize("seed", range(8))
def test_noise_alone_gives_no_finding(seed):
    # the decision rule must not fire on Gaussian noise (its SES lines are exponentially distributed)
    fs = 51200.0
    m = machine(envelope={"band_hz": [2000.0, 5000.0]}, analysis={"fmax_hz": 10000})
    r = PointAnalyzer(m, m.points[0], fs).analyze(np.random.default_rng(seed).standard_normal(int(4 * fs)))
    assert r.findings == []


def test_spectral_kurtosis_reference_values():
    # SK = 0 for stationary Gaussian noise, -1 for a steady tone (Antoni 2006; from memory)
    rng = np.random.default_rng(0)
    noise = rng.standard_normal((4, 200000)) + 1j * rng.standard_normal((4, 200000))
    np.testing.assert_allclose(spectral_kurtosis(noise), 0.0, atol=0.03)
    tone = 3.0 * np.exp(2j * np.pi * 0.01 * np.arange(10000))
    assert spectral_kurtosis(tone) == pytest.approx(-1.0, abs=1e-9)
    bursts = noise[0] * (rng.uniform(size=200000) < 0.01)
    assert spectral_kurtosis(bursts) > 50


@pytest.mark.parametrize("criterion", ["kurtosis", "cyclic"])
def test_band_search_finds_the_resonance(criterion):
    # impacts ring a 6 kHz resonance; louder stationary noise fills 1-3 kHz: the search must pick a band
    # around 6 kHz, not the loudest one
    fs = 25600.0
    rng = np.random.default_rng(5)
    n = int(4 * fs)
    sos = scipy.signal.butter(6, (1000, 3000), btype="bandpass", fs=fs, output="sos")
    loud = scipy.signal.sosfilt(sos, rng.standard_normal(n)) * 6.0
    x = impact_train(fs, 4.0, 93.0, 6000.0, amplitude=6.0, noise_rms=0.3, seed=5) + loud
    m = machine(envelope={"band_hz": None, "auto_min_hz": 500.0})
    a = PointAnalyzer(m, m.points[0], fs, band_criterion=criterion)
    r = a.analyze(x)
    lo, hi = r.envelope_band_hz
    assert lo < 6000.0 < hi and lo > 3000.0, (lo, hi)
    assert r.envelope_kurtosis is not None and r.envelope_kurtosis > 1.0


def test_fast_analysis_agrees_with_the_scipy_reference():
    # slow twin: scipy.signal.welch + Butterworth sosfiltfilt + scipy.signal.hilbert (reference.py)
    fs, rate = 51200.0, 87.4
    rpm = rate / BPFO_ORDER * 60.0
    bands = [{"name": "hf", "quantity": "acceleration", "low_hz": 2000, "high_hz": 10000},
             {"name": "v1x", "quantity": "velocity", "feature": "shaft", "harmonics": 1},
             {"name": "or", "quantity": "envelope", "feature": "bpfo", "bearing": "b1"}]
    m = machine(rpm=rpm, bands=bands, envelope={"band_hz": [2000.0, 5000.0]}, analysis={"fmax_hz": 10000})
    a = PointAnalyzer(m, m.points[0], fs)
    t = np.arange(int(4 * fs)) / fs
    x = impact_train(fs, 4.0, rate, 3000.0, seed=3) + 2.0 * np.sin(2 * np.pi * rpm / 60 * t)
    fast = a.analyze(x)
    ref = reference_analyze(a.plan, x, rpm)
    assert fast.overall_velocity_mm_s == pytest.approx(ref.overall_velocity_mm_s, rel=1e-4)
    assert fast.bands["hf"] == pytest.approx(ref.bands["hf"], rel=1e-4)
    assert fast.bands["v1x"] == pytest.approx(ref.bands["v1x"], rel=1e-4)
    assert fast.bands["or"] == pytest.approx(ref.bands["or"], rel=0.05)  # ideal vs Butterworth band-pass
    assert fast.waveform.kurtosis == pytest.approx(ref.waveform.kurtosis, rel=1e-6)  # float32 samples
    bearing = [f.name for f in fast.findings if f.kind == "bearing"]
    assert bearing == [f.name for f in ref.findings] == ["BPFO"]
    # the 2 m/s^2 tone at 1x (about 9 mm/s, nothing else at the shaft orders) is an unbalance pattern too
    assert [f.name for f in fast.findings if f.kind != "bearing"] == ["unbalance"]
    assert fast.findings[0].measured_hz == pytest.approx(ref.findings[0].measured_hz, abs=0.1)


def test_block_shorter_than_a_segment_names_the_limit():
    fs = 51200.0
    m = machine(analysis={"fmax_hz": 10000})
    a = PointAnalyzer(m, m.points[0], fs)
    with pytest.raises(InputError, match=rf"too short.*at least {a.min_samples} samples"):
        a.analyze(np.zeros(a.min_samples - 1))
    with pytest.raises(InputError, match="non-finite"):
        a.analyze(np.full(a.min_samples, np.nan))
    with pytest.raises(InputError, match="1-D"):
        a.analyze(np.zeros((2, a.min_samples)))


@pytest.mark.parametrize("band", [(500.0, 1620.0), (2000.0, 7000.0), (3000.0, 9000.0), (8000.0, 16000.0),
                                  (500.0, 23000.0)])
def test_envelope_spectrum_averages_two_segments_whatever_the_band(band):
    # The plan caps the envelope lines so that two half-overlapping Hann segments fit the block; every
    # band must get both, or its band values spread wider from update to update than another band's.
    # Reference: Welch, IEEE Trans. Audio Electroacoust. AU-15 (1967) 70-73: the variance of an averaged
    # periodogram over K segments is (1/K) [1 + 2 c^2 (K-1)/K] times its mean squared, c the window's
    # correlation at the overlap (Hann, 50 %: c = 0.167, Harris 1978 table 1, from memory): 0.51 for
    # K = 2, 1.0 for one segment. Gaussian noise, 24 blocks of 4 s at 51.2 kHz (fixed seed); the measured
    # variance of each line over the blocks, relative to its mean squared, pooled over 10-450 Hz.
    fs = 51200.0
    m = machine(rpm=1482.0, envelope={"band_hz": None}, analysis={"window_s": 4.0, "fmax_hz": 10000.0})
    ek = PointAnalyzer(m, m.points[0], fs)._envelope
    rng = np.random.default_rng(7)
    psd = []
    for _ in range(24):
        out = ek.demodulate(ek.block_spectrum(rng.standard_normal(int(4.0 * fs))), band)
        psd.append(out.envelope_psd)
    psd = np.array(psd)
    f = np.arange(psd.shape[1]) * out.df_hz
    lines = psd[:, (f > 10.0) & (f < 0.9 * ek.plan.fmax_hz)]
    relative_variance = float((lines / lines.mean(axis=0)).var(ddof=1))
    welch_k2 = 0.5 * (1 + 2 * 0.167**2 * 0.5)
    print(f"band {band}: relative variance {relative_variance:.3f} (Welch: K=2 {welch_k2:.3f}, K=1 1.0)")
    assert relative_variance == pytest.approx(welch_k2, rel=0.15)
