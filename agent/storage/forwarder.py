"""The forwarder: drains the publish spool into a paho-mqtt 2.x client, at least once, in seq order.

A record leaves the spool only when the broker has acknowledged it: the forwarder publishes it (QoS
1 unless the record says otherwise), remembers ``mid -> seq``, and deletes the row when ``on_publish``
reports the PUBACK for that mid. ``MQTTMessageInfo.wait_for_publish()`` is never used (it raises for
messages queued while offline).

Lanes and order. At each (re)connect the forwarder notes ``B = spool.last_seq``:

- the **backlog lane** is every stored record with ``seq <= B`` (what piled up during the outage and
  what was in flight when the link dropped). It is published in seq order at most
  ``backlog_rate_per_s`` per second, using at most ``in_flight_window - live_reserve`` window slots;
- the **live lane** is every record appended after the connect (``seq > B``), published in seq order as
  soon as it is appended, without a rate bound, so live data is not held behind a long backlog.

Within a lane records are published in seq order over one connection, so the broker receives them in
that order; across lanes a live record may arrive before older backlog records. Consumers that need a
total order sort by ``seq``. When the link drops, every record in flight becomes pending again and
is published again after the reconnect (a duplicate if the broker had it already: same ``seq``).

Retained states: a retained record older (lower seq) than one already published or acknowledged on
the same topic is sent with ``retain=False``, so a backlog never replaces the broker's retained
state with a stale one.

paho's own offline queue is not used: ``on_connect`` calls ``client.drop_out_messages()`` before paho
would resend its copies (the spool resends them, in order); messages of other publishers of the same
client found there are published again unchanged.

Threading: one drain thread (``start()``/``stop()``) owns publishing and the mid map. The hooks
``on_connect``, ``on_disconnect`` and ``on_publish`` run in paho's network thread; they only queue an
event for the drain thread (``on_publish`` runs while paho holds its message lock, so it must not
wait for anything). Wire them with :meth:`Forwarder.install` or call them from your own callbacks
(VERSION2 signatures; call ``on_connect`` FIRST, before publishing anything else from it).
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

from . import StorageError
from .spool import Record, Spool

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class LaneSplit:
    """Where the backlog lane ended at one (re)connect: records with seq <= backlog_through_seq."""

    connected_at_s: float  # monotonic clock of the forwarder
    backlog_through_seq: int
    backlog_depth: int  # stored records at that moment (-1: could not be read)


@dataclass(frozen=True)
class ForwarderStats:
    connected: bool
    in_flight: int
    published: int  # publish() calls (including republishes after a reconnect)
    acked: int  # records deleted on PUBACK
    rejected: int  # PUBACKs with a failure reason code (record deleted, counted in the spool too)
    requeued: int  # in-flight records made pending again by disconnects
    retain_downgraded: int
    connects: int
    backlog_active: bool
    backlog_through_seq: int | None


class Forwarder:
    """Drain ``spool`` into ``client`` (a ``paho.mqtt.client.Client`` with VERSION2 callbacks).

    ``in_flight_window``: records published and not yet acknowledged, at most.
    ``backlog_rate_per_s``: the bound on the backlog lane. ``live_reserve``: window slots the backlog
    leaves to live records. ``on_republish(old_mid, new_mid)``: called (in paho's thread) when
    ``on_connect`` publishes again a message of another publisher of the same client that paho held
    offline, so that publisher can follow its message id. ``clock``: monotonic seconds (for tests).
    """

    def __init__(self, spool: Spool, client: mqtt.Client, *, in_flight_window: int = 20,
                 backlog_rate_per_s: float = 200.0, live_reserve: int = 4,
                 on_republish: Callable[[int, int], None] | None = None,
                 clock: Callable[[], float] = time.monotonic) -> None:
        if in_flight_window < 1:
            raise ValueError(f"in_flight_window = {in_flight_window}: must be at least 1")
        if not backlog_rate_per_s > 0:
            raise ValueError(f"backlog_rate_per_s = {backlog_rate_per_s}: must be above 0")
        if not 0 <= live_reserve < in_flight_window:
            raise ValueError(f"live_reserve = {live_reserve}: must be in 0..{in_flight_window - 1}")
        self.spool = spool
        self.client = client
        self.window = int(in_flight_window)
        self.backlog_window = self.window - int(live_reserve)
        self.backlog_rate_per_s = float(backlog_rate_per_s)
        self._burst = max(1.0, min(float(self.backlog_window), self.backlog_rate_per_s * 0.25))
        self._clock = clock
        self._on_republish = on_republish
        self._events: queue.SimpleQueue = queue.SimpleQueue()
        self._map_lock = threading.Lock()  # guards _mid_to_seq; never held across client.publish()
        self._mid_to_seq: dict[int, tuple[int, str]] = {}  # mid -> (seq, lane)
        self._hook_connects = 0
        self._gen = 0  # bumped by paho's thread on every connect/disconnect
        self._seen_gen = 0  # the drain thread's view
        self._connected = False
        self._backlog_through: int | None = None
        self._backlog_active = False
        self._tokens = 0.0
        self._tokens_at = clock()
        self._retained_sent: dict[str, int] = {}
        self._ack_buffer: list[int] = []  # seqs acknowledged by the broker, not yet deleted
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None
        self._idle = threading.Condition()
        self.lane_splits: deque[LaneSplit] = deque(maxlen=100)
        self._n = dict(published=0, acked=0, rejected=0, requeued=0, retain_downgraded=0, connects=0)
        self._last_error_log = 0.0
        try:  # paho queues beyond its own inflight limit; keep it at least our window
            if getattr(client, "max_inflight_messages", self.window) < self.window:
                client.max_inflight_messages = self.window
        except RuntimeError:  # already connected: paho then queues the excess, still in order
            pass

    @classmethod
    def from_settings(cls, spool: Spool, client: mqtt.Client, settings: Any, **kwargs: Any) -> Forwarder:
        """Build from a :class:`~rotorwatch.settings.storage.ForwardingSettings`."""
        return cls(spool, client, in_flight_window=settings.in_flight_window,
                   backlog_rate_per_s=settings.backlog_rate_per_s, live_reserve=settings.live_reserve, **kwargs)

    # -- life cycle ---------------------------------------------------------------------------------
    def start(self) -> Forwarder:
        """Start the drain thread. If the client is already connected, draining starts at once."""
        if self._thread is not None:
            return self
        self._stop.clear()
        self.spool.add_listener(self._on_append)
        if self.client.is_connected() and self._hook_connects == 0:  # connected before the hooks were set
            self._gen += 1
            self._events.put(("connect", self._gen))
        self._thread = threading.Thread(target=self._run, name="rotorwatch-forwarder", daemon=True)
        self._thread.start()
        return self

    def stop(self, timeout_s: float = 5.0) -> None:
        """Stop the drain thread (bounded). Records in flight stay in the spool and go again later."""
        self._stop.set()
        self.spool.remove_listener(self._on_append)
        self._events.put(("wake",))
        if self._thread is not None:
            self._thread.join(timeout_s)
            if self._thread.is_alive():
                log.warning("forwarder thread did not stop within %.1f s", timeout_s)
            self._thread = None

    def wait_drained(self, timeout_s: float) -> bool:
        """Wait until the spool holds nothing (all acknowledged); False when ``timeout_s`` passed first."""
        deadline = time.monotonic() + timeout_s
        with self._idle:
            while self.spool.stats().depth > 0:
                remaining = deadline - time.monotonic()
                if remaining <= 0:
                    return False
                self._idle.wait(min(remaining, 0.1))
        return True

    # -- paho hooks (network thread) -------------------------------------------------------------------
    def install(self) -> None:
        """Set the client's on_connect/on_disconnect/on_publish to the forwarder's hooks.

        Callbacks already set are kept and called after the forwarder's own; the previous
        ``on_publish`` is called only for message ids that are not the forwarder's.
        """
        for name in ("on_connect", "on_disconnect", "on_publish"):
            mine = getattr(self, name)
            previous = getattr(self.client, name)
            if previous is None:
                setattr(self.client, name, mine)
            elif name == "on_publish":
                def chained_publish(*args: Any, _mine=mine, _previous=previous) -> None:
                    if not _mine(*args):
                        _previous(*args)
                setattr(self.client, name, chained_publish)
            else:
                def chained(*args: Any, _mine=mine, _previous=previous) -> None:
                    _mine(*args)
                    _previous(*args)
                setattr(self.client, name, chained)

    def on_connect(self, client: mqtt.Client, userdata: Any, flags: Any, reason_code: Any,
                   properties: Any = None) -> None:
        """VERSION2 ``on_connect`` hook: call it first in yours."""
        if getattr(reason_code, "is_failure", False):
            return
        self._hook_connects += 1
        dropped = client.drop_out_messages()
        with self._map_lock:
            ours = set(self._mid_to_seq)
        for msg in dropped:
            if msg.mid not in ours:  # someone else's message on this client: keep it
                info = client.publish(msg.topic, msg.payload, qos=msg.qos, retain=msg.retain,
                                      properties=msg.properties)
                if self._on_republish is not None:
                    self._on_republish(msg.mid, info.mid)
        self._gen += 1
        self._events.put(("connect", self._gen))

    def on_disconnect(self, client: mqtt.Client, userdata: Any, disconnect_flags: Any, reason_code: Any,
                      properties: Any = None) -> None:
        """VERSION2 ``on_disconnect`` hook."""
        self._gen += 1
        self._events.put(("disconnect", self._gen))

    def on_publish(self, client: mqtt.Client, userdata: Any, mid: int, reason_code: Any,
                   properties: Any = None) -> bool:
        """VERSION2 ``on_publish`` hook (runs under paho's message lock: only queues).

        Returns True when ``mid`` is one of the forwarder's records, so a chaining caller can skip
        its own bookkeeping for it. (A PUBACK that beats the drain thread's note of the mid, which
        paho's locking makes all but impossible, reads as False; the forwarder still counts it.)
        """
        self._events.put(("ack", mid, reason_code))
        with self._map_lock:
            return mid in self._mid_to_seq

    def _on_append(self, seq: int) -> None:
        self._events.put(("wake",))

    # -- drain thread ----------------------------------------------------------------------------------
    def _run(self) -> None:
        timeout_s = 0.5
        while not self._stop.is_set():
            try:
                self._handle_events(timeout_s)
                if self._stop.is_set():
                    break
                if self._connected and self._gen == self._seen_gen:
                    self._send()
                timeout_s = self._wait_s()
            except StorageError as e:
                now = time.monotonic()
                if now - self._last_error_log > 30.0:
                    log.error("forwarder: %s (retrying)", e)
                    self._last_error_log = now
                self._stop.wait(1.0)
                timeout_s = 0.0
            except Exception:  # never let the drain thread die silently
                log.exception("forwarder: unexpected error (retrying in 1 s)")
                self._stop.wait(1.0)
                timeout_s = 0.0

    def _handle_events(self, timeout_s: float) -> None:
        events = []
        try:
            events.append(self._events.get(timeout=max(0.0, timeout_s)) if timeout_s > 0
                          else self._events.get_nowait())
        except queue.Empty:
            pass
        while True:
            try:
                events.append(self._events.get_nowait())
            except queue.Empty:
                break
        for ev in events:  # every event is handled even when the disk fails on one of them
            kind = ev[0]
            if kind == "ack":
                with self._map_lock:
                    entry = self._mid_to_seq.pop(ev[1], None)
                if entry is None:
                    continue  # another publisher's message, or one from before a reconnect
                if getattr(ev[2], "is_failure", False):
                    self._n["rejected"] += 1
                    log.warning("broker refused a record seq=%d reason=%s (deleted, counted as broker_rejected)",
                                entry[0], ev[2])
                    try:
                        self.spool.reject(entry[0], "broker_rejected")
                    except StorageError as e:  # the row stays; it goes again after the next reconnect
                        log.error("forwarder: %s", e)
                else:
                    self._ack_buffer.append(entry[0])
            elif kind in ("connect", "disconnect"):
                try:  # acknowledgements that came before the link changed still count
                    self._flush_acks()
                except StorageError as e:
                    log.error("forwarder: %s (acknowledgements kept for the next try)", e)
                self._link_changed(kind == "connect")
                self._seen_gen = max(self._seen_gen, ev[1])
        self._flush_acks()

    def _flush_acks(self) -> None:
        """Commit the buffered acknowledgements in one transaction (kept for a retry if it fails)."""
        if not self._ack_buffer:
            return
        self._n["acked"] += self.spool.ack_many(self._ack_buffer)
        self._ack_buffer = []
        with self._idle:
            self._idle.notify_all()

    def _link_changed(self, connected: bool) -> None:
        with self._map_lock:
            self._mid_to_seq.clear()
        n = self.spool.requeue_in_flight()
        self._n["requeued"] += n
        self._retained_sent.clear()
        if not connected:
            if self._connected:
                log.info("forwarder: link down, %d records in flight requeued", n)
            self._connected = False
            return
        self._connected = True
        self._n["connects"] += 1
        last_seq = self.spool.last_seq
        try:
            depth = self.spool.stats().depth
        except StorageError:
            depth = -1  # unknown: treat as a backlog, the lane finds out
        self._backlog_through = last_seq
        self._backlog_active = depth != 0
        self._tokens, self._tokens_at = self._burst, self._clock()
        self.lane_splits.append(LaneSplit(self._clock(), last_seq, depth))
        log.info("forwarder: link up, backlog of %d records through seq=%d at <= %.0f/s, live from seq=%d",
                 depth, last_seq, self.backlog_rate_per_s, last_seq + 1)

    def _lane_in_flight(self, lane: str) -> int:
        with self._map_lock:
            return sum(1 for _, ln in self._mid_to_seq.values() if ln == lane)

    def _send(self) -> None:
        with self._map_lock:
            free = self.window - len(self._mid_to_seq)
        if free > 0:  # live lane first: everything appended since the connect
            for rec in self.spool.next_batch(free, after_seq=self._backlog_through):
                if not self._publish(rec, "live"):
                    return
                free -= 1
        if not self._backlog_active or free <= 0:
            return
        now = self._clock()
        self._tokens = min(self._burst, self._tokens + (now - self._tokens_at) * self.backlog_rate_per_s)
        self._tokens_at = now
        backlog_in_flight = self._lane_in_flight("backlog")
        n = min(free, self.backlog_window - backlog_in_flight, int(self._tokens))
        if n <= 0:
            return
        batch = self.spool.next_batch(n, through_seq=self._backlog_through)
        if not batch and backlog_in_flight == 0:
            self._backlog_active = False
            log.info("forwarder: backlog drained through seq=%s", self._backlog_through)
            return
        for rec in batch:
            if not self._publish(rec, "backlog"):
                return
            self._tokens -= 1.0

    def _publish(self, rec: Record, lane: str) -> bool:
        """Hand one record to paho; False when the drain round should stop (link change, paho full)."""
        if self._gen != self._seen_gen:
            return False  # a connect/disconnect is waiting to be handled first
        retain = rec.retain
        if retain:
            newest = max(self.spool.retained_seq(rec.topic) or 0, self._retained_sent.get(rec.topic, 0))
            if rec.seq < newest:
                retain = False
                self._n["retain_downgraded"] += 1
            else:
                self._retained_sent[rec.topic] = rec.seq
        try:
            info = self.client.publish(rec.topic, rec.payload, qos=rec.qos, retain=retain)
        except (ValueError, TypeError) as e:
            self.spool.reject(rec.seq, "unsendable")
            log.error("record cannot be published seq=%d topic=%r: %s (deleted, counted as unsendable)",
                      rec.seq, rec.topic, e)
            return True
        self._n["published"] += 1
        if info.rc == mqtt.MQTT_ERR_QUEUE_SIZE:
            return False  # paho's queue is full (max_queued_messages): try again on the next round
        if rec.qos == 0:  # no acknowledgement exists at QoS 0: handed over is as good as it gets
            if info.rc == mqtt.MQTT_ERR_SUCCESS:
                self._n["acked"] += self.spool.ack_many([rec.seq])
            return info.rc == mqtt.MQTT_ERR_SUCCESS
        with self._map_lock:
            self._mid_to_seq[info.mid] = (rec.seq, lane)
        self.spool.mark_in_flight(rec.seq, info.mid)
        return info.rc == mqtt.MQTT_ERR_SUCCESS

    def _wait_s(self) -> float:
        """How long the drain thread may sleep before it has something to do."""
        if self._connected and self._backlog_active and self._tokens < 1.0:
            return max(0.001, (1.0 - self._tokens) / self.backlog_rate_per_s)  # the next backlog token
        return 0.5  # woken by appends, acks and link changes; the bound is a safety net

    # -- figures ---------------------------------------------------------------------------------------
    def stats(self) -> ForwarderStats:
        with self._map_lock:
            in_flight = len(self._mid_to_seq)
        return ForwarderStats(connected=self._connected, in_flight=in_flight,
                              backlog_active=self._backlog_active,
                              backlog_through_seq=self._backlog_through, **self._n)
