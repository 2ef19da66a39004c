"""Welch spectrum: scaling and parity with scipy.signal.welch (the outside reference)."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.signal
from hypothesis import given, settings
from hypothesis import strategies as st

from rotorwatch.analysis.point import PointAnalyzer
from rotorwatch.analysis.spectrum import WelchKernel, hann

from .helpers import machine


def test_hann_window_is_scipys_periodic_hann():
    # scipy.signal.get_window("hann", n) is periodic (fftbins=True) (confirmed (lib), references.md section 4)
    for n in (8, 1000, 4096, 16384):
        np.testing.assert_allclose(hann(n), scipy.signal.get_window("hann", n), rtol=0, atol=1e-15)


def test_hann_window_constants():
    # Hann: CG 0.500, ENBW 1.500 bins, ECF 1.6330 = sqrt(8/3) (Harris 1978 Table 1, from memory;
    # confirmed (lib) with scipy in references.md section 4)
    w = hann(4096)
    n = w.size
    assert w.sum() / n == pytest.approx(0.5, abs=1e-12)
    assert n * np.dot(w, w) / w.sum() ** 2 == pytest.approx(1.5, abs=1e-12)
    assert np.sqrt(n / np.dot(w, w)) == pytest.approx(1.63299, abs=1e-5)
    assert WelchKernel(w, 2048, 1000.0).enbw_bins == pytest.approx(1.5, abs=1e-12)


@pytest.mark.parametrize("n_per_seg,overlap", [(256, 128), (1000, 500), (1024, 0), (4096, 3072)])
def test_psd_equals_scipy_welch(n_per_seg, overlap):
    # reference: scipy.signal.welch, Hann, detrend 'constant', scaling 'density' (scipy docs)
    rng = np.random.default_rng(1)
    x = rng.standard_normal(20000) * 3.0 + 0.7 + np.sin(2 * np.pi * 50 * np.arange(20000) / 1000)
    k = WelchKernel(hann(n_per_seg), overlap, 1000.0)
    f_ref, p_ref = scipy.signal.welch(x, 1000.0, window="hann", nperseg=n_per_seg, noverlap=overlap,
                                      detrend="constant", scaling="density")
    np.testing.assert_allclose(k.freqs_hz, f_ref)
    np.testing.assert_allclose(k.psd(x), p_ref, rtol=1e-10, atol=1e-14 * p_ref.max())


def test_single_precision_psd_close_to_scipy_welch():
    # the analyzer runs the transforms in float32; reference scipy.signal.welch in float64
    rng = np.random.default_rng(2)
    x = rng.standard_normal(51200 * 2)
    k = WelchKernel(hann(16384), 8192, 51200.0, dtype=np.float32)
    _, p_ref = scipy.signal.welch(x, 51200.0, window="hann", nperseg=16384, noverlap=8192)
    np.testing.assert_allclose(k.psd(x), p_ref, rtol=2e-4, atol=1e-6 * p_ref.max())


def test_sine_of_rms_one_on_a_line_reads_one():
    # x = sqrt(2) sin(2 pi 100 t), fs 10 kHz, Hann, nperseg 1000: peak 1.0000 at 100 Hz
    # (scipy.signal.welch scaling='spectrum', confirmed (lib), references.md section 4)
    fs = 10000.0
    t = np.arange(50000) / fs
    x = np.sqrt(2) * np.sin(2 * np.pi * 100 * t)
    k = WelchKernel(hann(1000), 500, fs)
    rms = k.line_rms(k.psd(x))
    assert k.freqs_hz[np.argmax(rms)] == 100.0
    assert rms.max() == pytest.approx(1.0, abs=1e-6)
    _, spec_ref = scipy.signal.welch(x, fs, window="hann", nperseg=1000, scaling="spectrum")
    np.testing.assert_allclose(rms**2, spec_ref, rtol=1e-9, atol=1e-15)


def test_scalloping_half_a_bin_off():
    # cosine of amplitude 3.0, N = 1024, Hann: 3.0000 at bin 100, 2.5465 at bin 100.5 (-1.4236 dB)
    # (numpy rfft, confirmed (lib), references.md section 4); line RMS = peak / sqrt(2)
    n = 1024
    k = WelchKernel(hann(n), 0, float(n))
    for bin_, expected in ((100.0, 3.0), (100.5, 2.5465)):
        x = 3.0 * np.cos(2 * np.pi * bin_ * np.arange(n) / n)
        assert k.line_rms(k.psd(x)).max() * np.sqrt(2) == pytest.approx(expected, abs=1e-4)


def test_parseval_white_noise():
    # sum(PSD) df = mean square; unit-variance white noise, fs 1 kHz, Hann, nperseg 1024 gives
    # 0.9956 vs variance 0.9976 for scipy's seed there (confirmed (lib), references.md section 4)
    rng = np.random.default_rng(3)
    x = rng.standard_normal(200000)
    k = WelchKernel(hann(1024), 512, 1000.0)
    psd = k.psd(x)
    assert psd.sum() * k.df_hz == pytest.approx(x.var(), rel=0.01)
    assert psd[1:-1].mean() == pytest.approx(2.0 / 1000.0 * x.var(), rel=0.02)  # one-sided level 2 sigma^2 / fs


@settings(max_examples=40, deadline=None)
@given(scale=st.floats(1e-3, 1e3), seed=st.integers(0, 2**16), n_seg_pow=st.integers(6, 10))
def test_psd_is_quadratic_in_the_signal(scale, seed, n_seg_pow):
    x = np.random.default_rng(seed).standard_normal(4096)
    k = WelchKernel(hann(2**n_seg_pow), 2 ** (n_seg_pow - 1), 2000.0)
    np.testing.assert_allclose(k.psd(scale * x), scale**2 * k.psd(x), rtol=1e-9, atol=1e-300)


@settings(max_examples=30, deadline=None)
@given(f_bin=st.integers(20, 400), amp=st.floats(0.01, 100.0), offset=st.floats(-10, 10))
def test_tone_power_over_its_lobe_is_its_mean_square(f_bin, amp, offset):
    # Parseval for a tone on a line: the main lobe (+/- 1 bin) holds the whole mean square
    n = 1024
    x = offset + amp * np.sin(2 * np.pi * f_bin * np.arange(8 * n) / n)
    k = WelchKernel(hann(n), n // 2, float(n))
    psd = k.psd(x)
    assert psd[f_bin - 1: f_bin + 2].sum() * k.df_hz == pytest.approx(amp**2 / 2, rel=1e-6)


def test_analyzer_acceleration_spectrum_scaling():
    # through the whole analyzer: a 1 m/s^2 RMS tone centred on a line reads 1.0000 m/s^2 there
    fs = 51200.0
    m = machine(analysis={"fmax_hz": 10000})
    a = PointAnalyzer(m, m.points[0], fs)
    assert a.plan.n_per_seg == 16384 and a.plan.df_hz == 3.125
    t = np.arange(int(4 * fs)) / fs
    f0 = 320 * a.plan.df_hz  # 1000 Hz
    r = a.analyze(np.sqrt(2) * np.sin(2 * np.pi * f0 * t), keep_spectra=True)
    acc = r.acceleration
    assert acc.unit == "m/s^2"
    assert acc.freqs_hz[np.argmax(acc.amplitude)] == pytest.approx(f0)
    assert acc.amplitude.max() == pytest.approx(1.0, abs=2e-5)
    assert acc.freqs_hz[-1] <= 10000.0 and acc.freqs_hz.size == 3201  # 3200 lines + DC


def test_ac_coupling_correction_restores_a_first_order_high_pass():
    # reference: a first-order Butterworth high-pass at the corner (scipy.signal.butter + sosfilt); its
    # |H|^2 = f^2 / (f^2 + fc^2) is what the plan's correction undoes
    fs, fc = 25600.0, 5.0
    m = machine(analysis={"fmax_hz": 10000})
    m = m.model_copy(update={"points": [m.points[0].model_copy(update={"sensor": m.points[0].sensor.model_copy(
        update={"ac_coupling_corner_hz": fc})})]})
    a = PointAnalyzer(m, m.points[0], fs)
    f0 = 2 * a.plan.df_hz  # 6.25 Hz, on a line just above the corner: the high-pass passes 78 % of it
    t = np.arange(int(8 * fs)) / fs
    x = np.sqrt(2) * np.sin(2 * np.pi * f0 * t)
    sos = scipy.signal.butter(1, fc, btype="highpass", fs=fs, output="sos")
    y = scipy.signal.sosfilt(sos, x)[int(2 * fs):]  # drop the filter's start-up
    r = a.analyze(y, keep_spectra=True)
    peak = r.acceleration.amplitude[np.argmin(np.abs(r.acceleration.freqs_hz - f0))]
    assert peak == pytest.approx(1.0, rel=0.01)
