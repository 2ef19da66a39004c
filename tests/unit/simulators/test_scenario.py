"""Scenario files: every shipped scenario loads; bad files give one-line errors naming file and field."""

from __future__ import annotations

from pathlib import Path

import pytest

from rotorwatch.errors import ConfigError
from rotorwatch.simulators.scenario import load_scenario

from .helpers import write_config, write_scenario

REPO = Path(__file__).resolve().parents[3]
SHIPPED = sorted((REPO / "config" / "scenarios").glob("*.toml"))
REQUIRED = {"demo-outer-race", "healthy", "inner-race", "unbalance", "blade-damage", "sensor-fault"}


def test_the_required_scenarios_are_shipped():
    assert REQUIRED <= {p.stem for p in SHIPPED}


@pytest.mark.parametrize("path", SHIPPED, ids=lambda p: p.stem)
def test_shipped_scenarios_load(path):
    sc = load_scenario(path)
    # each example machine's own scenarios (the shaft, drive, flow and electrical findings' ones are short)
    own = {"slow-fan": ("ct2", "slow-fan.toml"), "pump-": ("rw1", "pump-train.toml"),
           "belt-": ("sf4", "belt-fan.toml"), "gear-": ("gr2", "gearbox.toml")}
    prefix = next((k for k in own if path.stem.startswith(k)), None)
    if prefix is not None:
        assert sc.machine.id == own[prefix][0]
        assert sc.config_path == (REPO / "config" / own[prefix][1]).resolve()
    else:  # the demo fan's month, and its short looseness story
        assert sc.machine.id == "ef3"
        assert sc.config_path == (REPO / "config" / "demo-fan.toml").resolve()
        assert sc.duration_s == pytest.approx((8 if path.stem == "looseness" else 30) * 86400)
    assert path.read_text().lstrip().startswith("#"), "each scenario file starts with a comment saying what it is"


def _problems(tmp_path, **kwargs) -> list[str]:
    cfg = write_config(tmp_path, points=[
        {"id": "p1", "bearing": "b1", "sensor": {"channel": 0, "sensitivity_mv_per_g": 100.0}},
        {"id": "p2", "sensor": {"channel": 1, "sensitivity_mv_per_g": 100.0}},
    ])
    path = write_scenario(tmp_path, kwargs.pop("config", cfg), **kwargs)
    with pytest.raises(ConfigError) as info:
        load_scenario(path)
    problems = info.value.problems
    for line in problems:
        assert "\n" not in line
        assert line.startswith(str(path)), line
    return problems


def _one(tmp_path, **kwargs) -> str:
    problems = _problems(tmp_path, **kwargs)
    assert len(problems) == 1, problems
    return problems[0]


def test_good_file_loads(tmp_path):
    cfg = write_config(tmp_path)
    sc = load_scenario(write_scenario(tmp_path, cfg, changes=[
        {"start_day": 0.5, "end_day": 1.5, "component": "outer_race", "bearing": "b1", "to": 3.0},
    ]))
    assert sc.machine.id == "m1" and len(sc.spec.change) == 1


def test_unknown_key(tmp_path):
    line = _one(tmp_path, extra_header="colour = 3")
    assert "scenario.colour" in line and "unknown key" in line


def test_unknown_key_in_a_change(tmp_path):
    line = _one(tmp_path, changes=[{"start_day": 0, "end_day": 1, "component": "noise", "to": 1.0, "sise": 2}])
    assert "change[0].sise" in line and "unknown key" in line


def test_missing_config_file(tmp_path):
    line = _one(tmp_path, config="nowhere/machine.toml")
    assert "scenario.config = 'nowhere/machine.toml'" in line and "no such file" in line


def test_end_before_start(tmp_path):
    line = _one(tmp_path, changes=[{"start_day": 1.0, "end_day": 0.5, "component": "noise", "to": 1.0}])
    assert "change[0]" in line and "end_day 0.5 must be after start_day 1" in line


