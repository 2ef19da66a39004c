"""Threshold margins on a worked example, and ``--set`` into arrays of tables (levels of one band)."""

from __future__ import annotations

from pathlib import Path

import pytest

from rotorwatch.errors import ConfigError
from rotorwatch.expectations import Sample
from rotorwatch.history.margins import LevelLog, Reading, margins
from rotorwatch.settings.loading import apply_overrides, load_config

REPO = Path(__file__).resolve().parents[3]
CONFIG = REPO / "config" / "university-rig.toml"


def _log(values: list[float], learning: int = 3, baseline: float = 1.0) -> LevelLog:
    machine = load_config(CONFIG).machines[0]
    log = LevelLog(machine, 0.0)
    for k, v in enumerate(values):
        t = 3600.0 * k
        state = "learning" if k < learning else ("warning" if v >= 3.0 else "normal")
        base = None if k < learning else baseline
        log.series.setdefault(("de", "outer-race"), []).append(
            Reading(t, v, state, 3.0 if base else None, 6.0 if base else None, base))
        log.samples.append(Sample(t, state, {"de": state}, {}, {}))
        if state == "warning" and log.first_raise_s is None:
            log.first_raise_s = t
    return log


def test_worked_example():
    # hours 0-2 learning, 3-5 healthy (max 1.2), then 2.0, 4.0, 4.5, 9.0, 8.0 (the end at hour 10)
    log = _log([1.0, 1.1, 0.9, 1.2, 1.0, 1.1, 2.0, 4.0, 4.5, 9.0, 8.0])
    (m,), until, how = margins(log, 5 * 3600.0, lead_s=3 * 3600.0)
    assert (until, how) == (5 * 3600.0, "--healthy-until")
    assert m.learned_s == 3 * 3600.0 and m.baseline == 1.0
    assert m.healthy_max == pytest.approx(1.2) and m.spread == pytest.approx(1.2)
    assert m.crossed_s["warning"] == 7 * 3600.0 and m.crossed_s["alarm"] == 9 * 3600.0
    # warned at least 3 h before the end (hour 7 at the latest) with the rig's on-delay of 2 updates:
    # hours 6-7 reach 2.0, nothing later counts; so levels in (1.2, 2.0]
    assert m.warn_range == (pytest.approx(1.2), pytest.approx(2.0))
    (m,), _, _ = margins(log, 5 * 3600.0, lead_s=1 * 3600.0)  # up to hour 9: hours 8-9 reach 4.5
    assert m.warn_range[1] == pytest.approx(4.5)
    (m,), _, _ = margins(log, 8 * 3600.0, lead_s=3 * 3600.0)  # a healthy part up to 4.5: nothing left
    assert m.warn_range is None
    # by default the healthy part ends at the update before the first crossing (hour 7): hour 6
    (m,), until, how = margins(log, None, lead_s=3 * 3600.0)
    assert until == 6 * 3600.0 and "first crossing" in how and m.healthy_max == pytest.approx(2.0)
    assert m.warn_range is None  # 2.0 in the healthy part, and nothing above it by hour 7


def test_set_reaches_a_band_of_a_machine():
    data = {"machines": [{"id": "rig", "bands": [{"name": "outer-race", "levels": {}}, {"name": "ball"}]}]}
    apply_overrides(data, ["machines.rig.bands.ball.levels.relative_warning=4"], "c.toml")
    assert data["machines"][0]["bands"][1] == {"name": "ball", "levels": {"relative_warning": 4}}
    with pytest.raises(ConfigError) as e:
        apply_overrides(data, ["machines.fan.bands.ball.levels.warning=4"], "c.toml")
    assert "no element with id or name 'fan'" in str(e.value)


def test_set_changes_a_replayed_level():
    cfg = load_config(CONFIG, ["machines.rig.bands.outer-race.levels.relative_warning=4.5"])
    band = next(b for b in cfg.machines[0].bands if b.name == "outer-race")
    assert band.levels.relative_warning == 4.5
