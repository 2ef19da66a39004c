"""The MQTT outbox: the one owner of a paho client's publishing and of its ``on_publish``.

Every message the agent sends over MQTT goes through here: states, metrics records, events,
availability, info, discovery configs and command results. Each waits in one of two places:

- the durable **spool** (:class:`~rotorwatch.storage.spool.Spool`, when one is given): states, metrics
  and events (:meth:`Outbox.publish_record`). A record gets ``seq`` and ``ts``, survives outages,
  restarts and ``kill -9``, and leaves the spool only on the broker's PUBACK; it drains through the
  backlog and live lanes of :mod:`~rotorwatch.publishers.mqtt.spool_lanes`;
- **memory**: everything else (:meth:`Outbox.publish`), and records too when there is no spool
  (``[mqtt] delivery = "memory"``) or a spool write fails. At most ``max_queued_messages`` wait or are
  in flight (0: no bound); a message past the bound is refused and counted. The newest payload of
  every retained topic is kept: a retained message refused for room is queued again once there is
  room, and all of them are sent again after every reconnect (a broker restarted without persistence
  gets the current states back).

Message ids have one owner. Only the drain thread calls ``client.publish()``, and only while
connected; it notes the id paho gives each message before it looks at any acknowledgement (paho's
``on_publish`` runs on the network thread under paho's message lock and only queues an event), so an
early PUBACK cannot be missed. What is in flight when the link drops stays in flight until the
reconnect; then :meth:`on_connect` drops paho's copies (paho would send them again only after that
callback, when the drain thread may already be handing newer records: order lost) and the drain
thread hands them again first, in seq order. A new client holds nothing, so at :meth:`start` the
spool's records marked in flight become pending too. After a reconnect the newest payload of every
retained topic goes again (a broker restarted without persistence gets the current states back).

Where a record waits is decided in one place, :meth:`Outbox.record_goes_to_spool` (in
:mod:`~rotorwatch.publishers.mqtt.unsent`, with the records kept in memory).

Wiring: a bare client can use :meth:`install`; :class:`~rotorwatch.publishers.mqtt.link.MqttLink`
sets ``on_publish`` to :meth:`on_publish` and calls :meth:`on_connect` / :meth:`on_disconnect` from
its own connection callbacks (first thing in ``on_connect``).
"""

from __future__ import annotations

import logging
import queue
import threading
import time
from collections import deque
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import paho.mqtt.client as mqtt

from ...selfstats import SelfStats
from ...storage import StorageError
from ...storage.spool import Record, Spool
from .outbox_stats import OutboxStats
from .spool_lanes import LaneSplit, SpoolLanes
from .unsent import UnsentLane, UnsentRecords

log = logging.getLogger(__name__)

__all__ = ["LaneSplit", "Outbox", "OutboxStats"]


@dataclass
class _Message:
    """A message waiting in memory (``n``: its place in the order of submission)."""

    n: int
    topic: str
    payload: bytes
    qos: int
    retain: bool


