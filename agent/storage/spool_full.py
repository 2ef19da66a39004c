"""The publish spool's full policy (see :mod:`rotorwatch.storage.spool` for the order and the counts).

Runs inside the spool's write transaction, under its lock, when a record would pass ``max_bytes`` or
``max_records``: states superseded, then metrics thinned, then the oldest metrics, events, states,
until the spool is under the low water mark; records in flight are never dropped.
"""

from __future__ import annotations

import logging
import sqlite3
import time
from collections.abc import Iterable
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from .spool import Spool

log = logging.getLogger(__name__)

#: After the full policy runs, the spool is under this fraction of both bounds (hysteresis).
LOW_WATER = 0.95


def make_room(self: Spool, db: sqlite3.Connection, incoming_bytes: int) -> None:
    """Apply the full policy until the spool (with the incoming record) is under the low water mark."""
    target_bytes = min(int(self.max_bytes * LOW_WATER), self.max_bytes - incoming_bytes)
    target_rows = min(int(self.max_records * LOW_WATER), self.max_records - 1)

    def enough() -> bool:
        return self._bytes <= target_bytes and self._count <= target_rows

    def take(candidates: Iterable[tuple[int, int]], reason: str) -> int:
        victims = []
        freed_bytes = freed_rows = 0
        for seq, size in candidates:
            if self._bytes - freed_bytes <= target_bytes and self._count - freed_rows <= target_rows:
                break
            if seq in self._in_flight:
                continue
            victims.append((seq, size))
            freed_bytes += size
            freed_rows += 1
        self._delete(db, victims)
        self._count_drop(db, reason, len(victims))
        return len(victims)

    take(db.execute(
        "SELECT r.seq, r.size_bytes FROM records r WHERE r.kind = 'state' AND r.seq < "
        "(SELECT MAX(n.seq) FROM records n WHERE n.kind = 'state' AND n.topic = r.topic) ORDER BY r.seq"
    ).fetchall(), "state_superseded")
    for _ in range(32):  # each pass removes about a quarter of the metrics; bounded
        if enough():
            break
        metrics = [(s, b) for s, b in db.execute(
            "SELECT seq, size_bytes FROM records WHERE kind = 'metrics' ORDER BY seq") if s not in self._in_flight]
        if len(metrics) < 4:
            break
        if take(metrics[: len(metrics) // 2][1::2], "metrics_thinned") == 0:
            break
    if not enough():
        take(db.execute("SELECT seq, size_bytes FROM records WHERE kind = 'metrics' ORDER BY seq").fetchall(),
             "metrics_oldest")
    if not enough():
        n = take(db.execute("SELECT seq, size_bytes FROM records WHERE kind = 'event' ORDER BY seq").fetchall(),
                 "event_oldest")
        now = time.monotonic()
        if n and now - self._event_warned_s >= 60.0:  # loud, but once a minute, with the running total
            self._event_warned_s = now
            log.warning("spool full of events: dropping the oldest n=%d dropped_events_total=%d "
                        "(raise storage.spool bounds or restore the broker link)",
                        n, self._dropped["event_oldest"])
    if not enough():
        n = take(db.execute("SELECT seq, size_bytes FROM records WHERE kind = 'state' ORDER BY seq").fetchall(),
                 "state_oldest")
        if n:
            log.warning("spool full of states: dropped the oldest n=%d", n)
