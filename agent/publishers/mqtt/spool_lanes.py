"""The spool's two lanes into the outbox: what piled up during an outage and what is live.

At each (re)connect the lanes note ``B = spool.last_seq``:

- the **backlog lane** is every stored record with ``seq <= B`` (what piled up during the outage and
  what was in flight when the link dropped). It is published in seq order at most
  ``backlog_rate_per_s`` per second, using at most ``in_flight_window - live_reserve`` window slots;
- the **live lane** is every record appended after the connect (``seq > B``), published in seq order as
  soon as it is appended, without a rate bound, so live data is not held behind a long backlog.

Within a lane records are published in seq order over one connection, so the broker receives them in
that order; across lanes a live record may arrive before older backlog records. Consumers that need a
total order sort by ``seq``. When the link drops, the records in flight stay in flight: paho sends
them again after the reconnect, first, under their ids (a duplicate if the broker had them already:
same ``seq``), and the lanes go on with what is pending.

Retained states: a retained record older (lower seq) than one already published or acknowledged on
the same topic is sent with ``retain=False``, so a backlog never replaces the broker's retained
state with a stale one.

Used by :class:`~rotorwatch.publishers.mqtt.outbox.Outbox` from its drain thread only: the lanes
choose what to send next; the outbox hands it to paho and owns the message ids.
"""

from __future__ import annotations

import logging
import time
from collections import deque
from collections.abc import Callable
from dataclasses import dataclass

from ...storage import StorageError
from ...storage.spool import Record, Spool

log = logging.getLogger(__name__)

#: hand(record, retain, lane) -> False when the round should stop (link change, paho full)
HandRecord = Callable[[Record, bool, str], bool]


@dataclass(frozen=True)
class LaneSplit:
    """Where the backlog lane ended at one (re)connect: records with seq <= backlog_through_seq."""

    connected_at_s: float  # monotonic clock of the outbox
    backlog_through_seq: int
    backlog_depth: int  # stored records at that moment (-1: could not be read)


class SpoolLanes:
    """The backlog and live lanes over one :class:`Spool` (see the module docstring)."""

    def __init__(self, spool: Spool, *, in_flight_window: int, backlog_rate_per_s: float, live_reserve: int,
                 clock: Callable[[], float] = time.monotonic) -> None:
        if in_flight_window < 1:
            raise ValueError(f"in_flight_window = {in_flight_window}: must be at least 1")
        if not backlog_rate_per_s > 0:
            raise ValueError(f"backlog_rate_per_s = {backlog_rate_per_s}: must be above 0")
        if not 0 <= live_reserve < in_flight_window:
            raise ValueError(f"live_reserve = {live_reserve}: must be in 0..{in_flight_window - 1}")
        self.spool = spool
        self.window = int(in_flight_window)
        self.backlog_window = self.window - int(live_reserve)
        self.backlog_rate_per_s = float(backlog_rate_per_s)
        self._burst = max(1.0, min(float(self.backlog_window), self.backlog_rate_per_s * 0.25))
        self._clock = clock
        self.backlog_through: int | None = None
        self.backlog_active = False
        self._tokens = 0.0
        self._tokens_at = clock()
        self._retained_sent: dict[str, int] = {}
        self.retain_downgraded = 0
        self.lane_splits: deque[LaneSplit] = deque(maxlen=100)

    def link_changed(self, connected: bool) -> None:
        """On a connect the lanes split anew (what was in flight is pending again: the backlog lane sends it)."""
        self._retained_sent.clear()
        if connected:
            self.split("link up")

    def split(self, why: str) -> None:
        """Split at ``spool.last_seq``: everything stored up to it is the backlog (at a connect, and when
        records kept in memory were written to the spool while connected)."""
        last_seq = self.spool.last_seq
        try:
            depth = self.spool.stats().depth
        except StorageError:
            depth = -1  # unknown: treat as a backlog, the lane finds out
        self.backlog_through = last_seq
        self.backlog_active = depth != 0
        self._tokens, self._tokens_at = self._burst, self._clock()
        self.lane_splits.append(LaneSplit(self._clock(), last_seq, depth))
        log.info("outbox: %s, backlog of %d records through seq=%d at <= %.0f/s, live from seq=%d",
                 why, depth, last_seq, self.backlog_rate_per_s, last_seq + 1)

    def send(self, in_flight: dict[str, int], hand: HandRecord) -> None:
        """Hand what the window and the backlog rate allow; ``in_flight``: records in flight per lane."""
        free = self.window - sum(in_flight.values())
        if free > 0:  # live lane first: everything appended since the connect
            for rec in self.spool.next_batch(free, after_seq=self.backlog_through):
                if not hand(rec, self._retain(rec), "live"):
                    return
                free -= 1
        if not self.backlog_active or free <= 0:
            return
        now = self._clock()
        self._tokens = min(self._burst, self._tokens + (now - self._tokens_at) * self.backlog_rate_per_s)
        self._tokens_at = now
        backlog_in_flight = in_flight.get("backlog", 0)
        n = min(free, self.backlog_window - backlog_in_flight, int(self._tokens))
        if n <= 0:
            return
        batch = self.spool.next_batch(n, through_seq=self.backlog_through)
        if not batch and backlog_in_flight == 0:
            self.backlog_active = False
            log.info("outbox: backlog drained through seq=%s", self.backlog_through)
            return
        for rec in batch:
            if not hand(rec, self._retain(rec), "backlog"):
                return
            self._tokens -= 1.0

    def note_retained_sent(self, topic: str, seq: int) -> None:
        """A retained record sent from memory: older backlog records on its topic go unretained."""
        self._retained_sent[topic] = max(seq, self._retained_sent.get(topic, 0))

    def _retain(self, rec: Record) -> bool:
        """A retained record older than one already sent or acknowledged on its topic goes unretained."""
        if not rec.retain:
            return False
        newest = max(self.spool.retained_seq(rec.topic) or 0, self._retained_sent.get(rec.topic, 0))
        if rec.seq < newest:
            self.retain_downgraded += 1
            return False
        self._retained_sent[rec.topic] = rec.seq
        return True

    def wait_s(self, connected: bool) -> float:
        """How long the drain thread may sleep before the next backlog token."""
        if connected and self.backlog_active and self._tokens < 1.0:
            return max(0.001, (1.0 - self._tokens) / self.backlog_rate_per_s)
        return 0.5  # woken by appends, acks and link changes; the bound is a safety net
