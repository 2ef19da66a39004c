"""Spool + Outbox against a real mosquitto: nothing is lost across a broker outage or a kill -9.

The publisher appends records at a steady rate through :class:`Spool` and :class:`Outbox` while a
persistent-session QoS 1 subscriber (MQTT 5, clean_start=False + SessionExpiryInterval, as in the
shared recipes section 2) collects them. The checks:

- every seq the spool handed out arrives (loss count 0); duplicates are allowed, counted and printed;
- order per lane: the lanes are the seq ranges between the outbox's backlog split points (one per
  connect); within each range the first arrivals of the seqs are increasing;
- live records are not held behind the backlog: some live record arrives before the backlog is done.

The broker is the session fixture ``mosquitto_broker``; a test that stops it starts it again.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import textwrap
import threading
import time
import uuid
from pathlib import Path

import paho.mqtt.client as mqtt
import pytest

from rotorwatch.publishers.mqtt.outbox import Outbox
from rotorwatch.storage.spool import Spool

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))  # tests/components.py, any import mode
from components import MosquittoBroker, PersistentSubscriber  # noqa: E402

pytestmark = pytest.mark.integration

KIND_CYCLE = ("metrics",) * 8 + ("state", "event")


def _topic(prefix: str, kind: str) -> str:
    return f"{prefix}/m1/{ {'metrics': 'metrics', 'state': 'state', 'event': 'events'}[kind] }"


class Collector(PersistentSubscriber):
    """A persistent-session QoS 1 subscriber recording the seq of every message, in arrival order."""

    def __init__(self, host: str, port: int, prefix: str) -> None:
        self.seqs: list[int] = []
        self.others: list[tuple[str, bytes]] = []
        self.prefix = prefix
        super().__init__(host, port, f"{prefix}/#", client_id=f"collector-{prefix[-8:]}", reconnect_s=(1, 2))

    def _on_message(self, client, userdata, msg) -> None:
        try:
            seq = json.loads(msg.payload)["seq"]
        except (ValueError, KeyError, TypeError):  # not a spooled record (another publisher's message)
            with self._lock:
                self.others.append((msg.topic, bytes(msg.payload)))
            return
        with self._lock:
            self.seqs.append(seq)

    def received(self) -> list[int]:
        with self._lock:
            return list(self.seqs)

    def wait_for_all(self, expected: set[int], timeout_s: float) -> set[int]:
        """Wait (bounded) until every expected seq arrived; returns the missing ones."""
        deadline = time.monotonic() + timeout_s
        while True:
            missing = expected - set(self.received())
            if not missing or time.monotonic() > deadline:
                return missing
            time.sleep(0.05)


class TimedClient(mqtt.Client):
    """A real paho client that also notes when each record was handed to it (monotonic s, seq)."""

    def __init__(self, *args, **kwargs) -> None:
        super().__init__(*args, **kwargs)
        self.handed: list[tuple[float, int]] = []

    def publish(self, topic, payload=None, qos=0, retain=False, properties=None):
        try:
            self.handed.append((time.monotonic(), json.loads(payload)["seq"]))
        except (ValueError, KeyError, TypeError):
            pass
        return super().publish(topic, payload, qos=qos, retain=retain, properties=properties)


def _publisher_client(host: str, port: int, client_id: str) -> TimedClient:
    client = TimedClient(mqtt.CallbackAPIVersion.VERSION2, client_id=client_id, protocol=mqtt.MQTTv5)
    client.reconnect_delay_set(1, 2)
    return client


def _retained_seq(broker, topic: str, timeout_s: float = 5.0) -> int | None:
    """The seq of the retained message a new (clean) subscriber gets on ``topic``."""
    got: list[int] = []
    done = threading.Event()
    c = mqtt.Client(mqtt.CallbackAPIVersion.VERSION2, client_id=f"late-{uuid.uuid4().hex[:8]}",
                    protocol=mqtt.MQTTv5)
    c.on_connect = lambda cl, u, f, rc, p: cl.subscribe(topic, qos=1)

    def on_message(cl, u, msg):
        if msg.retain:
            got.append(json.loads(msg.payload)["seq"])
            done.set()
    c.on_message = on_message
    c.connect(broker.host, broker.port, keepalive=5)
    c.loop_start()
    try:
        done.wait(timeout_s)
    finally:
        c.disconnect()
        c.loop_stop()
    return got[0] if got else None


def _check_order_per_lane(arrivals: list[int], splits: list[int]) -> None:
    """Within each lane range (between split points), first arrivals come in increasing seq order."""
    first: list[int] = []
    seen: set[int] = set()
    for s in arrivals:
        if s not in seen:
            seen.add(s)
            first.append(s)
    bounds = sorted(set(splits))
    for lo, hi in zip([0, *bounds], [*bounds, float("inf")]):
        lane = [s for s in first if lo < s <= hi]
        assert lane == sorted(lane), f"lane ({lo}, {hi}] out of order: first out-of-order pair at " \
            f"{next(i for i in range(1, len(lane)) if lane[i] < lane[i - 1])}"


def _shut_down(broker, outbox, client, collector) -> None:
    """The broker back if a test left it down, then the outbox, the client and the collector stopped."""
    if not broker.running:
        broker.start()
    outbox.stop()
    client.disconnect()
    client.loop_stop()
    collector.close()


def _duplicates(arrivals: list[int]) -> int:
    return len(arrivals) - len(set(arrivals))


def test_broker_outage_loses_nothing_and_keeps_lane_order(mosquitto_broker, tmp_path):
    broker = mosquitto_broker
    prefix = f"rwtest/{uuid.uuid4().hex}"
    collector = Collector(broker.host, broker.port, prefix)
    spool = Spool(tmp_path / "spool.sqlite", max_bytes=1 << 30, max_records=1_000_000)
    client = _publisher_client(broker.host, broker.port, f"edge-{prefix[-8:]}")
    backlog_rate = 150.0
    outbox = Outbox(client, spool=spool, in_flight_window=20, backlog_rate_per_s=backlog_rate, live_reserve=4)
    outbox.install()
    client.connect_async(broker.host, broker.port, keepalive=5)
    client.loop_start()
    outbox.start()
    n_records, rate_per_s = 900, 100.0
    outage = {}
    try:
        t0 = time.monotonic()
        for i in range(n_records):
            kind = KIND_CYCLE[i % len(KIND_CYCLE)]
            spool.append(kind, _topic(prefix, kind), {"i": i}, retain=(kind == "state"))
            if i == 250:
                outage["stop_s"] = time.monotonic() - t0
                broker.stop()
                outage["seq_at_stop"] = spool.last_seq
            if i == 550:
                broker.start()
                outage["start_s"] = time.monotonic() - t0
            delay = t0 + (i + 1) / rate_per_s - time.monotonic()
            if delay > 0:
                time.sleep(delay)
        append_s = time.monotonic() - t0
        assert outbox.wait_drained(30.0), f"spool not drained: {spool.stats()} {outbox.stats()}"
        drained_s = time.monotonic() - t0
        expected = set(range(1, spool.last_seq + 1))
        missing = collector.wait_for_all(expected, 20.0)
        last_state_seq = max(r for r in expected if KIND_CYCLE[(r - 1) % len(KIND_CYCLE)] == "state")
        retained = _retained_seq(broker, _topic(prefix, "state"))
    finally:
        _shut_down(broker, outbox, client, collector)
    st, fs = spool.stats(), outbox.stats()
    spool.close()
    arrivals = collector.received()
    splits = [s.backlog_through_seq for s in outbox.lane_splits]
    reconnect = next(s for s in outbox.lane_splits if s.backlog_through_seq > outage["seq_at_stop"])
    backlog_n = reconnect.backlog_depth
    print(f"\n[outage] appended {spool.last_seq} records in {append_s:.1f} s; broker down "
          f"{outage['stop_s']:.1f}-{outage['start_s']:.1f} s; backlog {backlog_n} records at <= {backlog_rate:.0f}/s; "
          f"drained at {drained_s:.1f} s; received {len(arrivals)} messages, loss {len(missing)}, "
          f"duplicates {_duplicates(arrivals)}; lane splits {list(outbox.lane_splits)}; outbox {fs}")
    assert not missing, f"lost {len(missing)} records, e.g. {sorted(missing)[:10]}"
    assert st.dropped_total == 0 and st.depth == 0
    assert fs.connects >= 2 and len(splits) >= 2  # the outage really happened
    assert collector.sessions_present[-1] is True  # the subscriber resumed its session
    _check_order_per_lane(arrivals, splits)
    # the backlog did not overwrite the broker's retained state with a stale one
    assert fs.retain_downgraded > 0 and retained == last_state_seq
    # live data is not starved: a record appended after the reconnect arrives before the backlog ends
    first_index = {}
    for idx, s in enumerate(arrivals):
        first_index.setdefault(s, idx)
    B = reconnect.backlog_through_seq
    assert min(first_index[s] for s in expected if s > B) < first_index[B]
    # the backlog lane kept to its rate bound: handing n records over took at least (n - burst) / rate
    # (a lower bound on time, so a slow machine cannot fail it)
    after = [(t, s) for t, s in client.handed if t >= reconnect.connected_at_s and s <= B]
    span_s = after[-1][0] - after[0][0]
    print(f"[outage] backlog of {len(after)} records handed over in {span_s:.2f} s = "
          f"{(len(after) - 1) / span_s:.0f} records/s (bound {backlog_rate:.0f}/s)")
    burst = min(20 - 4, backlog_rate * 0.25)
    assert span_s >= (len(after) - burst) / backlog_rate * 0.95


def test_frozen_broker_requeues_what_was_in_flight(make_mosquitto_broker, tmp_path):
    """SIGSTOP the broker: PUBACKs stop, the window fills, paho's keepalive gives up; the records in
    flight stay in flight under their ids, paho sends them again after SIGCONT and their PUBACKs delete
    them (duplicates counted, none lost)."""
    broker = make_mosquitto_broker()  # private: freezing it must not disturb other tests
    prefix = f"rwtest/{uuid.uuid4().hex}"
    collector = Collector(broker.host, broker.port, prefix)
    spool = Spool(tmp_path / "spool.sqlite", max_bytes=1 << 30, max_records=1_000_000)
    client = _publisher_client(broker.host, broker.port, f"edge-{prefix[-8:]}")
    outbox = Outbox(client, spool=spool, in_flight_window=20, backlog_rate_per_s=300.0)
    outbox.install()
    client.connect(broker.host, broker.port, keepalive=2)
    client.loop_start()
    outbox.start()
    frozen = False
    try:
        t0 = time.monotonic()
        for i in range(700):
            spool.append("metrics" if i % 10 else "event", _topic(prefix, "metrics" if i % 10 else "event"), {"i": i})
            if i == 150:
                os.kill(broker.pid, signal.SIGSTOP)
                frozen = True
            if i == 500:
                os.kill(broker.pid, signal.SIGCONT)
                frozen = False
            delay = t0 + (i + 1) / 100.0 - time.monotonic()
            if delay > 0:
                time.sleep(delay)
        assert outbox.wait_drained(30.0), f"not drained: {spool.stats()} {outbox.stats()}"
        missing = collector.wait_for_all(set(range(1, spool.last_seq + 1)), 20.0)
    finally:
        if frozen:
            os.kill(broker.pid, signal.SIGCONT)
        outbox.stop()
        client.disconnect()
        client.loop_stop()
        collector.close()
    fs = outbox.stats()
    spool.close()
    arrivals = collector.received()
    print(f"\n[freeze] {len(set(arrivals))} records, {len(arrivals)} messages: loss {len(missing)}, "
          f"duplicates {_duplicates(arrivals)}; held over {fs.held_over}; splits {list(outbox.lane_splits)}")
    assert not missing, f"lost {len(missing)} records, e.g. {sorted(missing)[:10]}"
    assert fs.held_over > 0 and fs.connects >= 2  # the window really was in flight when the link died
    _check_order_per_lane(arrivals, [sp.backlog_through_seq for sp in outbox.lane_splits])


def test_a_record_the_broker_refuses_is_counted_and_does_not_block(tmp_path):
    """An ACL denies one topic: MQTT 5 PUBACK carries 'Not authorized' (0x87); the record is deleted and
    counted as broker_rejected, the records behind it still go (private broker with an acl_file)."""
    broker = MosquittoBroker(workdir=tmp_path / "broker")
    acl = tmp_path / "broker" / "acl"
    acl.write_text("topic readwrite rwtest/ok/#\n")
    with open(broker.config_path, "a") as conf:
        conf.write(f"acl_file {acl}\n")
    broker.start()
    try:
        collector = Collector(broker.host, broker.port, "rwtest/ok")
        spool = Spool(tmp_path / "spool.sqlite")
        client = _publisher_client(broker.host, broker.port, "edge-acl")
        outbox = Outbox(client, spool=spool)
        outbox.install()
        client.connect(broker.host, broker.port, keepalive=10)
        client.loop_start()
        outbox.start()
        try:
            ok = [spool.append("event", "rwtest/ok/m1/events", {"i": 0})]
            denied = spool.append("event", "rwtest/denied/m1/events", {"i": 1})
            ok += [spool.append("event", "rwtest/ok/m1/events", {"i": i}) for i in range(2, 6)]
            assert outbox.wait_drained(10.0), f"not drained: {spool.stats()}"
            missing = collector.wait_for_all(set(ok), 10.0)
        finally:
            outbox.stop()
            client.disconnect()
            client.loop_stop()
            collector.close()
        st, fs = spool.stats(), outbox.stats()
        spool.close()
    finally:
        broker.stop()
    assert not missing and denied not in collector.received()
    assert st.dropped["broker_rejected"] == 1 and fs.rejected == 1 and st.depth == 0


def test_memory_messages_wait_for_the_link_and_are_confirmed(make_mosquitto_broker, tmp_path):
    """One owner of the client's publishing: a memory message submitted while the broker is away
    waits in the outbox (paho never holds it offline), goes out after the reconnect with the spool's
    records, and its PUBACK is matched (wait_sent), with the spool's records confirmed beside it."""
    broker = make_mosquitto_broker()
    prefix = f"rwtest/{uuid.uuid4().hex}"
    collector = Collector(broker.host, broker.port, prefix)
    spool = Spool(tmp_path / "spool.sqlite")
    client = _publisher_client(broker.host, broker.port, f"edge-{prefix[-8:]}")
    outbox = Outbox(client, spool=spool)
    outbox.install()
    client.connect(broker.host, broker.port, keepalive=5)
    client.loop_start()
    outbox.start()
    try:
        for i in range(30):
            spool.append("metrics", _topic(prefix, "metrics"), {"i": i})
        assert outbox.wait_drained(10.0)
        broker.stop()
        deadline = time.monotonic() + 10
        while client.is_connected() and time.monotonic() < deadline:
            time.sleep(0.02)
        assert outbox.publish(f"{prefix}/note", b"queued while offline")
        assert outbox.pending == 1 and outbox.stats().queued == 1  # in the outbox, not in paho
        for i in range(30, 40):
            spool.append("event", _topic(prefix, "event"), {"i": i})
        broker.start()
        assert outbox.wait_drained(15.0), f"not drained: {spool.stats()} {outbox.stats()}"
        assert outbox.wait_sent(10.0), f"the note's acknowledgement never matched: {outbox.stats()}"
        missing = collector.wait_for_all(set(range(1, 41)), 10.0)
        wait_deadline = time.monotonic() + 10
        while not collector.others and time.monotonic() < wait_deadline:
            time.sleep(0.02)
    finally:
        outbox.stop()
        client.disconnect()
        client.loop_stop()
        collector.close()
        spool.close()
    assert not missing
    assert collector.others == [(f"{prefix}/note", b"queued while offline")]
    st = outbox.stats()
    assert st.connects >= 2 and st.rejected == 0 and st.in_flight == 0 and st.queued == 0


