"""Wall-clock steps of hours to years (a box without a real-time clock, then NTP): what each store does.

Every clock here is injected: the wall clock (update times, ``time.time``) and the monotonic one move
independently, as they do when the kernel steps the wall clock. The trend store's part is in
test_trends_durability.py, the on-request limit's in test_snapshot_quota.py, the baselines' in
tests/unit/alarms/test_baseline_clock_steps.py.
"""

from __future__ import annotations

from datetime import UTC, datetime

import pytest

from rotorwatch.settings.storage import SnapshotSettings
from rotorwatch.storage.snapshot_policy import DailySchedule, SnapshotPolicy
from rotorwatch.storage.snapshots import SnapshotStore

from .samples import T0, transition, update
from .test_snapshots import save_one

pytestmark = pytest.mark.filterwarnings("ignore::scipy.io.wavfile.WavFileWarning")

HOUR_S = 3600.0
YEAR_S = 365 * 86400.0


def test_daily_snapshot_after_a_step_back():
    sched = DailySchedule("03:00")
    slot = datetime(2026, 3, 10, 3, tzinfo=UTC).timestamp()
    last = slot + 2 * YEAR_S + 60  # taken while the clock was two years ahead
    assert sched.due(slot + 60, last)  # the day's snapshot is taken, not held for two years
    assert not sched.due(slot + 120, slot + 60)


def test_a_step_forward_past_the_grace_skips_one_day_only():
    sched = DailySchedule("03:00")
    slot = datetime(2026, 3, 10, 3, tzinfo=UTC).timestamp()
    jumped = slot + YEAR_S + 12 * HOUR_S  # 15:00 a year later: past that day's grace
    assert not sched.due(jumped, slot + 60)
    assert sched.due(slot + YEAR_S + 86400 + 60, slot + 60)  # the next morning's is taken


def test_transition_repeats_are_judged_on_distance_not_direction(tmp_path):
    policy = SnapshotPolicy(SnapshotSettings(min_interval_s=600, daily_at_utc=None, on_transition_to=("alarm",)),
                            SnapshotStore(tmp_path / "snapshots"))
    ahead = T0 + YEAR_S
    assert policy.decide(update(ahead, events=[transition(ahead)]))[0] == "transition"
    # the clock steps back a year: the next alarm entry is evidence, not a "repeat" for a year
    assert policy.decide(update(T0, events=[transition(T0)]))[0] == "transition"
    assert policy.decide(update(T0 + 60, events=[transition(T0 + 60)])) is None  # a real repeat still is one


def test_quota_evicts_in_saving_order_after_a_step_back(tmp_path):
    probe = SnapshotStore(tmp_path / "probe")
    size = save_one(probe).size_bytes
    store = SnapshotStore(tmp_path / "snapshots", quota_bytes=int(4.5 * size))  # room for four
    ahead = [save_one(store, t=T0 + YEAR_S + 60 * k).id for k in range(2)]  # clock a year ahead
    after = [save_one(store, t=T0 + 60 * k).id for k in range(3)]  # stepped back to the right time
    kept = {i.id for i in store.list()}
    assert kept == {ahead[1], *after}  # the first saved went first, though its time is the latest
    assert [i.seq for i in store.list()] == [3, 4, 5, 2]  # listed by time, numbered by saving order


def test_snapshots_record_whether_the_clock_was_synchronised(tmp_path):
    store = SnapshotStore(tmp_path / "s")
    doc = store.load(save_one(store).id)
    assert doc["clock_synchronized"] in (True, False, None) and "clock_synchronized" in doc
    assert doc["seq"] == 1


def test_published_records_say_when_the_clock_stepped_or_is_unsynchronised(tmp_path, caplog):
    """Wall and monotonic clocks injected: a step of a year forward, then a day back; the spool's
    records carry "clock": "stepped" for STEP_FLAG_S after each, "unsynchronized" while the kernel says
    so, nothing when synchronised; seq keeps their order whatever ts says."""
    import json

    from rotorwatch.storage.spool import Spool
    from rotorwatch.storage.wallclock import STEP_FLAG_S, ClockWatch

    mono = [100.0]
    wall = [T0]
    synced = [True]
    watch = ClockWatch(monotonic=lambda: mono[0], sync=lambda m: synced[0])
    seen = []
    with Spool(tmp_path / "s.sqlite", clock=lambda: wall[0], clock_note=watch) as spool:
        def tick(dt_s: float, step_s: float = 0.0) -> None:
            mono[0] += dt_s
            wall[0] += dt_s + step_s
            rec = spool.new_record("metrics", "t/m", {"v": 1})
            seen.append((rec.seq, json.loads(rec.payload).get("clock")))

        tick(1.0)
        tick(1.0, step_s=YEAR_S)  # NTP's first sync on a box that booted a year behind
        tick(STEP_FLAG_S - 2.0)
        tick(3.0)  # flag over
        tick(1.0, step_s=-86400.0)
        synced[0] = False
        tick(STEP_FLAG_S + 1.0)
    assert seen == [(1, None), (2, "stepped"), (3, "stepped"), (4, None), (5, "stepped"), (6, "unsynchronized")]
    assert watch.steps == 2
    assert sum("wall clock stepped" in r.getMessage() for r in caplog.records) == 2
