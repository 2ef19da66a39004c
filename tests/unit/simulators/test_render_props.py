"""Property tests of the renderer (hypothesis): linearity in severity and additivity of components."""

from __future__ import annotations

import math

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from .helpers import QUIET, renderer_for

FS = 24000.0
SLOW = settings(max_examples=10, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
size = st.floats(0.1, 5.0)


@SLOW
@given(v=size, k=st.floats(0.2, 4.0), component=st.sampled_from(["unbalance_mm_s", "misalignment_mm_s",
                                                                  "looseness_mm_s", "noise_m_s2"]))
def test_signal_scales_with_its_severity(tmp_path_factory, v, k, component):
    # one component alone: doubling its size doubles every sample (same seed, same realisation)
    a = renderer_for(tmp_path_factory.mktemp("a"), healthy={**QUIET, component: v}).snapshot_accel(500.0, 0.5, FS)["p1"]
    b = renderer_for(tmp_path_factory.mktemp("b"), healthy={**QUIET, component: k * v}).snapshot_accel(500.0, 0.5, FS)["p1"]
    assert np.allclose(b, k * a, rtol=1e-9, atol=1e-12)


@SLOW
@given(unb=size, mis=size, noise=size, outer=size, seed=st.integers(0, 2 ** 31))
def test_components_add_sample_by_sample_and_in_mean_square(tmp_path_factory, unb, mis, noise, outer, seed):
    parts = {"unbalance_mm_s": unb, "misalignment_mm_s": mis, "noise_m_s2": noise}
    defect = [{"start_day": 0, "component": "outer_race", "bearing": "b1", "to": outer, "shape": "step"}]
    t, dur = 3600.0, 4.0
    whole = renderer_for(tmp_path_factory.mktemp("w"), healthy={**QUIET, **parts}, changes=defect, seed=seed)
    x = whole.snapshot_accel(t, dur, FS)["p1"]
    pieces = [renderer_for(tmp_path_factory.mktemp("p"), healthy={**QUIET, key: val}, seed=seed).snapshot_accel(t, dur, FS)["p1"]
              for key, val in parts.items()]
    pieces.append(renderer_for(tmp_path_factory.mktemp("d"), changes=defect, seed=seed).snapshot_accel(t, dur, FS)["p1"])
    assert np.allclose(x, sum(pieces), rtol=1e-9, atol=1e-9)  # the signal is the sum of its parts
    # independent (uncorrelated) parts: mean squares add (standard result); loose for finite records
    assert math.isclose(np.mean(x ** 2), sum(np.mean(p ** 2) for p in pieces), rel_tol=0.05)
