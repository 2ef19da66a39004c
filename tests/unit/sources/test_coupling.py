"""AC-coupling roll-off: first-order high-pass magnitude and its correction.

Reference: scipy.signal.freqs on the analog first-order high-pass H(s) = s / (s + wc) (the RC
high-pass of circuit theory), evaluated independently of our closed form.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import signal

from rotorwatch.sources.coupling import correct_ac_coupling, highpass_gain


def test_gain_matches_scipy_analog_highpass():
    fc = 0.7
    f = np.geomspace(0.01, 1000, 400)
    wc = 2 * np.pi * fc
    _, h = signal.freqs([1.0, 0.0], [1.0, wc], worN=2 * np.pi * f)
    np.testing.assert_allclose(highpass_gain(f, fc), np.abs(h), rtol=1e-12)
    assert highpass_gain(fc, fc) == pytest.approx(1 / np.sqrt(2))  # -3 dB at the corner
    assert highpass_gain(0.0, fc) == 0.0


def test_correction_restores_a_filtered_tone():
    fs, fc = 2000.0, 2.0
    f_tone, amp = 3.0, 1.0  # just above the corner: reads 17 % low through the coupling
    t = np.arange(int(200 * fs)) / fs
    x = amp * np.sin(2 * np.pi * f_tone * t)
    b, a = signal.bilinear([1.0, 0.0], [1.0, 2 * np.pi * fc], fs)  # the coupling capacitor, digitally
    y = signal.lfilter(b, a, x)[int(20 * fs):]                      # drop the start-up transient
    measured = np.sqrt(2) * np.std(y)
    assert measured == pytest.approx(amp * highpass_gain(f_tone, fc), rel=1e-3)
    corrected = correct_ac_coupling(np.array([measured]), np.array([f_tone]), fc)
    assert corrected[0] == pytest.approx(amp, rel=1e-3)
    power = correct_ac_coupling(np.array([measured**2]), np.array([f_tone]), fc, power=True)
    assert power[0] == pytest.approx(amp**2, rel=2e-3)


def test_gain_cap_and_passthrough():
    f = np.array([0.0, 0.01, 1.0, 100.0])
    spec = np.ones(4)
    out = correct_ac_coupling(spec, f, 1.0, max_gain=10.0)
    assert out[0] == 10.0 and out[1] == 10.0                 # capped near DC
    assert out[2] == pytest.approx(np.sqrt(2))
    assert out[3] == pytest.approx(1.0, rel=1e-4)
    assert np.array_equal(correct_ac_coupling(spec, f, None), spec)
    with pytest.raises(ValueError):
        highpass_gain(f, 0.0)
