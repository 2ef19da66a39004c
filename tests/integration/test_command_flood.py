"""A flood of snapshot commands against the running daemon and a real mosquitto (issue 15, item 2).

4,714 ``snapshot`` commands are published in 10 s to the command topic (the flood the issue measured)
while the demo fan, with an outer-race defect stepping in, goes into warning and alarm; the snapshot
quota is at its minimum (1 MiB). Checked:

- every transition snapshot the daemon saved is still in the store at the end (the flood cannot push
  transition evidence out), and there was at least one;
- every command is answered (a ``command/result`` with its id) or counted in a ``commands_dropped``
  agent event: replies + counted drops = 4,714, and no id is answered twice;
- the refused ones carry the store's reason (the on-request limit), not "see the log".

Counts are printed. Every wait is bounded; processes are stopped by their PIDs.
"""

from __future__ import annotations

import json
import re
import threading
import time
import uuid

import paho.mqtt.client as mqtt
import pytest

from components import MosquittoBroker, wait_until

from .daemon_support import DaemonProcess, daemon_config, fast_fault_scenario, write_setup

pytestmark = pytest.mark.integration

N_COMMANDS = 4714
FLOOD_S = 10.0


class Tally:
    """Replies by id and commands_dropped counts, from a QoS 1 subscriber."""

    def __init__(self, broker: MosquittoBroker, root: str) -> None:
        self.root = root
        self.lock = threading.Lock()
        self.replies: dict[str, list[dict]] = {}
        self.dropped_events: list[dict] = []
        self.client = mqtt.Client(mqtt.CallbackAPIVersion.VERSION2, client_id=f"tally-{uuid.uuid4().hex[:8]}")
        self.client.on_connect = lambda c, u, f, rc, p: c.subscribe(
            [(f"{root}/command/result", 1), (f"{root}/events", 1)])
        self.client.on_message = self._on_message
        self.client.connect(broker.host, broker.port, keepalive=30)
        self.client.loop_start()

    def _on_message(self, client, userdata, msg) -> None:
        try:
            body = json.loads(msg.payload)
        except ValueError:
            return
        with self.lock:
            if msg.topic.endswith("/command/result"):
                self.replies.setdefault(str(body.get("id")), []).append(body)
            elif body.get("kind") == "commands_dropped":
                self.dropped_events.append(body)

    def counts(self) -> tuple[int, int]:
        with self.lock:
            answered = sum(1 for k in self.replies if k.startswith("f-"))
            return answered, sum(int(e["dropped"]) for e in self.dropped_events)

    def close(self) -> None:
        self.client.loop_stop()
        self.client.disconnect()


def test_a_flood_of_snapshot_commands_is_answered_or_counted_and_keeps_transition_evidence(tmp_path):
    broker = MosquittoBroker(workdir=tmp_path / "broker")
    with open(broker.config_path, "a") as conf:  # the tally must not lose replies in the broker's queue
        conf.write("max_queued_messages 100000\n")
    broker.start()
    prefix = f"rwflood-{uuid.uuid4().hex[:8]}"
    # 25.6 kHz (the envelope band, 2-7 kHz, stays below Nyquist): a snapshot of ~300 kB, so the warning's
    # and the alarm's evidence fit the minimum quota together
    cfg = daemon_config(broker, prefix=prefix, speedup=1.0, update_interval_s=0.5,
                        acquisition={"sample_rate_hz": 25600})
    cfg["storage"]["snapshots"] = {"quota_bytes": 1024 * 1024, "min_interval_s": 0.0}
    d = DaemonProcess(write_setup(tmp_path, cfg, fast_fault_scenario(appear_day=0.0001)))
    root = f"{prefix}/{cfg['site']['agent_id']}"
    tally = Tally(broker, root)
    flood = mqtt.Client(mqtt.CallbackAPIVersion.VERSION2, client_id=f"flood-{uuid.uuid4().hex[:8]}")
    flood.max_queued_messages_set(0)
    flood.max_inflight_messages_set(200)
    try:
        assert d.wait_log(r"first update done", 60), d.describe()
        flood.connect(broker.host, broker.port, keepalive=30)
        flood.loop_start()
        machine = cfg["machines"][0]["id"]
        t0 = time.monotonic()
        for i in range(N_COMMANDS):
            flood.publish(f"{root}/command", json.dumps({"command": "snapshot", "machine": machine, "id": f"f-{i}"}),
                          qos=1)
            delay = t0 + (i + 1) * FLOOD_S / N_COMMANDS - time.monotonic()
            if delay > 0:
                time.sleep(delay)
        flood_s = time.monotonic() - t0
        # the fault has stepped in (8.6 s after the start): wait for its alarm evidence, then stop cleanly
        assert d.wait_log(r"snapshot saved id=\S+ reason=transition", 30), d.describe()
        wait_until(lambda: tally.counts()[0] + tally.counts()[1] >= N_COMMANDS, 30)
        assert d.stop() == 0, d.describe()  # the stop reports what was dropped since the last event
        wait_until(lambda: sum(tally.counts()) >= N_COMMANDS, 10)
        answered, dropped = tally.counts()
        log = d.log()
    finally:
        flood.loop_stop()
        flood.disconnect()
        tally.close()
        if d.alive():
            d.stop()
        broker.stop()
    snapshots = tmp_path / "state" / "snapshots"
    kept = {p.name: json.loads((p / "snapshot.json").read_text()) for p in snapshots.iterdir()
            if p.is_dir() and not p.name.startswith(".")}
    kept_transition = sorted(k for k, v in kept.items() if v["reason"] == "transition")
    saved_transition = sorted(set(re.findall(r"snapshot saved id=(\S+) reason=transition", log)))
    by_id = tally.replies
    ok = sum(1 for k, v in by_id.items() if k.startswith("f-") and v[0]["ok"])
    refused = [v[0]["message"] for k, v in by_id.items() if k.startswith("f-") and not v[0]["ok"]]
    twice = [k for k, v in by_id.items() if len(v) > 1]
    print(f"\n[command flood] {N_COMMANDS} snapshot commands in {flood_s:.1f} s: {answered} answered "
          f"({ok} saved, {len(refused)} refused), {dropped} dropped and counted in "
          f"{len(tally.dropped_events)} commands_dropped event(s); answered or counted "
          f"{answered + dropped}; transition snapshots saved {len(saved_transition)}, kept {len(kept_transition)}; "
          f"snapshots kept {len(kept)} ({sum(1 for v in kept.values() if v['reason'] == 'command')} on request)")
    assert answered + dropped == N_COMMANDS, (answered, dropped)
    assert not twice, twice[:5]
    assert saved_transition and saved_transition == kept_transition
    assert refused and all("refused" in m or "does not fit" in m for m in refused), refused[:3]
    assert "Traceback" not in log
