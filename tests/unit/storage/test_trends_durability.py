"""The trend store on a small box: batched commits, a damaged file set aside, wall-clock steps."""

from __future__ import annotations

import logging
import sqlite3

from rotorwatch.storage.trends import DAY_S, TrendStore

from .samples import T0, update
from .test_trends import Clock


def rows_on_disk(path) -> int:
    with sqlite3.connect(path) as db:
        return db.execute("SELECT COUNT(*) FROM samples").fetchone()[0]


def test_rows_are_committed_in_batches(tmp_path):
    wall, mono = Clock(T0), Clock(0.0)
    path = tmp_path / "t.sqlite"
    store = TrendStore(path, flush_interval_s=300, prune_interval_s=3600, clock=wall, monotonic=mono)
    per_update = store.record(update(T0))
    assert per_update > 0 and rows_on_disk(path) == per_update  # the first update's prune committed it
    for k in range(1, 10):
        mono.t, wall.t = 30.0 * k, T0 + 30.0 * k
        store.record(update(T0 + 30.0 * k))
    assert rows_on_disk(path) == per_update and store.stats().rows == 10 * per_update  # waiting in memory
    mono.t = 300.0
    store.record(update(T0 + 300.0))
    assert rows_on_disk(path) == 11 * per_update  # one commit for the batch
    store.record(update(T0 + 310.0))
    assert len(store.query()) == 12 * per_update  # a query sees the rows still waiting
    store.record(update(T0 + 320.0))
    store.close()
    assert rows_on_disk(path) == 13 * per_update  # and close writes the rest


def test_a_damaged_file_is_set_aside_with_one_warning(tmp_path, caplog):
    path = tmp_path / "trends.sqlite"
    with TrendStore(path) as store:
        for k in range(50):
            store.record(update(T0 + k))
    data = path.read_bytes()
    path.write_bytes(data[:4096] + b"\x5a" * (len(data) - 4096))  # the pages after the header torn
    with caplog.at_level(logging.WARNING):
        with TrendStore(path) as store:
            assert store.stats().rows == 0
            assert store.record(update(T0 + 100)) > 0
    warnings = [r.getMessage() for r in caplog.records if r.levelno >= logging.WARNING]
    assert len(warnings) == 1 and "trends.sqlite" in warnings[0] and "set aside" in warnings[0]
    assert len(list(tmp_path.glob("trends.sqlite.damaged-*"))) == 1
    assert rows_on_disk(path) > 0


def test_a_clock_step_forward_does_not_wipe_the_store(tmp_path):
    wall, mono = Clock(T0), Clock(0.0)
    with TrendStore(tmp_path / "t.sqlite", retention_days=30, prune_interval_s=60, clock=wall,
                    monotonic=mono) as store:
        for k in range(10):
            wall.t = mono.t = T0 + 60.0 * k
            store.record(update(wall.t))
        before = store.stats().rows
        wall.t += 3 * 365 * DAY_S  # NTP steps the clock three years ahead
        mono.t += 60.0
        store.record(update(wall.t))
        assert store.stats().pruned_by_age == 0 and store.stats().rows > before
        mono.t += 31 * DAY_S  # a month later in real time, the old rows go
        wall.t += 31 * DAY_S
        store.record(update(wall.t))
        assert store.stats().pruned_by_age == before


def test_a_clock_step_back_neither_stalls_trending_nor_pruning(tmp_path):
    wall, mono = Clock(T0 + 365 * DAY_S), Clock(0.0)  # booted a year ahead
    with TrendStore(tmp_path / "t.sqlite", retention_days=30, min_interval_s=60, prune_interval_s=60,
                    clock=wall, monotonic=mono) as store:
        for k in range(5):
            wall.t, mono.t = T0 + 365 * DAY_S + 60.0 * k, 60.0 * k
            store.record(update(wall.t))
        ahead = store.stats().rows
        wall.t, mono.t = T0, mono.t + 60.0  # NTP steps back a year
        assert store.record(update(wall.t)) > 0  # not held back until the old "last row" time
        for k in range(1, 5):
            wall.t, mono.t = T0 + 60.0 * k, mono.t + 60.0
            store.record(update(wall.t))
        assert store.stats().rows == 2 * ahead
        times = [r.time_s for r in store.query(value="speed")]  # by time: the rows stamped ahead sort last
        assert times[:5] == [T0 + 60.0 * k for k in range(5)] and len(times) == 10


def test_the_row_bound_holds_at_every_commit_of_a_batch(tmp_path):
    wall, mono = Clock(T0), Clock(0.0)
    path = tmp_path / "t.sqlite"
    store = TrendStore(path, max_rows=1000, flush_interval_s=300, prune_interval_s=1e9, clock=wall, monotonic=mono)
    per_update = store.record(update(T0))
    for k in range(1, 200):  # 200 updates within one batch interval: far more rows than the bound
        mono.t, wall.t = float(k), T0 + k
        store.record(update(wall.t))
    store.close()
    assert 200 * per_update > 1000 and rows_on_disk(path) == 1000
    with sqlite3.connect(path) as db:  # the newest rows were kept
        assert db.execute("SELECT MAX(time_s) FROM samples").fetchone()[0] == T0 + 199