_CHILD = textwrap.dedent("""
    import json, os, sys, time
    import paho.mqtt.client as mqtt
    from rotorwatch.publishers.mqtt.outbox import Outbox
    from rotorwatch.storage.spool import Spool

    spool_path, host, port, prefix, start_i, n, rate, splits_path = sys.argv[1:9]
    port, start_i, n, rate = int(port), int(start_i), int(n), float(rate)
    KIND_CYCLE = ("metrics",) * 8 + ("state", "event")
    TOPIC = {"metrics": "metrics", "state": "state", "event": "events"}
    spool = Spool(spool_path, max_bytes=1 << 30, max_records=1_000_000)
    client = mqtt.Client(mqtt.CallbackAPIVersion.VERSION2, client_id="edge-" + prefix[-8:], protocol=mqtt.MQTTv5)
    client.reconnect_delay_set(1, 2)
    fwd = Outbox(client, spool=spool, in_flight_window=20, backlog_rate_per_s=400.0)
    fwd.install()
    client.connect_async(host, port, keepalive=5)
    client.loop_start()
    fwd.start()
    fd = os.open(splits_path, os.O_WRONLY | os.O_APPEND | os.O_CREAT, 0o644)
    written = 0
    def flush_splits():
        global written
        splits = list(fwd.lane_splits)
        for s in splits[written:]:
            os.write(fd, (json.dumps(s.backlog_through_seq) + "\\n").encode())
        written = len(splits)
    t0 = time.monotonic()
    for k in range(n):
        i = start_i + k
        kind = KIND_CYCLE[i % len(KIND_CYCLE)]
        seq = spool.append(kind, f"{prefix}/m1/{TOPIC[kind]}", {"i": i}, retain=(kind == "state"))
        flush_splits()
        delay = t0 + (k + 1) / rate - time.monotonic()
        if delay > 0:
            time.sleep(delay)
    ok = fwd.wait_drained(30.0)
    flush_splits()
    fwd.stop()
    client.disconnect()
    client.loop_stop()
    st = spool.stats()
    print(json.dumps({"drained": ok, "last_seq": st.last_seq, "depth": st.depth, "dropped": st.dropped_total}))
    spool.close()
    sys.exit(0 if ok else 1)
""")


