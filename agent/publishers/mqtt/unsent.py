"""Records that wait in memory while the broker is connected and acknowledging (``storage.spool.write =
"unsent"``, the default).

A state, metrics record or event gets its ``seq`` and ``ts`` from the spool
(:meth:`~rotorwatch.storage.spool.Spool.new_record`, seqs reserved on disk in blocks) and then waits
here, not on disk. The outbox sends it as the live lane and forgets it on its PUBACK: while the
broker acknowledges within ``memory_hold_s``, the spool file is not written at all.

What is still unacknowledged goes to the spool in one transaction (:meth:`UnsentRecords.take_all`,
written by the outbox):

- when the link drops (the records in flight are marked so in the spool; after the reconnect the
  backlog lane sends them again, first and in seq order, and their PUBACKs delete them);
- when the oldest has waited ``memory_hold_s`` (a broker that stalls, or while the link is down: one
  batch per ``memory_hold_s``);
- at a clean stop.

So at defaults an unclean power cut or ``kill -9`` loses what was not yet acknowledged and not yet in
the spool: at most ``memory_hold_s`` of records (plus the records in flight, at most the in-flight
window). ``storage.spool.write = "every_record"`` writes every record before it is sent instead.

Not thread-safe on its own: the outbox guards it with its lock.
"""

from __future__ import annotations

import logging
import queue
import threading
import time
from collections import deque
from collections.abc import Callable, Mapping
from typing import Any

import paho.mqtt.client as mqtt

from ...errors import RotorwatchError
from ...storage import StorageError
from ...storage.spool import Record, Spool
from .payloads import encode
from .spool_lanes import SpoolLanes

log = logging.getLogger(__name__)


class UnsentRecords:
    """Records queued for the link and records in flight (by message id), with the time each came."""

    def __init__(self, hold_s: float) -> None:
        if not hold_s > 0:
            raise ValueError(f"memory_hold_s = {hold_s}: must be above 0")
        self.hold_s = float(hold_s)
        self.queue: deque[tuple[Record, float]] = deque()  # (record, monotonic time it was submitted)
        self.flight: dict[int, tuple[Record, float]] = {}  # mid -> (record, time submitted)

    def __len__(self) -> int:
        return len(self.queue) + len(self.flight)

    def add(self, rec: Record, now_s: float) -> None:
        self.queue.append((rec, now_s))

    def held_too_long(self, now_s: float) -> bool:
        """Whether the oldest record has waited ``hold_s`` or longer unacknowledged."""
        born = [self.queue[0][1]] if self.queue else []
        born += [t for _, t in self.flight.values()]
        return bool(born) and now_s - min(born) >= self.hold_s

    def take_all(self) -> tuple[list[Record], dict[int, int]]:
        """Everything unacknowledged, in seq order, and seq -> mid of those in flight; empties the lists."""
        records = [r for r, _ in self.queue] + [r for r, _ in self.flight.values()]
        marks = {r.seq: mid for mid, (r, _) in self.flight.items()}
        self.queue.clear()
        self.flight.clear()
        return sorted(records, key=lambda r: r.seq), marks

    def put_back(self, records: list[Record], marks: dict[int, int], now_s: float) -> None:
        """After a failed spool write: the records wait in memory again (the next try is a hold later)."""
        by_mid = {mid: seq for seq, mid in marks.items()}
        seqs = set(by_mid.values())
        for mid, seq in by_mid.items():
            rec = next(r for r in records if r.seq == seq)
            self.flight[mid] = (rec, now_s)
        self.queue.extendleft((r, now_s) for r in reversed([r for r in records if r.seq not in seqs]))


