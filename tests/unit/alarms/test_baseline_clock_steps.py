"""Baseline learning across wall-clock steps of hours to years (update times are injected)."""

from __future__ import annotations

import pytest

from rotorwatch.alarms.baseline import BaselineStore

from .helpers import machine

T0 = 1_767_225_600.0  # 2026-01-01T00:00:00Z
HOUR_S = 3600.0
YEAR_S = 365 * 86400.0


@pytest.mark.parametrize("step_s", [-3 * HOUR_S, -YEAR_S, -5 * YEAR_S])
def test_baseline_learning_neither_stalls_nor_loses_time_on_a_step_back(tmp_path, step_s):
    store = BaselineStore(machine(learning_hours=2.0, min_learning_updates=5), tmp_path)
    t = T0
    for _ in range(4):  # 1.5 h covered
        store.add("p1", "overall", 1.0, t)
        t += 1800.0
    t += step_s - 1800.0  # the clock goes back
    assert store.progress("p1", "overall")[1] == pytest.approx(1.5)
    assert store.add("p1", "overall", 1.0, t) is None  # the step adds nothing
    assert store.progress("p1", "overall")[1] == pytest.approx(1.5)
    assert store.add("p1", "overall", 1.0, t + 1800.0) is not None  # the next half hour completes it


def test_baseline_checkpoint_after_a_step_back(tmp_path):
    store = BaselineStore(machine(learning_hours=100.0, min_learning_updates=5), tmp_path, checkpoint_s=3600.0)
    store.add("p1", "overall", 1.0, T0 + YEAR_S)
    store.checkpoint(T0 + YEAR_S)
    saved = store.path.stat().st_mtime_ns
    store.add("p1", "overall", 1.1, T0)  # a year back
    store.checkpoint(T0)
    assert store.path.stat().st_mtime_ns != saved  # saved, rather than waiting a year to catch up
    assert BaselineStore(machine(learning_hours=100.0, min_learning_updates=5), tmp_path).progress(
        "p1", "overall")[0] == 2