class Outbox(UnsentLane):
    """Publish through ``client`` (a paho-mqtt 2.x ``Client`` with VERSION2 callbacks); see the module
    docstring. ``in_flight_window``, ``backlog_rate_per_s`` and ``live_reserve`` bound the spool's lanes;
    ``stats`` counts ``mqtt_messages_published`` and ``mqtt_publish_failures``; ``clock``: monotonic
    seconds (for tests); ``spool_write`` and ``memory_hold_s``: see :meth:`record_goes_to_spool`."""

    def __init__(self, client: mqtt.Client | None, *, spool: Spool | None = None, qos: int = 1,
                 in_flight_window: int = 20, backlog_rate_per_s: float = 200.0, live_reserve: int = 4,
                 max_queued_messages: int = 0, stats: SelfStats | None = None,
                 clock: Callable[[], float] = time.monotonic, spool_write: str = "every_record",
                 memory_hold_s: float = 2.0) -> None:
        if spool_write not in ("every_record", "unsent"):
            raise ValueError(f"spool_write = {spool_write!r}: must be every_record or unsent")
        self.client: mqtt.Client | None = None
        self.spool = spool
        self.qos = int(qos)
        self.lanes = SpoolLanes(spool, in_flight_window=in_flight_window, backlog_rate_per_s=backlog_rate_per_s,
                                live_reserve=live_reserve, clock=clock) if spool is not None else None
        self.window = int(in_flight_window)
        self._clock = clock
        self.unsent = UnsentRecords(memory_hold_s) if spool is not None and spool_write == "unsent" else None
        self.max_queued = int(max_queued_messages)
        self._stats = stats
        self._events: queue.SimpleQueue = queue.SimpleQueue()
        self._lock = threading.Lock()  # guards the memory lane and the id maps; never held across publish()
        self._queue: deque[_Message] = deque()
        self._n_submitted = 0
        self._retained: dict[str, bytes] = {}  # topic -> newest retained payload sent through memory
        self._dirty: dict[str, None] = {}  # retained topics whose newest payload is not queued yet
        self._memory_flight: dict[int, _Message] = {}  # mid -> memory message
        self._record_flight: dict[int, tuple[int, str]] = {}  # mid -> (seq, lane)
        self._hook_connects = 0
        self._gen = 0  # bumped by paho's thread on every connect/disconnect
        self._seen_gen = 0  # the drain thread's view
        self._connected = False
        self._ever_connected = False
        self._ack_buffer: list[int] = []  # seqs acknowledged by the broker, not yet deleted
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None
        self._idle = threading.Condition()
        self._n = dict(published=0, acked=0, rejected=0, held_over=0, connects=0, spilled=0, spills=0)
        self._last_error_log = 0.0
        self._last_refusal_log = 0.0
        if client is not None:
            self.attach(client)

    def attach(self, client: mqtt.Client) -> None:
        """Publish through ``client`` from now on (messages submitted before wait in memory or the spool)."""
        self.client = client
        try:  # paho queues beyond its own inflight limit; keep it at least our window
            if getattr(client, "max_inflight_messages", self.window) < self.window:
                client.max_inflight_messages = self.window
        except RuntimeError:  # already connected: paho then queues the excess, still in order
            pass

    @property
    def _paho(self) -> mqtt.Client:
        if self.client is None:
            raise RuntimeError("the outbox has no client yet (attach one first)")
        return self.client

    @classmethod
    def from_settings(cls, client: mqtt.Client | None, settings: Any, forwarding: Any, spool: Spool | None,
                      spool_settings: Any = None, **kwargs: Any) -> Outbox:
        """Build from :class:`~rotorwatch.settings.service.MqttSettings`,
        :class:`~rotorwatch.settings.storage.ForwardingSettings` and ``SpoolSettings``."""
        if spool_settings is not None:
            kwargs.setdefault("spool_write", spool_settings.write)
            kwargs.setdefault("memory_hold_s", spool_settings.memory_hold_s)
        return cls(client, spool=spool, qos=settings.qos, max_queued_messages=settings.max_queued_messages,
                   in_flight_window=forwarding.in_flight_window, backlog_rate_per_s=forwarding.backlog_rate_per_s,
                   live_reserve=forwarding.live_reserve, **kwargs)

    @property
    def lane_splits(self) -> deque[LaneSplit]:
        return self.lanes.lane_splits if self.lanes is not None else deque()

    # -- submitting (any thread) ------------------------------------------------------------------
    def publish(self, topic: str, payload: bytes, retain: bool = False, *, urgent: bool = False) -> bool:
        """Queue one message in memory; False (and a counted failure) when the lane is full.

        ``urgent`` puts it at the head of the queue (availability after a connect). An empty retained
        payload clears the topic on the broker."""
        with self._lock:
            if retain:
                if payload:
                    self._retained[topic] = payload
                else:
                    self._retained.pop(topic, None)
            room = self._room()
            if room:
                self._n_submitted += 1
                msg = _Message(self._n_submitted, topic, bytes(payload), self.qos, retain)
                self._queue.appendleft(msg) if urgent else self._queue.append(msg)
                self._dirty.pop(topic, None)
            elif retain:
                self._dirty[topic] = None  # queued as soon as there is room
        self._events.put(("wake",))
        if room:
            self._published()
        else:
            self._refused(topic, "the in-memory queue is full (mqtt.max_queued_messages)")
        return room

    def _room(self) -> bool:
        return not self.max_queued or len(self._queue) + len(self._memory_flight) < self.max_queued

    def _published(self) -> None:
        if self._stats is not None:
            self._stats.mqtt_messages_published.inc()

    def _failed(self) -> None:
        if self._stats is not None:
            self._stats.mqtt_publish_failures.inc()

    def _refused(self, topic: str, why: str) -> None:
        self._failed()
        now = time.monotonic()
        if now - self._last_refusal_log > 300.0:
            self._last_refusal_log = now
            log.warning(f"mqtt publish refused: {why}", extra={"topic": topic})

    # -- life cycle ---------------------------------------------------------------------------------
    def start(self) -> Outbox:
        """Start the drain thread. If the client is already connected, draining starts at once."""
        if self._thread is not None:
            return self
        self._stop.clear()
        if self.spool is not None:
            self.spool.requeue_in_flight()  # marked by an earlier client, which holds none of them now
            self.spool.add_listener(self._on_append)
        if self._paho.is_connected() and self._hook_connects == 0:  # connected before the hooks were set
            self._gen += 1
            self._events.put(("connect", self._gen))
        self._thread = threading.Thread(target=self._run, name="rotorwatch-outbox", daemon=True)
        self._thread.start()
        return self

    def stop(self, timeout_s: float = 5.0) -> None:
        """Stop the drain thread (bounded). Spool records in flight stay in the spool and go later."""
        self._stop.set()
        if self.spool is not None:
            self.spool.remove_listener(self._on_append)
        self._events.put(("wake",))
        if self._thread is not None:
            self._thread.join(timeout_s)
            if self._thread.is_alive():
                log.warning("outbox thread did not stop within %.1f s", timeout_s)
            self._thread = None
        if self.unsent is not None:  # a clean stop: what is unacknowledged waits in the spool
            self._spill("stop")

    def wait_drained(self, timeout_s: float) -> bool:
        """Wait until the spool holds nothing (all acknowledged); False when ``timeout_s`` passed first."""
        if self.spool is None:
            return True
        spool = self.spool
        return self._wait(lambda: spool.stats().depth == 0 and not self.unsent, timeout_s)

    def wait_sent(self, timeout_s: float) -> bool:
        """Wait until every memory message was acknowledged (QoS 1) or handed over (QoS 0)."""
        return self._wait(lambda: self.pending == 0, timeout_s)

    def _wait(self, done: Callable[[], bool], timeout_s: float) -> bool:
        deadline = time.monotonic() + timeout_s
        with self._idle:
            while not done():
                remaining = deadline - time.monotonic()
                if remaining <= 0:
                    return False
                self._idle.wait(min(remaining, 0.05))
        return True

    @property
    def pending(self) -> int:
        """Memory messages queued, in flight, or waiting for room (retained)."""
        with self._lock:
            return len(self._queue) + len(self._memory_flight) + len(self._dirty)

    # -- paho hooks (network thread) ----------------------------------------------------------------
    def install(self) -> None:
        """Make the outbox the client's ``on_connect``, ``on_disconnect`` and ``on_publish``."""
        self._paho.on_connect = self.on_connect
        self._paho.on_disconnect = self.on_disconnect
        self._paho.on_publish = self.on_publish

    def on_connect(self, client: mqtt.Client, userdata: Any, flags: Any, reason_code: Any,
                   properties: Any = None) -> None:
        """VERSION2 ``on_connect`` (paho's thread): paho's unacknowledged messages are dropped (paho would
        send them only after this callback, maybe after newer ones); :meth:`_take_back_flight` resends."""
        if getattr(reason_code, "is_failure", False):
            return
        self._hook_connects += 1
        self._gen += 1  # first: the drain thread stops handing until it has seen the connect
        client.drop_out_messages()
        self._events.put(("connect", self._gen))

    def on_disconnect(self, client: mqtt.Client, userdata: Any, disconnect_flags: Any, reason_code: Any,
                      properties: Any = None) -> None:
        self._gen += 1
        self._events.put(("disconnect", self._gen))

    def on_publish(self, client: mqtt.Client, userdata: Any, mid: int, reason_code: Any,
                   properties: Any = None) -> None:
        """The client's one ``on_publish`` (runs under paho's message lock: only queues)."""
        self._events.put(("ack", mid, reason_code))

    def _on_append(self, seq: int) -> None:
        self._events.put(("wake",))

    # -- drain thread ---------------------------------------------------------------------------------
    def _run(self) -> None:
        timeout_s = 0.5
        while not self._stop.is_set():
            try:
                self._handle_events(timeout_s)
                if self._stop.is_set():
                    break
                if self.unsent is not None and self.unsent.held_too_long(self._clock()):
                    self._spill(f"records unacknowledged for {self.unsent.hold_s:g} s written to the spool",
                                resplit=self._connected)
                if self._connected and self._gen == self._seen_gen:
                    self._send()
                with self._idle:
                    self._idle.notify_all()
                timeout_s = self.lanes.wait_s(self._connected) if self.lanes is not None else 0.5
            except StorageError as e:
                now = time.monotonic()
                if now - self._last_error_log > 30.0:
                    log.error("outbox: %s (retrying)", e)
                    self._last_error_log = now
                self._stop.wait(1.0)
                timeout_s = 0.0
            except Exception:  # never let the drain thread die silently
                log.exception("outbox: unexpected error (retrying in 1 s)")
                self._stop.wait(1.0)
                timeout_s = 0.0

    def _handle_events(self, timeout_s: float) -> None:
        events = []
        try:
            events.append(self._events.get(timeout=timeout_s) if timeout_s > 0 else self._events.get_nowait())
        except queue.Empty:
            pass
        while True:
            try:
                events.append(self._events.get_nowait())
            except queue.Empty:
                break
        for ev in events:  # every event is handled even when the disk fails on one of them
            if ev[0] == "ack":
                self._acknowledged(ev[1], ev[2])
            elif ev[0] in ("connect", "disconnect"):
                try:  # acknowledgements that came before the link changed still count
                    self._flush_acks()
                except StorageError as e:
                    log.error("outbox: %s (acknowledgements kept for the next try)", e)
                self._link_changed(ev[0] == "connect")
                self._seen_gen = max(self._seen_gen, ev[1])
        self._flush_acks()

    def _acknowledged(self, mid: int, reason_code: Any) -> None:
        refused = getattr(reason_code, "is_failure", False)
        with self._lock:
            msg = self._memory_flight.pop(mid, None)
            entry = self._record_flight.pop(mid, None) if msg is None else None
            held = self.unsent.flight.pop(mid, None) if self.unsent is not None and entry is None else None
        if held is not None:
            self._unsent_done(held[0], refused, reason_code)
            return
        if msg is not None:
            if refused:
                self._n["rejected"] += 1
                log.warning("broker refused a message topic=%r reason=%s", msg.topic, reason_code)
            else:
                self._n["acked"] += 1
            return
        if entry is None:
            return  # a QoS 0 message, or one of a client before a restart
        if refused:
            self._n["rejected"] += 1
            log.warning("broker refused a record seq=%d reason=%s (deleted, counted as broker_rejected)",
                        entry[0], reason_code)
            try:
                assert self.spool is not None
                self.spool.reject(entry[0], "broker_rejected")
            except StorageError as e:  # the row stays; it goes again after the next reconnect
                log.error("outbox: %s", e)
        else:
            self._ack_buffer.append(entry[0])

    def _flush_acks(self) -> None:
        """Commit the buffered acknowledgements in one transaction (kept for a retry if it fails)."""
        if not self._ack_buffer or self.spool is None:
            return
        self._n["acked"] += self.spool.ack_many(self._ack_buffer)
        self._ack_buffer = []

    def _link_changed(self, connected: bool) -> None:
        """In flight stays in flight while the link is down; at a connect it goes again, first, in order."""
        with self._lock:
            in_flight = len(self._record_flight) + len(self._memory_flight)
            if connected and self._ever_connected:  # the broker may have lost the retained states
                queued = {m.topic for m in self._queue if m.retain}
                self._dirty.update((t, None) for t in self._retained if t not in queued)
        if self.unsent is not None:  # unacknowledged records wait in the spool before the lanes split
            self._spill("link down" if not connected else "link up")
        if connected and self._hook_connects:
            self._take_back_flight()
        if self.lanes is not None:
            self.lanes.link_changed(connected)
        if not connected:
            if self._connected:
                self._n["held_over"] += in_flight
                log.info("outbox: link down, %d messages in flight wait for paho to send them again", in_flight)
            self._connected = False
            return
        self._connected = True
        self._ever_connected = True
        self._n["connects"] += 1

    def _take_back_flight(self) -> None:
        """Memory messages in flight back to the queue's head, spool records pending (the backlog lane
        sends them in seq order); one handed just before the drop may go twice (same seq: allowed)."""
        with self._lock:
            again = list(self._memory_flight.values())
            self._memory_flight.clear()
            self._queue.extendleft(reversed(again))
            self._record_flight.clear()
        if self.spool is not None:
            self.spool.requeue_in_flight()

    def _send(self) -> None:
        self._queue_dirty()
        while True:
            with self._lock:
                if not self._queue:
                    break
                msg = self._queue.popleft()
            if not self._hand_message(msg):
                return
        if self.lanes is not None:
            self.lanes.send(self._lane_counts(), self._hand_record)
        if self.unsent is not None:
            self._send_unsent()

    def _queue_dirty(self) -> None:
        with self._lock:
            while self._dirty and self._room():
                topic = next(iter(self._dirty))
                del self._dirty[topic]
                self._n_submitted += 1
                self._queue.append(_Message(self._n_submitted, topic, self._retained.get(topic, b""), self.qos, True))

    def _lane_counts(self) -> dict[str, int]:
        with self._lock:
            return self._lane_counts_locked()

    def _lane_counts_locked(self) -> dict[str, int]:
        counts: dict[str, int] = {}
        for _, lane in self._record_flight.values():
            counts[lane] = counts.get(lane, 0) + 1
        if self.unsent is not None and self.unsent.flight:
            counts["live"] = counts.get("live", 0) + len(self.unsent.flight)
        return counts

    def _hand_message(self, msg: _Message) -> bool:
        """Hand one memory message to paho; False when the round should stop (link change)."""
        if self._gen != self._seen_gen:
            with self._lock:
                self._queue.appendleft(msg)
            return False
        try:
            info = self._paho.publish(msg.topic, msg.payload, qos=msg.qos, retain=msg.retain)
        except (ValueError, TypeError) as e:
            self._refused(msg.topic, f"cannot be sent: {e}")
            return True
        self._n["published"] += 1
        if info.rc not in (mqtt.MQTT_ERR_SUCCESS, mqtt.MQTT_ERR_NO_CONN) or (msg.qos == 0 and info.rc != mqtt.MQTT_ERR_SUCCESS):
            with self._lock:  # not taken (the link just dropped at QoS 0, or paho is full): later
                self._queue.appendleft(msg)
            return False
        if msg.qos > 0:
            with self._lock:
                self._memory_flight[info.mid] = msg
        return info.rc == mqtt.MQTT_ERR_SUCCESS

    def _hand_record(self, rec: Record, retain: bool, lane: str) -> bool:
        """Hand one spool record to paho; False when the round should stop (link change, paho full)."""
        if self._gen != self._seen_gen:
            return False  # a connect/disconnect is waiting to be handled first
        assert self.spool is not None
        try:
            info = self._paho.publish(rec.topic, rec.payload, qos=rec.qos, retain=retain)
        except (ValueError, TypeError) as e:
            self.spool.reject(rec.seq, "unsendable")
            log.error("record cannot be published seq=%d topic=%r: %s (deleted, counted as unsendable)",
                      rec.seq, rec.topic, e)
            return True
        self._n["published"] += 1
        if info.rc == mqtt.MQTT_ERR_QUEUE_SIZE:
            return False  # paho's queue is full: try again on the next round
        if rec.qos == 0:  # no acknowledgement exists at QoS 0: handed over is as good as it gets
            if info.rc == mqtt.MQTT_ERR_SUCCESS:
                self._n["acked"] += self.spool.ack_many([rec.seq])
            return info.rc == mqtt.MQTT_ERR_SUCCESS
        with self._lock:
            self._record_flight[info.mid] = (rec.seq, lane)
        self.spool.mark_in_flight(rec.seq, info.mid)
        return info.rc == mqtt.MQTT_ERR_SUCCESS

    # -- figures ---------------------------------------------------------------------------------------
    def stats(self) -> OutboxStats:
        with self._lock:
            in_flight = len(self._record_flight) + len(self._memory_flight)
            queued = len(self._queue)
            unsent = len(self.unsent) if self.unsent is not None else 0
        lanes = self.lanes
        return OutboxStats(connected=self._connected, in_flight=in_flight, queued=queued,
                           retain_downgraded=lanes.retain_downgraded if lanes is not None else 0,
                           backlog_active=lanes.backlog_active if lanes is not None else False,
                           backlog_through_seq=lanes.backlog_through if lanes is not None else None,
                           unsent=unsent, **self._n)
