"""The publish spool: sequence numbers, acknowledgement, requeue order and the full policy.

Durability is checked against sqlite itself: the file is read back through a second, independent
``sqlite3`` connection (and, for the power-loss setting, the PRAGMA sqlite reports), not through the
spool's own bookkeeping.
"""

from __future__ import annotations

import json
import logging
import sqlite3

import pytest

from rotorwatch.storage import StorageError
from rotorwatch.storage.spool import RECORD_OVERHEAD_BYTES, SEQ_BLOCK, Spool, encode_payload

#: for tests that append hundreds of records: durability is not what they check, fsyncs only slow them
FAST = {"durability": "process_crash"}


class FakeClock:
    def __init__(self, t0: float = 1_767_225_600.0) -> None:
        self.t = t0

    def __call__(self) -> float:
        self.t += 1.0
        return self.t


def _rows(path) -> list[tuple]:
    """The records table as sqlite itself sees it (separate connection)."""
    db = sqlite3.connect(path)
    try:
        return db.execute("SELECT seq, kind, topic, payload FROM records ORDER BY seq").fetchall()
    finally:
        db.close()


def test_seq_is_monotonic_and_survives_reopen(tmp_path):
    path = tmp_path / "spool.sqlite"
    with Spool(path, clock=FakeClock()) as spool:
        seqs = [spool.append("metrics", "site/m1/metrics", {"v": i}) for i in range(5)]
        assert seqs == [1, 2, 3, 4, 5]
        spool.ack_many(seqs)  # everything delivered and deleted
        assert spool.stats().depth == 0
    with Spool(path, clock=FakeClock()) as spool:
        # the table is empty, yet the counter continues: a seq is never reused
        assert spool.last_seq == 5
        assert spool.append("event", "site/m1/events", {"x": 1}) == 6
    with Spool(path) as spool:
        assert spool.append("state", "site/m1/state", {"s": "normal"}, retain=True) == 7


def test_json_payload_carries_seq_and_ts(tmp_path):
    clock = FakeClock(1000.0)
    with Spool(tmp_path / "s.sqlite", clock=clock) as spool:
        seq = spool.append("metrics", "a/b", {"overall_mm_s": 2.5, "bad": float("nan")})
        (rec,) = spool.next_batch(10)
    doc = json.loads(rec.payload)
    assert doc == {"seq": seq, "ts": 1001.0, "overall_mm_s": 2.5, "bad": None}  # NaN -> null (RFC 8259 has no NaN)
    assert rec.qos == 1 and rec.retain is False and rec.kind == "metrics"


def test_bytes_payload_is_stored_as_given(tmp_path):
    with Spool(tmp_path / "s.sqlite") as spool:
        spool.append("state", "a/b", b"\x00raw", retain=True)
        (rec,) = spool.next_batch(1)
    assert rec.payload == b"\x00raw" and rec.retain is True


@pytest.mark.parametrize("kind,topic,payload,msg", [
    ("trace", "a/b", {}, "kind"),
    ("event", "a/+/b", {}, "wildcards"),
    ("event", "", {}, "non-empty"),
    ("event", "a/b", {"seq": 3}, "reserved"),
    ("event", "a/b", [1, 2], "dict or bytes"),
])
def test_bad_appends_raise_and_consume_no_seq(tmp_path, kind, topic, payload, msg):
    with Spool(tmp_path / "s.sqlite") as spool:
        with pytest.raises((ValueError, TypeError), match=msg):
            spool.append(kind, topic, payload)
        assert spool.append("event", "a/b", {}) == 1


def test_ack_deletes_the_row(tmp_path):
    path = tmp_path / "s.sqlite"
    with Spool(path) as spool:
        a = spool.append("event", "t/e", {"n": 1})
        b = spool.append("event", "t/e", {"n": 2})
        assert spool.ack(a) is True
        assert spool.ack(a) is False  # a second PUBACK (duplicate) is harmless
        assert [r[0] for r in _rows(path)] == [b]
        assert spool.stats().depth == 1


