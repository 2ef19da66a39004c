"""Band values from the PSD: tones in bands, order bands following the speed, feature bands."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from rotorwatch.analysis.bands import window_bins
from rotorwatch.analysis.point import PointAnalyzer
from rotorwatch.kinematics import multiples_from_geometry

from .helpers import machine

FS = 51200.0
T = np.arange(int(4 * FS)) / FS

BANDS = [
    {"name": "acc-200-300", "quantity": "acceleration", "low_hz": 200, "high_hz": 300},
    {"name": "vel-2x", "quantity": "velocity", "low_order": 1.9, "high_order": 2.1},
    {"name": "vel-1x", "quantity": "velocity", "feature": "shaft", "harmonics": 1},
    {"name": "acc-bpfo", "quantity": "acceleration", "feature": "bpfo", "bearing": "b1", "harmonics": 2},
]


def _analyzer(rpm=1800.0):
    m = machine(rpm=rpm, bands=BANDS, analysis={"fmax_hz": 10000})
    return PointAnalyzer(m, m.points[0], FS)


def _tone(f, rms):
    return rms * np.sqrt(2) * np.sin(2 * np.pi * f * T + 1.0)


def test_rms_of_a_known_tone_in_a_band():
    # Parseval: sum(PSD) df over the tone's lobe = its mean square (references.md section 4)
    r = _analyzer().analyze(_tone(250.0, 0.7) + _tone(1500.0, 3.0))
    assert r.bands["acc-200-300"] == pytest.approx(0.7, rel=1e-4)


def test_off_line_tone_near_an_edge_is_still_collected():
    # a tone half a line off, 0.5 Hz inside the band's edge: the widened window holds its whole lobe
    r = _analyzer().analyze(_tone(299.5 - 3.125 / 2, 0.7))
    assert r.bands["acc-200-300"] == pytest.approx(0.7, rel=2e-3)


def test_order_band_follows_the_speed_used():
    # a 60 Hz tone is 2x at 1800 r/min (the configured speed) but 3x at 1200 r/min (a given speed)
    a = _analyzer(rpm=1800.0)
    x = _tone(60.0, 1.0)
    v_expected = 1.0 / (2 * np.pi * 60.0) * 1000.0  # |v| = |a| / (2 pi f) (references.md section 5)
    assert a.analyze(x).bands["vel-2x"] == pytest.approx(v_expected, rel=2e-3)
    assert a.analyze(x, rpm=1200.0).bands["vel-2x"] < 0.01 * v_expected
    # (at 40 Hz the 1/f^2 weight changes by +/- 16 % across the tone's lobe: 0.5 % tolerance)
    assert a.analyze(_tone(40.0, 1.0), rpm=1200.0).bands["vel-2x"] == pytest.approx(
        1.0 / (2 * np.pi * 40.0) * 1000.0, rel=5e-3)


def test_feature_band_is_root_sum_square_over_harmonics():
    bpfo = multiples_from_geometry(9, 0.3126, 1.537).bpfo * 30.0
    r = _analyzer().analyze(_tone(bpfo, 0.3) + _tone(2 * bpfo, 0.4) + _tone(3 * bpfo, 5.0))
    assert r.bands["acc-bpfo"] == pytest.approx(0.5, rel=2e-3)  # 3rd harmonic is outside (harmonics = 2)
    assert r.bands["vel-1x"] < 1e-3


@given(edges=st.lists(st.tuples(st.floats(0, 900), st.floats(0.1, 100)), min_size=1, max_size=6),
       df=st.floats(0.1, 10))
def test_window_bins_are_merged_and_cover_every_window(edges, df):
    windows = [(lo, lo + w) for lo, w in edges]
    ranges = window_bins(windows, df, 100000)
    assert all(a < b for a, b in ranges)
    assert all(ranges[i][1] < ranges[i + 1][0] for i in range(len(ranges) - 1))  # disjoint, sorted
    for lo, hi in windows:
        k = int(round((lo + hi) / 2 / df))
        assert any(a <= k < b for a, b in ranges)
