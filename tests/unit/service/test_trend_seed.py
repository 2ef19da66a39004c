"""A restarted daemon's trend windows come back from the trend store (a real sqlite file), so its first
update already projects the values' times to their levels."""

from __future__ import annotations

from rotorwatch.alarms.monitor import MachineMonitor
from rotorwatch.alarms.records import SensorHealth
from rotorwatch.service.trend_seed import seed_projections
from rotorwatch.storage.trends import TrendStore
from unit.alarms.helpers import machine, result

OK = {"p1": SensorHealth(True), "p2": SensorHealth(True)}


def _run(mon: MachineMonitor, hours: range, store: TrendStore | None = None):
    last = None
    for i in hours:
        t = 1.7e9 + i * 3600.0
        last = mon.update(t, {"p1": result("p1", t, overall=1.0 + 0.05 * i), "p2": result("p2", t)}, OK)
        if store is not None:
            store.record(last)
    return last


def test_a_restart_projects_from_the_stored_trend(tmp_path):
    m = machine()
    with TrendStore.in_state_dir(tmp_path) as store:
        _run(MachineMonitor(m, tmp_path), range(20), store)
    fresh = MachineMonitor(m, tmp_path / "other")
    assert _run(fresh, range(20, 21)).points["p1"].values["overall"].projection.status == "too_few"

    restarted = MachineMonitor(m, tmp_path / "again")
    taken = seed_projections(restarted, tmp_path)
    assert taken >= 2 * 20  # every value of both points with a level, 20 updates each
    p = _run(restarted, range(20, 21)).points["p1"].values["overall"].projection
    assert p.status == "rising" and p.points == 21
    assert p.slope_per_day > 1.19  # 0.05 mm/s an hour, from the stored rows


def test_no_store_or_a_broken_one_seeds_nothing(tmp_path, caplog):
    mon = MachineMonitor(machine(), tmp_path)
    assert seed_projections(mon, tmp_path) == 0
    (tmp_path / "trends.sqlite").write_bytes(b"not a database at all" * 100)
    assert seed_projections(mon, tmp_path) == 0
    assert "not seeded" in caplog.text
