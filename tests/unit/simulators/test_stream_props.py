"""Property tests: any chunking of the stream equals the whole; the fast ring equals its slow twin."""

from __future__ import annotations

import itertools

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from rotorwatch.simulators.components import ImpactKernel, ring, ring_slow

from .helpers import renderer_for

FS = 24000.0


@settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(chunk=st.integers(1, 5000), start_s=st.floats(0.0, 2 * 86400.0), seed=st.integers(0, 2 ** 31))
def test_any_chunking_equals_the_whole(tmp_path_factory, chunk, start_s, seed):
    d = tmp_path_factory.mktemp("chunks")
    r = renderer_for(d, config_kwargs={"fs_hz": FS}, seed=seed,
                     healthy={"unbalance_mm_s": 1.0, "noise_m_s2": 0.2, "speed_drift_pct": 0.4},
                     changes=[{"start_day": 0.0, "end_day": 2.0, "component": "outer_race", "bearing": "b1", "to": 3.0}])
    n_total = min(6000, 300 * chunk)  # tiny chunks: fewer of them, the per-chunk work dominates
    count = -(-n_total // chunk)
    stream = np.concatenate([c[:, 0] for _, c in itertools.islice(r.stream(FS, chunk, start_s=start_s), count)])
    whole = r.snapshot(start_s, count * chunk / FS, FS)["p1"].astype(np.float32)
    assert np.array_equal(stream, whole)


@settings(max_examples=25, deadline=None)
@given(times=st.lists(st.floats(0.0, 0.05), min_size=0, max_size=20), fn=st.floats(1500.0, 8000.0),
       zeta=st.floats(0.01, 0.2), n0=st.integers(0, 10 ** 9))
def test_ring_equals_slow_twin(times, fn, zeta, n0):
    fs = 20000.0
    k = ImpactKernel(fn, zeta)
    t = n0 / fs + np.sort(np.array(times))
    amps = np.linspace(0.5, 2.0, len(times))
    n = 1200
    fast = ring(k, t, amps, n0, n, fs)
    slow = ring_slow(k, t, amps, n0, n, fs)
    # both twins round absolute times (ulp of t); the kernel's slope is about 2 pi fn per unit peak
    tol = 1e-9 + 2 * np.pi * fn * 16 * np.spacing(n0 / fs + 0.1)
    assert np.max(np.abs(fast - slow), initial=0.0) <= tol * max(1.0, np.max(np.abs(slow), initial=0.0))
