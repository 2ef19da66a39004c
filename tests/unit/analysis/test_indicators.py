"""Waveform indicators: check values are analytic (references.md section 6, confirmed (lib))."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.signal
import scipy.stats
from hypothesis import given, settings
from hypothesis import strategies as st

from rotorwatch.analysis.indicators import waveform

N = 1_000_000


def _periodic(kind):
    t = (np.arange(N) + 0.5) / N * 1000  # 1000 whole periods
    if kind == "sine":
        return np.sin(2 * np.pi * t)
    return scipy.signal.square(2 * np.pi * t)


def test_gaussian_kurtosis_is_3():
    # Pearson beta_2 of a Gaussian = 3 (1e6 samples gave 3.0018 in references.md section 6)
    w, _ = waveform(np.random.default_rng(0).standard_normal(N))
    assert w.kurtosis == pytest.approx(3.0, abs=0.03)


def test_sine():
    # sine: kurtosis 1.5, crest factor sqrt(2) (analytic; references.md section 6)
    w, _ = waveform(3.0 * _periodic("sine") + 0.25)
    assert w.kurtosis == pytest.approx(1.5, abs=1e-6)
    assert w.crest_factor == pytest.approx(np.sqrt(2), abs=1e-5)
    assert w.rms_m_s2 == pytest.approx(3.0 / np.sqrt(2), rel=1e-9)
    assert w.mean_m_s2 == pytest.approx(0.25, abs=1e-9)


def test_square():
    # square wave: kurtosis 1.0, crest factor 1.0 (analytic)
    w, _ = waveform(_periodic("square"))
    assert w.kurtosis == pytest.approx(1.0, abs=1e-9)
    assert w.crest_factor == pytest.approx(1.0, abs=1e-9)


def test_uniform():
    # uniform distribution: kurtosis 1.8 (analytic)
    w, _ = waveform(np.random.default_rng(1).uniform(-1, 1, N))
    assert w.kurtosis == pytest.approx(1.8, abs=0.01)


@settings(max_examples=30, deadline=None)
@given(seed=st.integers(0, 2**20), n=st.integers(10, 5000), scale=st.floats(1e-3, 1e3), offset=st.floats(-100, 100))
def test_equals_scipy_stats(seed, n, scale, offset):
    # reference: scipy.stats.kurtosis(fisher=False) (Pearson; scipy docs), numpy for the rest
    x = np.random.default_rng(seed).standard_t(5, n) * scale + offset
    w, x0 = waveform(x)
    assert w.kurtosis == pytest.approx(scipy.stats.kurtosis(x, fisher=False), rel=1e-6)
    assert w.rms_m_s2 == pytest.approx(np.std(x), rel=1e-9)
    assert w.peak_m_s2 == pytest.approx(np.max(np.abs(x - np.mean(x))), rel=1e-12)
    np.testing.assert_allclose(x0, x - np.mean(x), rtol=0, atol=1e-12 * (abs(offset) + scale))


def test_flat_block_has_no_shape():
    w, _ = waveform(np.full(1000, 2.0))
    assert w.rms_m_s2 == 0.0 and np.isnan(w.kurtosis) and np.isnan(w.crest_factor) and w.mean_m_s2 == 2.0
