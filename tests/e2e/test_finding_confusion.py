"""The confusion table of the shaft, drive, flow and electrical findings over every shipped scenario.

Each scenario is sampled at seven moments spread over its timeline (the faults grown by then), each
sample run through the machine's pipeline (the daemon's and replay's code); findings on a point whose
sensor is at fault are not trusted and not counted, as in replay. A finding kind must be named
in the scenarios that simulate its fault and in no other. What each scenario simulates is read from its
own file (the components its changes grow), so the table checks the analysis against the simulator's
ground truth; the simulator computes its kinematics on its own (DEVELOPERS.md). The table is printed (run
with -s) and kept in the README.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from rotorwatch.pipeline import MachinePipeline
from rotorwatch.replay import TRUSTED_STATES
from rotorwatch.settings.models import DIAGNOSIS_FINDING_NAMES
from rotorwatch.simulators.render import ScenarioRenderer
from rotorwatch.simulators.scenario import load_scenario

REPO = Path(__file__).resolve().parents[2]
SCENARIOS = sorted((REPO / "config" / "scenarios").glob("*.toml"))
FRACTIONS = (0.15, 0.35, 0.55, 0.7, 0.8, 0.9, 0.99)

# the finding each simulated component should be named as (looseness's 3x..8x series and its half orders
# are one finding; 2xLF is the twice_line component; a gear's mesh alone is healthy, its sidebands are not)
NAMED_AS = {"unbalance": "unbalance", "misalignment": "misalignment", "looseness": "looseness",
            "half_orders": "looseness", "belt": "belt", "blade_pass": "blade_pass", "flow": "flow",
            "twice_line": "2xLF", "pole_pass": "pole_pass", "gear_sidebands": "gear_mesh"}
# a component grown this little is not expected to be named (below the zone A/B boundary of its machine)
EXPECTED_SHARE_OF_AB = {"unbalance": 1.0, "blade_pass": 1.0}


def _expected(scenario) -> set[str]:
    """The finding names a scenario's changes should produce: the components it grows."""
    from rotorwatch.analysis.severity import boundaries

    ab = boundaries(scenario.machine.iso_group, scenario.machine.support)[0]
    out = set()
    for ch in scenario.spec.change:
        name = NAMED_AS.get(ch.component)
        if name is None or ch.to is None:
            continue
        if ch.component in EXPECTED_SHARE_OF_AB and ch.to < EXPECTED_SHARE_OF_AB[ch.component] * ab:
            continue
        out.add(name)
    return out


def _named(path: Path, tmp: Path) -> dict[str, int]:
    """How many of the samples name each finding (on any point)."""
    scenario = load_scenario(path)
    renderer = ScenarioRenderer(scenario)
    fs = scenario.config.acquisition.sample_rate_hz
    window = scenario.machine.analysis.window_s
    pipeline = MachinePipeline(scenario.config, scenario.machine, state_dir=tmp)
    counts: dict[str, int] = {}
    try:
        for frac in FRACTIONS:
            t = frac * scenario.duration_s
            update = pipeline.step(t, renderer.snapshot(t, window, fs), fs_hz=fs)
            names = {f.name for pu in update.points.values()
                     if pu.result is not None and pu.state in TRUSTED_STATES for f in pu.result.findings}
            for n in names:
                counts[n] = counts.get(n, 0) + 1
    finally:
        pipeline.close()
    return counts


@pytest.fixture(scope="module")
def table(tmp_path_factory) -> dict[str, tuple[set[str], dict[str, int]]]:
    out = {}
    for path in SCENARIOS:
        out[path.stem] = (_expected(load_scenario(path)), _named(path, tmp_path_factory.mktemp(path.stem)))
    return out


def test_confusion_table(table):
    kinds = list(DIAGNOSIS_FINDING_NAMES)
    width = max(len(s) for s in table) + 2
    head = f"{'scenario':<{width}}" + "".join(f"{k:>13}" for k in kinds) + "   bearing"
    rows = [head]
    wrong = []
    for stem, (expected, counts) in table.items():
        cells = []
        for k in kinds:
            n = counts.get(k, 0)
            mark = f"{n}/{len(FRACTIONS)}" + ("*" if k in expected else " ")
            cells.append(f"{mark:>13}")
            if k in expected and n == 0:
                wrong.append(f"{stem}: {k} is simulated and never named")
            if k not in expected and n > 0:
                wrong.append(f"{stem}: {k} named in {n} samples but not simulated")
        bearing = ", ".join(f"{k} {n}" for k, n in sorted(counts.items()) if k not in kinds) or "-"
        rows.append(f"{stem:<{width}}" + "".join(cells) + f"   {bearing}")
    print("\nsamples naming each finding (* = the scenario simulates it)\n" + "\n".join(rows))
    assert not wrong, wrong
    # every finding kind is simulated by at least one shipped scenario
    simulated = set().union(*(e for e, _ in table.values()))
    assert simulated == set(kinds), sorted(set(kinds) - simulated)
