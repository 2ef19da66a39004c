"""Property tests of severity timelines (hypothesis)."""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from rotorwatch.simulators.profile import Profile, Ramp

values = st.floats(0.0, 100.0, allow_nan=False)
shapes = st.sampled_from(["linear", "exponential", "step"])


@st.composite
def profiles(draw):
    n = draw(st.integers(0, 4))
    t, ramps = 0.0, []
    for _ in range(n):
        start = t + draw(st.floats(0.0, 50.0))
        shape = draw(shapes)
        end = start if shape == "step" else start + draw(st.floats(0.5, 50.0))
        ramps.append(Ramp(start, end, draw(values), shape))
        t = end
    hold = draw(st.none() | st.floats(1.0, 250.0))
    return Profile(draw(values), ramps, hold), ramps, hold


@settings(max_examples=60, deadline=None)
@given(profiles(), st.floats(-10.0, 300.0), st.floats(1e-3, 0.05))
def test_integral_derivative_is_the_value(pack, t, h):
    # fundamental theorem of calculus: (I(t+h) - I(t-h)) / 2h -> value(t) away from jumps
    p, ramps, hold = pack
    edges = [r.start_s for r in ramps] + [r.end_s for r in ramps] + ([hold] if hold else [])
    if any(abs(t - e) < 2 * h for e in edges):
        return
    slope = (p.integral(t + h) - p.integral(t - h)) / (2 * h)
    scale = max(1.0, abs(p.value(t)), p.peak_value)
    assert abs(slope - p.value(t)) <= 1e-3 * scale


@settings(max_examples=60, deadline=None)
@given(values, values, shapes, st.floats(0.0, 1.0))
def test_a_ramp_stays_between_its_ends(v0, v1, shape, x):
    end = 10.0 if shape == "step" else 20.0
    p = Profile(v0, [Ramp(10.0, end, v1, shape)])
    v = p.value(10.0 + x * 10.0)
    assert min(v0, v1) - 1e-9 <= v <= max(v0, v1) + 1e-9


@settings(max_examples=40, deadline=None)
@given(profiles())
def test_vector_and_scalar_evaluation_agree(pack):
    p = pack[0]
    t = np.linspace(-5, 300, 37)
    assert np.allclose(p.value(t), [p.value(float(x)) for x in t])
    assert np.allclose(p.integral(t), [p.integral(float(x)) for x in t])
