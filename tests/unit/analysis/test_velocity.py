"""Velocity by frequency-domain integration, and the overall velocity RMS."""

from __future__ import annotations

import numpy as np
import pytest

from rotorwatch.analysis.point import PointAnalyzer

from .helpers import G_N, machine

FS = 51200.0


def _analyze(x, **mkw):
    m = machine(analysis={"fmax_hz": 10000}, **mkw)
    return PointAnalyzer(m, m.points[0], FS).analyze(x, keep_spectra=True)


def _tone(f_hz, rms_m_s2, seconds=4.0):
    t = np.arange(int(seconds * FS)) / FS
    return rms_m_s2 * np.sqrt(2) * np.sin(2 * np.pi * f_hz * t + 0.3)


def test_one_g_at_100_hz_is_15_6078_mm_s():
    # |v| = |a| / (2 pi f): 1 g_n RMS at 100 Hz -> 15.6078 mm/s RMS (formula; references.md section 5, computed)
    r = _analyze(_tone(100.0, G_N))  # 100 Hz sits on line 32 at 3.125 Hz resolution
    vel = r.velocity
    assert vel.unit == "mm/s"
    assert vel.amplitude.max() == pytest.approx(15.6078, rel=2e-5)
    assert vel.freqs_hz[np.argmax(vel.amplitude)] == 100.0
    # the overall sums the tone's lobe (3 lines weighted 1/f^2 around 100 Hz: second-order error only)
    assert r.overall_velocity_mm_s == pytest.approx(15.6078, rel=1e-3)


def test_one_g_at_1000_rad_s_is_9_80665_mm_s():
    # omega = 1000 rad/s (159.155 Hz): v = a / omega = 9.80665 mm/s (references.md section 5, computed)
    r = _analyze(_tone(1000.0 / (2 * np.pi), G_N))
    assert r.overall_velocity_mm_s == pytest.approx(9.80665, rel=1e-3)


def test_overall_band_excludes_tones_outside_10_to_1000_hz():
    # ISO 2954:2012: the 10-1000 Hz band is limited by 3rd-order Butterworth filters (confirmed (search),
    # references.md section 1). Such a high-pass passes (4/10)^3 = 6.4 % of a 4 Hz tone; our sharp band
    # (with the Hann window's leakage) must let through no more than that, and nothing of 3 kHz.
    inside = _analyze(_tone(200.0, 1.0)).overall_velocity_mm_s
    low_tone_mm_s = 1.0 / (2 * np.pi * 4.0) * 1000.0
    with_low = _analyze(_tone(200.0, 1.0) + _tone(4.0, 1.0)).overall_velocity_mm_s
    assert np.sqrt(with_low**2 - inside**2) < 0.064 * low_tone_mm_s
    with_high = _analyze(_tone(200.0, 1.0) + _tone(3000.0, 50.0)).overall_velocity_mm_s
    assert with_high == pytest.approx(inside, rel=1e-4)


def test_overall_of_two_tones_adds_in_power():
    # RMS of uncorrelated components adds in quadrature (Parseval)
    v1 = _analyze(_tone(80.0, 2.0)).overall_velocity_mm_s
    v2 = _analyze(_tone(400.0, 5.0)).overall_velocity_mm_s
    v12 = _analyze(_tone(80.0, 2.0) + _tone(400.0, 5.0)).overall_velocity_mm_s
    assert v12 == pytest.approx(np.hypot(v1, v2), rel=1e-3)


def test_zone_follows_overall_velocity():
    # 1 g_n at 100 Hz = 15.6 mm/s: zone D on a group 2 rigid machine (C/D 4.5 mm/s, ISO 10816-3 Table A.2,
    # from memory); a tenth of it (1.56 mm/s) is zone B
    assert _analyze(_tone(100.0, G_N)).iso_zone == "D"
    assert _analyze(_tone(100.0, G_N / 10)).iso_zone == "B"