def test_next_batch_skips_in_flight_and_requeue_restores_order(tmp_path):
    with Spool(tmp_path / "s.sqlite") as spool:
        seqs = [spool.append("metrics", "t/m", {"i": i}) for i in range(10)]
        first = spool.next_batch(4)
        for mid, rec in enumerate(first, start=100):
            spool.mark_in_flight(rec.seq, mid)
        assert [r.seq for r in spool.next_batch(3)] == seqs[4:7]
        spool.ack(first[1].seq)  # acknowledgements may come in any order
        assert spool.requeue_in_flight() == 3
        # after a disconnect everything unacknowledged goes again, oldest first
        assert [r.seq for r in spool.next_batch(100)] == [s for s in seqs if s != first[1].seq]


def test_lane_bounds(tmp_path):
    with Spool(tmp_path / "s.sqlite") as spool:
        for i in range(6):
            spool.append("metrics", "t/m", {"i": i})
        assert [r.seq for r in spool.next_batch(10, through_seq=3)] == [1, 2, 3]
        assert [r.seq for r in spool.next_batch(10, after_seq=3)] == [4, 5, 6]


def test_restart_makes_everything_pending_again(tmp_path):
    path = tmp_path / "s.sqlite"
    spool = Spool(path)
    for i in range(5):
        spool.append("event", "t/e", {"i": i})
    for rec in spool.next_batch(5):
        spool.mark_in_flight(rec.seq, rec.seq)
    spool.ack(2)
    spool.close()
    with Spool(path) as again:
        assert [r.seq for r in again.next_batch(10)] == [1, 3, 4, 5]
        assert again.stats().in_flight == 0


def test_one_process_per_spool(tmp_path):
    path = tmp_path / "s.sqlite"
    with Spool(path):
        with pytest.raises(StorageError, match="in use by another"):
            Spool(path)
    Spool(path).close()  # released on close


def test_a_damaged_file_is_set_aside_with_one_warning_and_the_spool_starts_empty(tmp_path, caplog):
    path = tmp_path / "s.sqlite"
    path.write_bytes(b"this is not sqlite" * 100)
    with caplog.at_level(logging.WARNING), Spool(path) as spool:
        assert spool.stats().depth == 0 and spool.append("event", "t/e", {"i": 1}) == 1
        aside = spool.set_aside_as
    warnings = [r.getMessage() for r in caplog.records if r.levelno >= logging.WARNING]
    assert len(warnings) == 1 and str(path) in warnings[0] and aside is not None and aside.name in warnings[0]
    assert aside.read_bytes() == b"this is not sqlite" * 100  # kept for a person to look at


def test_a_spool_that_cannot_be_opened_is_a_one_line_error(tmp_path):
    path = tmp_path / "s.sqlite"
    with Spool(path) as spool:
        spool.append("event", "t/e", {"i": 1})
    with sqlite3.connect(path) as db:
        db.execute("PRAGMA user_version=99")
    with pytest.raises(StorageError) as info:
        Spool(path)
    assert "\n" not in str(info.value) and str(path) in str(info.value)


def _fill(spool: Spool, n_rounds: int) -> dict[str, list[int]]:
    """Per round: one metrics record, one state on each of two topics; an event every 10th round."""
    seqs: dict[str, list[int]] = {"metrics": [], "state": [], "event": []}
    for i in range(n_rounds):
        seqs["metrics"].append(spool.append("metrics", "s/m1/metrics", {"i": i, "pad": "x" * 40}))
        for topic in ("s/m1/state", "s/m2/state"):
            seqs["state"].append(spool.append("state", topic, {"i": i}, retain=True))
        if i % 10 == 0:
            seqs["event"].append(spool.append("event", "s/m1/events", {"i": i}))
    return seqs


