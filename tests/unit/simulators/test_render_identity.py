"""The synthesis renders the same signals, bit for bit, as before it was vectorised.

render-hashes.json holds hashes of arrays rendered by an earlier commit (named in the file) for every
shipped scenario at its first, middle and last snapshot time; a change that makes the simulator faster
must leave every sample as it was, so a replay of a scenario gives the same timeline.

Bit identity is defined for one build of the numerical libraries on one kind of processor: numpy and
scipy pick SIMD kernels (sin, cos, exp, FFTs) by CPU feature, and releases change them in the last
bits. The fixture records what it was made with ("made_with"); elsewhere (CI's lowest-versions pass,
another processor) the comparison has no meaning and the test says so instead of failing.
"""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import numpy as np
import pytest

from rotorwatch.simulators.render import ScenarioRenderer
from rotorwatch.simulators.scenario import load_scenario

ROOT = Path(__file__).resolve().parents[3]
FIXTURE = json.loads((Path(__file__).with_name("render-hashes.json")).read_text())


def _build() -> dict:
    """numpy and scipy versions and the CPU features numpy dispatches on, as the fixture records them."""
    import scipy

    try:
        from numpy._core._multiarray_umath import __cpu_features__ as features
    except ImportError:  # numpy 1.x
        from numpy.core._multiarray_umath import __cpu_features__ as features
    return {"numpy": np.__version__, "scipy": scipy.__version__,
            "cpu_features": sorted(k for k, on in features.items() if on)}


def _hash(a: np.ndarray) -> str:
    return hashlib.sha256(np.ascontiguousarray(a).tobytes()).hexdigest()[:32]


def rendered_hashes(path: Path) -> dict[str, str]:
    """The hashes render-hashes.json was made with (see its "how")."""
    name = path.stem
    sc = load_scenario(path)
    r = ScenarioRenderer(sc)
    fs = sc.config.acquisition.sample_rate_hz
    times = r.times()
    picks = [float(times[0]), float(times[len(times) // 2]), float(times[-1])]
    out = {}
    for t in picks:
        for pid, v in sorted(r.snapshot(t, 1.0, fs).items()):
            out[f"{name}/snapshot/{t:g}/{pid}"] = _hash(v)
        for pid, v in sorted(r.snapshot_accel(t + 0.3, 0.5, fs).items()):
            out[f"{name}/accel/{t:g}/{pid}"] = _hash(v)
    chunks = r.stream(fs, 4096, start_s=picks[1])
    out[f"{name}/stream/{picks[1]:g}"] = _hash(np.concatenate([next(chunks)[1], next(chunks)[1]]))
    return out


SCENARIOS = sorted({k.split("/")[0] for k in FIXTURE["hashes"]})  # the scenarios shipped when it was made


@pytest.mark.parametrize("name", SCENARIOS)
def test_signals_are_bit_identical_to_the_fixture(name):
    if _build() != FIXTURE["made_with"]:
        made = FIXTURE["made_with"]
        pytest.skip(f"render-hashes.json was made with numpy {made['numpy']} and scipy {made['scipy']} on a processor "
                    "with other features than this run's; bit identity holds only on the same build")
    want = {k: v for k, v in FIXTURE["hashes"].items() if k.startswith(name + "/")}
    assert len(want) >= 7  # 3 times x (snapshot, accel) x points, and a stream
    assert rendered_hashes(ROOT / "config" / "scenarios" / f"{name}.toml") == want