def test_unknown_component_lists_the_choices(tmp_path):
    line = _one(tmp_path, changes=[{"start_day": 0, "end_day": 1, "component": "rust", "to": 1.0}])
    assert "change[0].component = 'rust'" in line and "outer_race" in line and "sensor" in line


def test_unknown_bearing(tmp_path):
    line = _one(tmp_path, changes=[{"start_day": 0, "end_day": 1, "component": "inner_race", "bearing": "b9", "to": 1.0}])
    assert "change[0].bearing = 'b9'" in line and "known: b1" in line


def test_unknown_point(tmp_path):
    line = _one(tmp_path, changes=[{"start_day": 0, "end_day": 1, "component": "unbalance", "points": ["p7"], "to": 1.0}])
    assert "change[0].points = ['p7']" in line and "known: p1, p2" in line


def test_bearing_component_needs_a_bearing(tmp_path):
    line = _one(tmp_path, changes=[{"start_day": 0, "end_day": 1, "component": "ball", "to": 1.0}])
    assert "needs bearing" in line


def test_sensor_fault_needs_its_kind(tmp_path):
    line = _one(tmp_path, changes=[{"start_day": 0, "end_day": 1, "component": "sensor"}])
    assert "needs fault" in line and "disconnected" in line


def test_unknown_fault(tmp_path):
    line = _one(tmp_path, changes=[{"start_day": 0, "end_day": 1, "component": "sensor", "fault": "melted"}])
    assert "change[0].fault = 'melted'" in line


def test_overlapping_changes(tmp_path):
    line = _one(tmp_path, changes=[
        {"start_day": 0, "end_day": 1, "component": "unbalance", "to": 2.0},
        {"start_day": 0.5, "end_day": 1.5, "component": "unbalance", "to": 3.0},
    ])
    assert "change[1]: overlaps change[0]" in line


def test_start_after_the_end(tmp_path):
    line = _one(tmp_path, changes=[{"start_day": 5, "component": "noise", "to": 1.0, "shape": "step"}])
    assert "change[0].start_day = 5" in line and "after the scenario's end" in line


def test_step_with_end_day_is_refused(tmp_path):
    line = _one(tmp_path, changes=[{"start_day": 1, "end_day": 1.5, "component": "noise", "to": 1.0, "shape": "step"}])
    assert "end_day is not used" in line


def test_unknown_machine(tmp_path):
    line = _one(tmp_path, extra_header='machine = "m9"')
    assert "scenario.machine = 'm9'" in line and "known: m1" in line


def test_negative_severity(tmp_path):
    line = _one(tmp_path, changes=[{"start_day": 0, "end_day": 1, "component": "noise", "to": -1.0}])
    assert "change[0].to = -1.0" in line


def test_several_problems_one_line_each(tmp_path):
    problems = _problems(tmp_path, changes=[
        {"start_day": 0, "end_day": 1, "component": "inner_race", "bearing": "b9", "to": 1.0},
        {"start_day": 0, "end_day": 1, "component": "unbalance", "points": ["p7"], "to": 1.0},
    ])
    assert len(problems) == 2


def test_toml_syntax_error(tmp_path):
    path = tmp_path / "broken.toml"
    path.write_text("[scenario\nname = 1\n")
    with pytest.raises(ConfigError) as info:
        load_scenario(path)
    assert len(info.value.problems) == 1 and "TOML syntax" in info.value.problems[0]


def test_missing_scenario_file(tmp_path):
    with pytest.raises(ConfigError, match="no such file"):
        load_scenario(tmp_path / "absent.toml")


def test_bad_machine_config_reports_the_config_file(tmp_path):
    bad = tmp_path / "bad-machine.toml"
    bad.write_text("[[machines]]\nid = 'm1'\n")
    path = write_scenario(tmp_path, bad)
    with pytest.raises(ConfigError) as info:
        load_scenario(path)
    assert all(str(bad.resolve()) in line or "bad-machine.toml" in line for line in info.value.problems)