def test_full_policy_drops_superseded_states_then_thins_metrics_and_keeps_events(tmp_path):
    path = tmp_path / "s.sqlite"
    with Spool(path, max_bytes=1 << 30, max_records=200, **FAST) as spool:
        seqs = _fill(spool, 300)  # 300 metrics + 600 states + 30 events = 930 appends into 200 rows
        st = spool.stats()
        kinds = spool.counts_by_kind()
        stored = {r[0] for r in _rows(path)}
    assert st.depth <= 200
    assert kinds["event"] == 30 and set(seqs["event"]) <= stored  # every event kept
    # the newest state of each topic is kept
    assert seqs["state"][-1] in stored and seqs["state"][-2] in stored
    assert st.dropped["event_oldest"] == 0 and st.dropped["metrics_oldest"] == 0
    assert st.dropped["state_superseded"] > 0 and st.dropped["metrics_thinned"] > 0
    # what is gone is exactly what the counters say
    total_appended = sum(len(v) for v in seqs.values())
    assert total_appended - st.depth == st.dropped_total
    # thinning keeps the newest metrics whole and makes the old ones sparse
    kept_metrics = [s for s in seqs["metrics"] if s in stored]
    assert seqs["metrics"][-1] in stored
    assert kept_metrics == sorted(kept_metrics)
    newest_half = seqs["metrics"][-20:]
    assert all(s in stored for s in newest_half)


def test_full_of_events_drops_oldest_events_and_counts_them(tmp_path):
    with Spool(tmp_path / "s.sqlite", max_bytes=1 << 30, max_records=100, **FAST) as spool:
        spool.append("state", "s/m1/state", {"s": "normal"}, retain=True)
        ev = [spool.append("event", "s/m1/events", {"i": i}) for i in range(250)]
        st = spool.stats()
        kept = [r.seq for r in spool.next_batch(1000)]
    assert st.dropped["event_oldest"] == 250 + 1 - st.depth
    assert kept[0] == 1  # the latest (only) state is kept
    assert kept[1:] == ev[-(st.depth - 1):]  # the newest events, oldest gone first


def test_byte_bound_and_oversize(tmp_path):
    payload = {"pad": "y" * 1000}
    size = len(encode_payload(payload, 1, 1.0)) + len("t/m") + RECORD_OVERHEAD_BYTES
    with Spool(tmp_path / "s.sqlite", max_bytes=20 * size, max_records=10_000, **FAST) as spool:
        for _ in range(100):
            spool.append("metrics", "t/m", payload)
        assert spool.stats().stored_bytes <= 20 * size
        big = spool.append("event", "t/e", {"pad": "z" * (30 * size)})
        st = spool.stats()
        assert st.dropped["oversize"] == 1 and big == 101 and st.last_seq == 101
        assert all(r.seq != big for r in spool.next_batch(1000))


def test_in_flight_records_are_never_dropped(tmp_path):
    with Spool(tmp_path / "s.sqlite", max_bytes=1 << 30, max_records=50, **FAST) as spool:
        first = [spool.append("metrics", "t/m", {"i": i}) for i in range(10)]
        for s in first:
            spool.mark_in_flight(s, s)
        for i in range(200):
            spool.append("metrics", "t/m", {"i": i})
        stored = {r.seq for r in spool.next_batch(1000)} | set(spool.in_flight())
        with sqlite3.connect(spool.path) as db:
            on_disk = {r[0] for r in db.execute("SELECT seq FROM records")}
    assert set(first) <= on_disk and stored == on_disk


def test_drop_counters_survive_reopen(tmp_path):
    path = tmp_path / "s.sqlite"
    with Spool(path, max_bytes=1 << 30, max_records=100, **FAST) as spool:
        for i in range(300):
            spool.append("event", "t/e", {"i": i})
        before = spool.stats().dropped
    with Spool(path, max_records=100) as spool:
        assert spool.stats().dropped == before and before["event_oldest"] > 0