class UnsentLane:
    """The outbox's part for records kept in memory: their live lane, their acknowledgements and the
    spill to the spool. Mixed into :class:`~rotorwatch.publishers.mqtt.outbox.Outbox`, whose lock,
    counters and maps it uses (declared here); runs on the outbox's drain thread."""

    unsent: UnsentRecords | None
    spool: Spool | None
    lanes: SpoolLanes | None
    client: mqtt.Client | None
    window: int
    _lock: threading.Lock
    _n: dict[str, int]
    _record_flight: dict[int, tuple[int, str]]
    _connected: bool
    _gen: int
    _seen_gen: int
    _last_error_log: float
    _clock: Callable[[], float]

    qos: int
    _events: queue.SimpleQueue

    def _lane_counts_locked(self) -> dict[str, int]:
        raise NotImplementedError

    def publish(self, topic: str, payload: bytes, retain: bool = False, *, urgent: bool = False) -> bool:
        raise NotImplementedError

    def _published(self) -> None:
        raise NotImplementedError

    def _failed(self) -> None:
        raise NotImplementedError

    def record_goes_to_spool(self) -> bool:
        """Whether the next state, metrics record or event is written to the spool before it is sent
        (``every_record``); else it waits in memory with a seq from the spool (``unsent``: written to the
        spool only if unacknowledged when the link drops, after ``memory_hold_s`` or at a stop), or,
        without a spool, in the memory lane without a seq."""
        return self.spool is not None and self.unsent is None

    def publish_record(self, kind: str, topic: str, body: Mapping[str, Any], retain: bool = False) -> bool:
        """A state, metrics record or event: see :meth:`record_goes_to_spool`."""
        if self.spool is not None:
            try:
                if self.unsent is not None:
                    with self._lock:  # a seq and a place in the queue together (a spill splits at last_seq)
                        self.unsent.add(self.spool.new_record(kind, topic, body, retain=retain, qos=self.qos),
                                        self._clock())
                    self._events.put(("wake",))
                else:
                    self.spool.append(kind, topic, body, retain=retain, qos=self.qos)
                self._published()
                return True
            except (RotorwatchError, OSError, ValueError) as e:
                self._failed()
                now = time.monotonic()
                if now - self._last_error_log > 300.0:
                    self._last_error_log = now
                    log.error(f"publish spool write failed, sending directly: {e}")
        return self.publish(topic, encode(dict(body)), retain=retain)

    def _client(self) -> mqtt.Client:
        assert self.client is not None
        return self.client

    def _unsent_done(self, rec: Record, refused: bool, reason_code: Any) -> None:
        assert self.spool is not None
        if refused:
            self._n["rejected"] += 1
            self.spool.note_dropped("broker_rejected")
            log.warning("broker refused a record seq=%d reason=%s (counted as broker_rejected)", rec.seq, reason_code)
        else:
            self._n["acked"] += 1
            self.spool.note_delivered(rec)

    def _spill(self, why: str, resplit: bool = False) -> None:
        """Write every unacknowledged record kept in memory to the spool in one transaction (those in
        flight keep their ids: their PUBACKs delete them); ``resplit`` (connected): the lanes split after it."""
        assert self.unsent is not None and self.spool is not None
        with self._lock:
            records, marks = self.unsent.take_all()
            if not records:
                return
            try:
                self.spool.store(records, in_flight=marks)
            except StorageError as e:
                self.unsent.put_back(records, marks, self._clock())
                now = time.monotonic()
                if now - self._last_error_log > 300.0:
                    self._last_error_log = now
                    log.error("outbox: %s (the records wait in memory)", e)
                return
            for seq, mid in marks.items():
                self._record_flight[mid] = (seq, "backlog")
            self._n["spilled"] += len(records)
            self._n["spills"] += 1
            if resplit and self.lanes is not None:  # connected: what was written is now the backlog
                self.lanes.split(why)

    def _send_unsent(self) -> None:
        """The live lane of records kept in memory, in seq order, within the in-flight window."""
        assert self.unsent is not None
        while True:
            with self._lock:
                if not self.unsent.queue or sum(self._lane_counts_locked().values()) >= self.window:
                    return
                rec, born = self.unsent.queue.popleft()
            if not self._hand_unsent(rec, born):
                return

    def _hand_unsent(self, rec: Record, born: float) -> bool:
        assert self.unsent is not None and self.spool is not None
        if self._gen != self._seen_gen:
            with self._lock:
                self.unsent.queue.appendleft((rec, born))
            return False
        try:
            info = self._client().publish(rec.topic, rec.payload, qos=rec.qos, retain=rec.retain)
        except (ValueError, TypeError) as e:
            self.spool.note_dropped("unsendable")
            log.error("record cannot be published seq=%d topic=%r: %s (counted as unsendable)", rec.seq, rec.topic, e)
            return True
        self._n["published"] += 1
        if info.rc not in (mqtt.MQTT_ERR_SUCCESS, mqtt.MQTT_ERR_NO_CONN) or (rec.qos == 0 and info.rc != mqtt.MQTT_ERR_SUCCESS):
            with self._lock:  # not taken: later
                self.unsent.queue.appendleft((rec, born))
            return False
        if rec.retain and self.lanes is not None:
            self.lanes.note_retained_sent(rec.topic, rec.seq)
        if rec.qos == 0:
            self._unsent_done(rec, False, None)
        else:
            with self._lock:
                self.unsent.flight[info.mid] = (rec, born)
        return info.rc == mqtt.MQTT_ERR_SUCCESS