def test_kill_9_of_the_publisher_resumes_from_the_spool_on_disk(mosquitto_broker, tmp_path):
    broker = mosquitto_broker
    prefix = f"rwtest/{uuid.uuid4().hex}"
    collector = Collector(broker.host, broker.port, prefix)
    script = tmp_path / "publisher.py"
    script.write_text(_CHILD)
    spool_path, splits_path = tmp_path / "spool.sqlite", tmp_path / "splits.jsonl"

    def launch(start_i: int, n: int, log_name: str) -> subprocess.Popen:
        log = open(tmp_path / log_name, "wb")
        return subprocess.Popen([sys.executable, str(script), str(spool_path), broker.host, str(broker.port),
                                 prefix, str(start_i), str(n), "100", str(splits_path)],
                                stdout=log, stderr=subprocess.STDOUT, stdin=subprocess.DEVNULL)

    first = second = None
    try:
        first = launch(0, 1000, "first.log")
        # wait (bounded) until the first publisher has appended a few hundred records, then kill -9
        deadline = time.monotonic() + 20
        while len(set(collector.received())) < 250 and time.monotonic() < deadline and first.poll() is None:
            time.sleep(0.02)
        assert first.poll() is None, (tmp_path / "first.log").read_text()
        first.send_signal(signal.SIGKILL)
        assert first.wait(timeout=10) == -signal.SIGKILL
        before_kill = set(collector.received())
        received_before = len(before_kill)
        second = launch(1000, 200, "second.log")
        rc = second.wait(timeout=45)
        out = (tmp_path / "second.log").read_text()
        assert rc == 0, out
        summary = json.loads(out.strip().splitlines()[-1])
        expected = set(range(1, summary["last_seq"] + 1))
        missing = collector.wait_for_all(expected, 15.0)
    finally:
        for proc in (first, second):
            if proc is not None and proc.poll() is None:
                proc.kill()
                proc.wait(timeout=10)
        collector.close()
    with Spool(spool_path) as spool:  # the file the two processes shared, read back
        st = spool.stats()
    arrivals = collector.received()
    splits = [json.loads(line) for line in splits_path.read_text().split()]
    print(f"\n[kill -9] first publisher killed after {received_before} distinct records arrived; "
          f"{summary['last_seq']} appended in total; received {len(arrivals)} messages, loss {len(missing)}, "
          f"duplicates {_duplicates(arrivals)}; lane splits {splits}")
    assert not missing, f"lost {len(missing)} records, e.g. {sorted(missing)[:10]}"
    # the second process continued the sequence (its 200 records come after everything seen before)
    assert summary["last_seq"] >= max(before_kill) + 200
    assert st.depth == 0 and st.dropped_total == 0
    assert len(splits) >= 2
    _check_order_per_lane(arrivals, splits)


