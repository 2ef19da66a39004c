"""Baseline learning: robust statistics, the learning period, persistence and re-learning."""

from __future__ import annotations

import json
import os

import numpy as np
import pytest

from rotorwatch.alarms.baseline import BaselineStore, definition_hash, robust_stats
from rotorwatch.settings.models import AlarmPolicy

from .helpers import machine


def test_robust_stats_ignore_an_outlier():
    med, mad = robust_stats([1.0, 1.1, 0.9, 1.0, 50.0])
    assert med == 1.0
    assert mad == pytest.approx(0.1)


def test_learning_needs_hours_and_updates(tmp_path):
    store = BaselineStore(machine(learning_hours=2.0, min_learning_updates=5), tmp_path)
    # 4 updates over 3 hours: enough time, too few updates
    for i, t in enumerate([0, 3600, 7200, 10800]):
        assert store.add("p1", "overall", 1.0 + 0.01 * i, t) is None
    b = store.add("p1", "overall", 1.0, 10900)
    assert b is not None and b.n == 5
    # 10 updates within a minute: enough updates, too little time
    for i in range(10):
        assert store.add("p2", "overall", 1.0, 6.0 * i) is None
    assert not store.is_learned("p2", "overall")


def test_zero_learning_hours_learns_after_min_updates():
    store = BaselineStore(machine(), None, AlarmPolicy(learning_hours=0, min_learning_updates=3))
    assert store.add("p1", "outer", 0.1, 0) is None
    assert store.add("p1", "outer", 0.2, 1) is None
    b = store.add("p1", "outer", 0.3, 2)
    assert (b.median, b.n) == (pytest.approx(0.2), 3)


def test_memory_stays_bounded_and_evenly_spread():
    store = BaselineStore(machine(learning_hours=1e6, min_learning_updates=1), None, max_samples=64)
    for i in range(10_000):
        store.add("p1", "overall", float(i), float(i))
    e = store.entries["p1/overall"]
    assert len(e.samples) <= 64
    gaps = np.diff(e.samples)
    assert np.all(gaps == gaps[0])  # every stride-th value: evenly spread over the period


def test_baselines_survive_a_restart(tmp_path):
    m = machine(learning_hours=0, min_learning_updates=3)
    store = BaselineStore(m, tmp_path)
    for t, x in enumerate([0.1, 0.12, 0.11]):
        store.add("p1", "outer", x, t)
    store.checkpoint(2)  # after the update: a learned baseline is written at once
    again = BaselineStore(m, tmp_path)
    b = again.baseline("p1", "outer")
    assert b is not None and b.median == pytest.approx(0.11)
    doc = json.loads((tmp_path / "baselines" / "fan1.json").read_text())
    assert doc["entries"]["p1/outer"]["status"] == "learned"


def test_learning_progress_is_checkpointed(tmp_path):
    m = machine(learning_hours=10, min_learning_updates=3)
    store = BaselineStore(m, tmp_path, checkpoint_s=600.0)
    store.add("p1", "overall", 1.0, 0.0)
    store.checkpoint(0.0)  # first checkpoint writes
    store.add("p1", "overall", 1.0, 300.0)
    store.checkpoint(300.0)  # 300 s later: not yet
    assert BaselineStore(m, tmp_path).progress("p1", "overall")[0] == 1
    store.add("p1", "overall", 1.0, 600.0)
    store.checkpoint(600.0)
    assert BaselineStore(m, tmp_path).progress("p1", "overall")[0] == 3


def test_one_write_per_update_when_many_values_learn(tmp_path, monkeypatch):
    store = BaselineStore(machine(learning_hours=0, min_learning_updates=1), tmp_path)
    writes = []
    real_replace = os.replace

    def counting_replace(src, dst):
        writes.append(dst)
        real_replace(src, dst)

    monkeypatch.setattr("rotorwatch.alarms.baseline.os.replace", counting_replace)
    for p in ("p1", "p2"):
        for v in ("overall", "outer"):
            store.add(p, v, 1.0, 0)
    store.checkpoint(0)
    assert len(writes) == 1


def test_changed_band_definition_relearns_but_changed_levels_do_not(tmp_path):
    m = machine(learning_hours=0, min_learning_updates=1)
    store = BaselineStore(m, tmp_path)
    store.add("p1", "outer", 0.1, 0)
    store.checkpoint(0)
    assert store.is_learned("p1", "outer")
    new_levels = machine(learning_hours=0, min_learning_updates=1, band_levels={"relative_warning": 3.0})
    assert BaselineStore(new_levels, tmp_path).is_learned("p1", "outer")
    moved = machine(learning_hours=0, min_learning_updates=1, band_quantity="acceleration")
    assert definition_hash(moved, "p1", "outer") != definition_hash(m, "p1", "outer")
    assert not BaselineStore(moved, tmp_path).is_learned("p1", "outer")
    assert BaselineStore(moved, tmp_path).is_learned("p1", "overall") is False  # never learned
    store.add("p1", "overall", 1.0, 0)
    store.checkpoint(0)
    assert BaselineStore(moved, tmp_path).is_learned("p1", "overall")  # overall untouched by the band


def test_relearn_resets_the_chosen_values(tmp_path):
    m = machine(learning_hours=0, min_learning_updates=1)
    store = BaselineStore(m, tmp_path)
    for p in ("p1", "p2"):
        for v in ("overall", "outer"):
            store.add(p, v, 1.0, 0)
    store.checkpoint(0)
    assert store.relearn("p1", "outer") == ["p1/outer"]
    again = BaselineStore(m, tmp_path)
    assert not again.is_learned("p1", "outer")
    assert again.is_learned("p1", "overall") and again.is_learned("p2", "outer")
    assert sorted(again.relearn()) == ["p1/outer", "p1/overall", "p2/outer", "p2/overall"]


def test_corrupt_file_is_moved_aside_not_lost(tmp_path):
    folder = tmp_path / "baselines"
    folder.mkdir()
    (folder / "fan1.json").write_text("{not json")
    store = BaselineStore(machine(), tmp_path)
    assert not store.is_learned("p1", "overall")
    aside = list(folder.glob("fan1.json.corrupt-*"))
    assert len(aside) == 1 and aside[0].read_text() == "{not json"


def test_write_is_atomic_no_temporary_left(tmp_path):
    store = BaselineStore(machine(learning_hours=0, min_learning_updates=1), tmp_path)
    store.add("p1", "overall", 1.0, 0)
    store.checkpoint(0)
    names = sorted(p.name for p in (tmp_path / "baselines").iterdir())
    assert names == ["fan1.json"]


def test_unusable_state_dir_is_a_one_line_error(tmp_path):
    from rotorwatch.errors import ConfigError

    blocker = tmp_path / "file"
    blocker.write_text("x")
    with pytest.raises(ConfigError) as e:
        BaselineStore(machine(), blocker)
    assert "\n" not in str(e.value) and "storage.state_dir" in str(e.value)
