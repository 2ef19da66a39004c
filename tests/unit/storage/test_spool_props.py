"""Property tests of the spool: bookkeeping adds up, seq never goes back, events outlive metrics.

Random sequences of appends (the three kinds, two state topics), acknowledgements, in-flight marks,
requeues and reopenings against a small bound.
"""

from __future__ import annotations

import sqlite3
import tempfile
from pathlib import Path

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from rotorwatch.storage.spool import Spool

#: kind mixes: mostly metrics (thinning), and mostly events (so the spool fills with events)
MIXES = (("metrics", "metrics", "metrics", "state", "event"), ("event", "event", "event", "state", "metrics"))


@st.composite
def append_op(draw, mix):
    return ("append", draw(st.sampled_from(mix)), draw(st.integers(0, 1)))


OPS = st.sampled_from(MIXES).flatmap(lambda mix: st.lists(
    st.one_of(
        *(append_op(mix) for _ in range(8)),
        st.tuples(st.just("ack"), st.integers(0, 5), st.just(0)),
        st.tuples(st.just("fly"), st.integers(1, 6), st.just(0)),
        st.tuples(st.just("requeue"), st.just(0), st.just(0)),
        st.tuples(st.just("reopen"), st.just(0), st.just(0)),
    ),
    min_size=20, max_size=80,
))


@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(ops=OPS, max_records=st.integers(4, 16))
def test_spool_bookkeeping(ops, max_records):
    with tempfile.TemporaryDirectory() as d:
        path = Path(d) / "s.sqlite"

        def open_spool() -> Spool:
            return Spool(path, max_bytes=1 << 30, max_records=max_records, durability="process_crash")

        spool = open_spool()
        appended = acked = 0
        seqs: list[int] = []
        try:
            for op, a, b in ops:
                if op == "append":
                    events_dropped = spool.stats().dropped["event_oldest"]
                    seq = spool.append(a, f"p/m{b}/{a}", {"n": len(seqs)}, retain=(a == "state"))
                    assert not seqs or seq > seqs[-1]  # strictly increasing, across reopenings too
                    seqs.append(seq)
                    appended += 1
                    st_ = spool.stats()
                    # the bound holds except for records in flight, which are never dropped
                    assert st_.depth <= max(max_records, st_.in_flight + 1)
                    if st_.dropped["event_oldest"] > events_dropped:
                        # events go only when no metrics are left to drop (in-flight ones are never
                        # dropped; the record just appended may itself be metrics)
                        droppable = [r for r in spool.next_batch(10_000) if r.kind == "metrics" and r.seq != seq]
                        assert droppable == []
                elif op == "ack":
                    batch = spool.next_batch(a + 1)
                    acked += spool.ack_many(r.seq for r in batch)
                elif op == "fly":
                    for r in spool.next_batch(a):
                        spool.mark_in_flight(r.seq, r.seq)
                elif op == "requeue":
                    spool.requeue_in_flight()
                else:
                    spool.close()
                    spool = open_spool()
            st_ = spool.stats()
            assert appended == st_.depth + acked + st_.dropped_total  # every record is accounted for
            assert st_.last_seq == (seqs[-1] if seqs else 0)
            pending = [r.seq for r in spool.next_batch(10_000)] + sorted(spool.in_flight())
        finally:
            spool.close()
        with sqlite3.connect(path) as db:  # sqlite's view agrees with the spool's counters
            on_disk = [r[0] for r in db.execute("SELECT seq FROM records ORDER BY seq")]
        assert sorted(pending) == on_disk and len(on_disk) == st_.depth