@pytest.mark.parametrize("window", [20, 100])
def test_backlog_drain_figures(tmp_path, window):
    """How fast a backlog drains with no rate bound (figures printed; completeness asserted).

    A private broker: mosquitto keeps at most ``max_queued_messages`` (default 1000) QoS 1 messages
    queued per subscriber and drops the rest with "Outgoing messages are being dropped" when the
    subscriber falls behind (seen here with the default). That is the broker's bound, not the
    spool's; this broker is configured to queue the whole run so the subscriber check is complete.
    """
    broker = MosquittoBroker(workdir=tmp_path / "broker")
    with open(broker.config_path, "a") as conf:
        conf.write("max_queued_messages 20000\n")
    broker.start()
    prefix = f"rwtest/{uuid.uuid4().hex}"
    n = 5000
    # fill fast (no fsync per append), then drain with the default power-loss durability
    with Spool(tmp_path / "spool.sqlite", max_bytes=1 << 30, max_records=1_000_000,
               durability="process_crash") as fill:
        for i in range(n):
            kind = KIND_CYCLE[i % len(KIND_CYCLE)]
            fill.append(kind, _topic(prefix, kind), {"i": i, "overall_mm_s": 2.31, "zone": "B"},
                        retain=(kind == "state"))
    try:
        collector = Collector(broker.host, broker.port, prefix)
    except BaseException:
        broker.stop()
        raise
    spool = Spool(tmp_path / "spool.sqlite", max_bytes=1 << 30, max_records=1_000_000)
    client = _publisher_client(broker.host, broker.port, f"edge-{prefix[-8:]}")
    outbox = Outbox(client, spool=spool, in_flight_window=window, backlog_rate_per_s=1e9, live_reserve=0)
    outbox.install()
    try:
        client.connect(broker.host, broker.port, keepalive=10)
        t0 = time.monotonic()
        client.loop_start()
        outbox.start()
        assert outbox.wait_drained(40.0), f"not drained: {spool.stats()}"
        drain_s = time.monotonic() - t0
        missing = collector.wait_for_all(set(range(1, n + 1)), 15.0)
    finally:
        outbox.stop()
        client.disconnect()
        client.loop_stop()
        collector.close()
        spool.close()
        broker.stop()
    arrivals = collector.received()
    print(f"\n[drain] window {window}: {n} records acknowledged in {drain_s:.2f} s = {n / drain_s:.0f} records/s; "
          f"loss {len(missing)}, duplicates {_duplicates(arrivals)}")
    assert not missing
    assert arrivals == sorted(arrivals)  # one lane, one connection: exactly seq order