def test_reject_counts_and_retained_high_water(tmp_path):
    path = tmp_path / "s.sqlite"
    with Spool(path) as spool:
        a = spool.append("state", "s/st", {"s": 1}, retain=True)
        b = spool.append("state", "s/st", {"s": 2}, retain=True)
        c = spool.append("event", "s/forbidden", {})
        assert spool.reject(c, "broker_rejected")
        spool.ack(b)
        spool.ack(a)  # an older retained record acknowledged later does not lower the mark
        assert spool.retained_seq("s/st") == b
        assert spool.stats().dropped["broker_rejected"] == 1
    with Spool(path) as spool:
        assert spool.retained_seq("s/st") == b


@pytest.mark.parametrize("durability,expected", [("power_loss", 2), ("process_crash", 1)])
def test_durability_maps_to_sqlite_synchronous(tmp_path, durability, expected):
    # PRAGMA synchronous values: 1 = NORMAL, 2 = FULL (sqlite.org/pragma.html#pragma_synchronous)
    with Spool(tmp_path / "s.sqlite", durability=durability) as spool:
        assert spool._db.execute("PRAGMA synchronous").fetchone()[0] == expected
        assert spool._db.execute("PRAGMA journal_mode").fetchone()[0] == "wal"


def _unclean_stop(spool: Spool) -> None:
    """What a kill -9 leaves: the connection and the lock gone, nothing written at close."""
    spool._db.close()
    spool._release_file_lock()


def test_seqs_of_records_kept_in_memory_are_never_reused(tmp_path):
    path = tmp_path / "s.sqlite"
    spool = Spool(path)
    recs = [spool.new_record("metrics", "t/m", {"i": i}) for i in range(3)]
    assert [r.seq for r in recs] == [1, 2, 3] and json.loads(recs[0].payload)["seq"] == 1
    assert spool.stats().depth == 0  # given a seq, not stored
    _unclean_stop(spool)
    with Spool(path) as spool:  # after a kill the rest of the reserved block stays unused: a gap
        assert spool.new_record("event", "t/e", {}).seq == SEQ_BLOCK + 1
        assert spool.append("event", "t/e", {}) == SEQ_BLOCK + 2
    with Spool(path) as spool:  # after a clean close: no gap
        assert spool.new_record("event", "t/e", {}).seq == SEQ_BLOCK + 3


def test_store_writes_a_batch_keeps_in_flight_marks_and_applies_the_bounds(tmp_path):
    with Spool(tmp_path / "s.sqlite", max_bytes=4096, max_records=100) as spool:
        recs = [spool.new_record("metrics", "t/m", {"i": i, "pad": "x" * 100}) for i in range(60)]
        big = spool.new_record("event", "t/e", {"pad": "y" * 5000})
        spool.store([*recs, big], in_flight={recs[0].seq: 7})
        st = spool.stats()
        assert st.in_flight == 1 and spool.in_flight() == {1: 7}
        assert st.stored_bytes <= 4096 and st.dropped["oversize"] == 1 and st.dropped["metrics_thinned"] > 0
        kept = [r.seq for r in spool.next_batch(100)]
        assert 1 not in kept and kept == sorted(kept)  # in flight: not offered again
        assert spool.ack(1)  # the in-flight one was kept by the full policy and is deleted on its PUBACK


def test_memory_deliveries_and_drops_are_written_with_the_next_transaction(tmp_path):
    path = tmp_path / "s.sqlite"
    with Spool(path) as spool:
        rec = spool.new_record("state", "t/s", {"v": 1}, retain=True)
        spool.note_delivered(rec)
        spool.note_dropped("broker_rejected")
        assert spool.retained_seq("t/s") == rec.seq
    with Spool(path) as spool:
        assert spool.retained_seq("t/s") == rec.seq and spool.stats().dropped["broker_rejected"] == 1
