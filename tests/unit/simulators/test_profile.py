"""Severity timelines: values, closed-form integrals (checked with scipy.integrate.quad), holding."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import quad

from rotorwatch.simulators.profile import EXP_GROWTH, Profile, Ramp


def _numeric_integral(p: Profile, t: float, breaks) -> float:
    # scipy.integrate.quad as the outside reference for the closed form
    if t < 0:
        return -quad(lambda x: p.value(x), t, 0, limit=200)[0]
    return quad(lambda x: p.value(x), 0, t, limit=200, points=[b for b in breaks if 0 < b < t] or None)[0]


def test_values_of_each_shape():
    p = Profile(1.0, [Ramp(10, 20, 5.0, "linear"), Ramp(25, 25, 2.0, "step"), Ramp(30, 50, 8.0, "exponential")])
    assert p.value(5.0) == 1.0
    assert p.value(15.0) == pytest.approx(3.0)
    assert p.value(20.0) == pytest.approx(5.0)
    assert p.value(24.999) == pytest.approx(5.0)
    assert p.value(25.0) == 2.0  # a step takes effect at its start
    # An exponential ramp is at 12 % of its change half-way and 36 % at three quarters (EXP_GROWTH's
    # comment); to four places, worked by hand with k = 4: (e^2 - 1)/(e^4 - 1) = 1/(1 + e^2) = 0.1192
    # and (e^3 - 1)/(e^4 - 1) = 19.0855/53.5982 = 0.3561. The ramp runs from 2.0 to 8.0 over 30..50 s.
    assert EXP_GROWTH == 4.0
    assert p.value(40.0) == pytest.approx(2.0 + 6.0 * 0.1192, abs=6.0 * 1e-4)
    assert p.value(45.0) == pytest.approx(2.0 + 6.0 * 0.3561, abs=6.0 * 1e-4)
    assert p.value(50.0) == pytest.approx(8.0)
    assert p.value(1e9) == pytest.approx(8.0)
    assert np.allclose(p.value(np.array([5.0, 15.0, 60.0])), [1.0, 3.0, 8.0])


def test_integral_matches_quadrature():
    breaks = [10, 20, 25, 30, 40, 50]
    p = Profile(1.0, [Ramp(10, 20, 5.0, "linear"), Ramp(25, 25, 2.0, "step"), Ramp(30, 50, 8.0, "exponential")],
                hold_after_s=40)
    for t in [-5.0, 0.0, 3.0, 10.0, 17.0, 20.0, 24.0, 26.0, 33.0, 40.0, 47.0, 200.0]:
        assert p.integral(t) == pytest.approx(_numeric_integral(p, t, breaks), rel=1e-9, abs=1e-9)


def test_hold_after_keeps_the_value_reached():
    p = Profile(0.0, [Ramp(0, 100, 10.0, "linear")], hold_after_s=30)
    assert p.value(30.0) == pytest.approx(3.0)
    assert p.value(1000.0) == pytest.approx(3.0)
    assert p.final_value == pytest.approx(3.0)
    assert p.peak_value == pytest.approx(3.0)
    assert p.integral(50.0) == pytest.approx(0.5 * 30 * 3.0 + 20 * 3.0)


def test_is_constant():
    p = Profile(1.0, [Ramp(10, 20, 5.0, "linear"), Ramp(25, 25, 2.0, "step")])
    assert p.is_constant(0, 9.9)
    assert not p.is_constant(0, 11)
    assert not p.is_constant(12, 13)
    assert p.is_constant(20, 24)
    assert not p.is_constant(24, 26)
    assert p.is_constant(26, 1e9)


def test_overlapping_ramps_are_refused():
    with pytest.raises(ValueError, match="overlap"):
        Profile(0.0, [Ramp(0, 10, 1.0), Ramp(5, 15, 2.0)])