def test_records_kept_in_memory_are_written_only_when_unsent_and_none_is_lost(make_mosquitto_broker, tmp_path):
    """The default (``storage.spool.write = "unsent"``): records published through the outbox wait in
    memory while the broker acknowledges, so the spool file is not written; a broker outage puts the
    unacknowledged ones into the spool (one transaction when the link drops, then one per hold) and they
    arrive after the reconnect, none lost, in order per lane; then the spool is empty again."""
    broker = make_mosquitto_broker()
    prefix = f"rwtest/{uuid.uuid4().hex}"
    collector = Collector(broker.host, broker.port, prefix)
    spool = Spool(tmp_path / "spool.sqlite", max_bytes=1 << 30, max_records=1_000_000)
    client = _publisher_client(broker.host, broker.port, f"edge-{prefix[-8:]}")
    outbox = Outbox(client, spool=spool, in_flight_window=20, backlog_rate_per_s=200.0,
                    spool_write="unsent", memory_hold_s=1.0)
    outbox.install()
    client.connect_async(broker.host, broker.port, keepalive=3)
    client.loop_start()
    outbox.start()
    n_records, rate_per_s, fig = 700, 50.0, {}
    try:
        deadline = time.monotonic() + 10
        while not outbox.stats().connected and time.monotonic() < deadline:
            time.sleep(0.02)
        t0 = time.monotonic()
        for i in range(n_records):
            kind = KIND_CYCLE[i % len(KIND_CYCLE)]
            assert outbox.publish_record(kind, _topic(prefix, kind), {"i": i}, retain=(kind == "state"))
            if i == 200:
                fig["connected"] = outbox.stats()
                broker.stop()
            if i == 450:
                fig["outage"] = outbox.stats()
                fig["spool_at_return"] = spool.stats().depth
                broker.start()
            delay = t0 + (i + 1) / rate_per_s - time.monotonic()
            if delay > 0:
                time.sleep(delay)
        assert outbox.wait_drained(30.0), f"not drained: {spool.stats()} {outbox.stats()}"
        expected = set(range(1, spool.last_seq + 1))
        missing = collector.wait_for_all(expected, 20.0)
    finally:
        _shut_down(broker, outbox, client, collector)
    st, fs = spool.stats(), outbox.stats()
    spool.close()
    arrivals = collector.received()
    print(f"\n[unsent] {spool.last_seq} records; before the outage: {fig['connected'].spilled} written to the "
          f"spool; during it: {fig['outage'].spilled} in {fig['outage'].spills} transactions "
          f"({fig['spool_at_return']} waiting at the return); in all {fs.spilled} in {fs.spills}; "
          f"received {len(arrivals)} messages, loss {len(missing)}, duplicates {_duplicates(arrivals)}")
    assert spool.last_seq == n_records
    assert not missing, f"lost {len(missing)} records, e.g. {sorted(missing)[:10]}"
    assert fig["connected"].spilled == 0  # connected and acknowledging: nothing written
    assert fig["spool_at_return"] > 0 and fig["outage"].spills < fig["outage"].spilled  # batched
    assert st.depth == 0 and st.dropped_total == 0 and fs.unsent == 0
    _check_order_per_lane(arrivals, [sp.backlog_through_seq for sp in outbox.lane_splits])
