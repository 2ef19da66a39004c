"""``rotorwatch run`` as a subprocess on simulated input, publishing to a real mosquitto broker and
serving /metrics that real promtool checks. Every wait is bounded; the daemon is stopped by its PID.

The demo machine (config/demo-fan.toml) runs on a sped-up scenario of our own making in which an
outer-race defect steps in early (daemon_support.fast_fault_scenario), so an alarm comes within a few
updates. What the daemon publishes is checked against the MQTT topic tree in deploy/mqtt-topics.md.
"""

from __future__ import annotations

import json
import signal
import time
import uuid
from pathlib import Path

import pytest

from components import MqttListener, wait_until

from .daemon_support import (
    DaemonProcess,
    as_json,
    daemon_config,
    fast_fault_scenario,
    json_pred,
    messages,
    wait_message,
    write_setup,
)

pytestmark = pytest.mark.integration

AGENT = "halden-ef3"  # site.agent_id of the demo configuration


def unique_prefix() -> str:
    return f"rwtest-{uuid.uuid4().hex[:8]}"


@pytest.fixture
def daemons():
    started: list[DaemonProcess] = []
    yield started
    for d in started:
        d.stop()


def start(daemons, tmp_path, broker, *, scenario=None, extra=(), env=None, prefix=None, **cfg_kw):
    prefix = prefix or unique_prefix()
    path = write_setup(tmp_path, daemon_config(broker, prefix=prefix, **cfg_kw), scenario)
    d = DaemonProcess(path, *extra, env=env)
    daemons.append(d)
    return d, f"{prefix}/{AGENT}"


def test_states_events_metrics_and_clean_stop(mosquitto_broker, promtool, tmp_path, daemons):
    prefix = unique_prefix()
    listener = MqttListener(mosquitto_broker, topics=[f"{prefix}/#"]).connect()
    try:
        t0 = time.monotonic()
        d, root = start(daemons, tmp_path, mosquitto_broker, prefix=prefix)
        online = wait_message(listener, f"{root}/availability", lambda m: m.payload == b"online", 20)
        assert online is not None, d.describe()
        print(f"\navailability online {time.monotonic() - t0:.2f} s after start")

        mstate = wait_message(listener, f"{root}/machine/ef3/state", timeout_s=30)
        assert mstate is not None, d.describe()
        body = as_json(mstate)
        assert body["machine"] == "ef3" and body["state"] in ("learning", "alarm", "warning", "normal")
        assert body["rpm"] == pytest.approx(1482.0, rel=0.05)
        assert "not a protection or trip system" in body["notice"]

        pstate = wait_message(listener, f"{root}/machine/ef3/point/de-h/state", timeout_s=10)
        p = as_json(pstate)
        assert p["overall"]["iso_zone"] in ("A", "B", "C", "D")
        assert p["overall"]["velocity_mm_s"] > 0
        assert p["values"]["de-outer-race"]["unit"] == "m/s^2"
        assert p["values"]["overall"]["warning_level"] == 2.8  # the demo's absolute level, mm/s

        metrics_msg = wait_message(listener, f"{root}/machine/ef3/point/de-h/metrics", timeout_s=10)
        assert metrics_msg is not None and not metrics_msg.retain
        assert as_json(metrics_msg)["waveform"]["rms_m_s2"] > 0

        alarm = wait_message(listener, f"{root}/events",
                             json_pred(value_name="de-outer-race", new_state="alarm"), timeout_s=40)
        assert alarm is not None, d.describe()
        print(f"outer-race alarm event {time.monotonic() - t0:.2f} s after start")
        ev = as_json(alarm)
        assert ev["point"] == "de-h" and ev["level"] == 2.0 and ev["level_kind"] == "alarm"
        assert wait_message(listener, f"{root}/events", json_pred(value_name="machine", new_state="alarm"), 10)

        text = d.scrape()
        rc, findings = promtool.check_metrics(text)
        assert rc == 0, findings
        assert 'rotorwatch_overall_velocity_meters_per_second{agent="halden-ef3",machine="ef3",point="de-h"}' in text
        assert 'rotorwatch_machine_state{agent="halden-ef3",machine="ef3",state="alarm"} 1.0' in text

        # a late subscriber gets the retained copies
        late = MqttListener(mosquitto_broker, topics=[f"{root}/#"]).connect()
        try:
            kept = wait_message(late, f"{root}/machine/ef3/point/nde-h/state", timeout_s=5)
            assert kept is not None and kept.retain
            assert wait_message(late, f"{root}/availability", timeout_s=5).payload == b"online"
        finally:
            late.close()

        t_stop = time.monotonic()
        d.signal(signal.SIGTERM)
        rc = d.wait(15)
        assert rc == 0, d.describe()
        print(f"SIGTERM -> exit 0 in {time.monotonic() - t_stop:.2f} s")
        assert "rotorwatch stopped" in d.log()
    finally:
        listener.close()
    after = MqttListener(mosquitto_broker, topics=[f"{root}/availability"]).connect()
    try:
        last = wait_message(after, f"{root}/availability", timeout_s=5)
        assert last is not None and last.payload == b"offline" and last.retain
    finally:
        after.close()
    assert "Traceback" not in d.log()
    # evidence on disk: the alarm transition took a snapshot, and every update went into the trends
    assert list((tmp_path / "state" / "snapshots").glob("*-ef3-transition/snapshot.json"))
    from rotorwatch.storage.trends import TrendStore

    with TrendStore(tmp_path / "state" / "trends.sqlite", read_only=True) as trends:
        rows = trends.query(machine="ef3", point="de-h", value="de-outer-race")
    assert rows and max(r.value for r in rows if r.value is not None) > 2.0  # above the alarm level


def test_kill9_leaves_the_last_will(mosquitto_broker, tmp_path, daemons):
    d, root = start(daemons, tmp_path, mosquitto_broker)
    listener = MqttListener(mosquitto_broker, topics=[f"{root}/availability"]).connect()
    try:
        assert wait_message(listener, f"{root}/availability", lambda m: m.payload == b"online", 20), d.describe()
        t_kill = time.monotonic()
        d.signal(signal.SIGKILL)
        d.wait(5)
        will = wait_message(listener, f"{root}/availability", lambda m: m.payload == b"offline", 10)
        assert will is not None, "the broker did not publish the last will"
        print(f"\nlast will 'offline' {1000 * (time.monotonic() - t_kill):.0f} ms after SIGKILL")
    finally:
        listener.close()


def test_sighup_with_a_broken_config_keeps_running(mosquitto_broker, tmp_path, daemons):
    d, root = start(daemons, tmp_path, mosquitto_broker)
    listener = MqttListener(mosquitto_broker, topics=[f"{root}/#"]).connect()
    try:
        assert wait_message(listener, f"{root}/machine/ef3/state", timeout_s=30), d.describe()
        good = d.config_path.read_text()
        d.config_path.write_text(good.replace("update_interval_s = 0.5", "update_interval_s = -3"))
        d.signal(signal.SIGHUP)
        assert d.wait_log(r"reload rejected", 10), d.describe()
        error_lines = [ln for ln in d.log().splitlines() if ln.startswith("ERROR")]
        assert len(error_lines) == 1, error_lines
        assert "acquisition.update_interval_s = -3" in error_lines[0]
        assert d.alive()
        rejected = wait_message(listener, f"{root}/events", json_pred(kind="reload_rejected"), 5)
        assert rejected is not None
        # still analysing and publishing on the old configuration
        n = len(messages(listener, f"{root}/machine/ef3/point/de-h/state"))
        assert wait_until(lambda: len(messages(listener, f"{root}/machine/ef3/point/de-h/state")) > n, 15)
        # a valid change is applied
        d.config_path.write_text(good.replace("metrics_interval_s = 1.0", "metrics_interval_s = 2.0"))
        n_online = len(messages(listener, f"{root}/availability", lambda m: m.payload == b"online"))
        d.signal(signal.SIGHUP)
        assert d.wait_log(r"configuration reloaded \(changed: mqtt\)", 10), d.describe()
        # the MQTT settings changed, so the link was renewed: offline, then online again
        assert wait_until(lambda: len(messages(listener, f"{root}/availability",
                                               lambda m: m.payload == b"online")) > n_online, 10)
        assert d.alive()
        # an acquisition change reopens the source, and analysis goes on with the new interval
        d.config_path.write_text(good.replace("update_interval_s = 0.5", "update_interval_s = 0.6"))
        d.signal(signal.SIGHUP)
        assert d.wait_log(r"configuration reloaded \(changed: acquisition, mqtt\)", 10), d.describe()
        assert wait_until(lambda: d.log().count("source started") == 2, 10), d.describe()
        n = len(messages(listener, f"{root}/machine/ef3/point/de-h/state"))
        assert wait_until(lambda: len(messages(listener, f"{root}/machine/ef3/point/de-h/state")) > n, 20), d.describe()
        assert d.alive()
    finally:
        listener.close()
    assert d.stop() == 0


def test_malformed_commands_are_rejected_and_the_daemon_carries_on(mosquitto_broker, tmp_path, daemons):
    d, root = start(daemons, tmp_path, mosquitto_broker)
    listener = MqttListener(mosquitto_broker, topics=[f"{root}/#"]).connect()
    try:
        assert wait_message(listener, f"{root}/machine/ef3/state", timeout_s=30), d.describe()
        bad = [
            (b"this is not json", None, "not JSON"),
            (b"[1,2,3]", None, "JSON object"),
            (json.dumps({"command": "self-destruct", "id": "c2"}).encode(), "c2", "unknown command"),
            (json.dumps({"command": "acknowledge", "machine": "nope", "id": 3}).encode(), 3, "unknown machine"),
            (json.dumps({"command": "snapshot", "extra": 1, "id": "c4"}).encode(), "c4", "unknown key"),
            (b"\xff\xfe\x00", None, "UTF-8"),
        ]
        for payload, _, _ in bad:
            listener.client.publish(f"{root}/command", payload, qos=1)
        got = wait_until(lambda: len(messages(listener, f"{root}/command/result")) >= len(bad), 15)
        assert got, d.describe()
        results = [as_json(m) for m in messages(listener, f"{root}/command/result")]
        for (_, rid, words), res in zip(bad, results):
            assert res["ok"] is False
            assert words in res["message"], res
            assert res["id"] == rid
        rejected = wait_until(lambda: len(messages(listener, f"{root}/events", json_pred(kind="command_rejected"))) >= len(bad), 5)
        assert rejected
        assert d.alive()
        # and a good command still works: a snapshot lands in the state folder
        listener.client.publish(f"{root}/command", json.dumps({"command": "snapshot", "machine": "ef3", "id": "s1"}), qos=1)
        res = wait_message(listener, f"{root}/command/result", json_pred(id="s1"), 10)
        assert res is not None and as_json(res)["ok"], res and as_json(res)
        body = as_json(res)
        folder = Path(body["paths"][0])
        folder = folder if folder.is_absolute() else tmp_path / folder
        sidecar = json.loads((folder / "snapshot.json").read_text())
        assert sidecar["machine"] == "ef3" and sidecar["reason"] == "command"
        import soundfile

        wave, fs = soundfile.read(folder / "de-h.wav", dtype="float32")
        assert fs == 51200 and wave.shape == (51200,)  # window_s 1.0 at 51200 Hz, in m/s^2
        # and relearn: the point's baselines are learned again
        listener.client.publish(f"{root}/command", json.dumps(
            {"command": "relearn", "machine": "ef3", "point": "de-h", "id": "r1"}), qos=1)
        res = wait_message(listener, f"{root}/command/result", json_pred(id="r1"), 10)
        assert res is not None and as_json(res)["ok"], res and as_json(res)
        assert "de-h/overall" in as_json(res)["reset"] and not [k for k in as_json(res)["reset"] if k.startswith("nde-h/")]
    finally:
        listener.close()
    assert d.stop() == 0
    assert "Traceback" not in d.log()


def test_acknowledge_clears_a_latched_alarm(mosquitto_broker, tmp_path, daemons):
    # the defect steps in at day 0.02 and out at day 0.05: the latched alarm outlives it
    d, root = start(daemons, tmp_path, mosquitto_broker, speedup=2000.0,
                    scenario=fast_fault_scenario(appear_day=0.02, gone_day=0.05))
    listener = MqttListener(mosquitto_broker, topics=[f"{root}/#"]).connect()
    try:
        topic = f"{root}/machine/ef3/point/de-h/state"
        assert wait_message(listener, f"{root}/events", json_pred(value_name="de-outer-race", new_state="alarm"), 40), d.describe()

        def latched(m):
            v = as_json(m)["values"]["de-outer-race"]
            return v["latched"] and v["value"] < 1.0

        held = wait_message(listener, topic, latched, 40)
        assert held is not None, d.describe()
        assert as_json(held)["state"] == "alarm"  # held by the latch after the value dropped

        listener.client.publish(f"{root}/command", json.dumps(
            {"command": "acknowledge", "machine": "ef3", "point": "de-h", "value": "de-outer-race", "id": "ack-1"}), qos=1)
        res = wait_message(listener, f"{root}/command/result", json_pred(id="ack-1"), 10)
        assert res is not None
        body = as_json(res)
        assert body["ok"] and body["cleared"] == ["de-h/de-outer-race"], body
        cleared = wait_message(listener, f"{root}/events",
                               json_pred(value_name="de-outer-race", old_state="alarm"), 10)
        assert cleared is not None and as_json(cleared)["new_state"] in ("learning", "normal")
        # the next point state no longer holds the latch
        seen = len(listener.messages)
        after = wait_until(lambda: [m for m in list(listener.messages)[seen:] if m.topic == topic
                                    and not as_json(m)["values"]["de-outer-race"]["latched"]], 15)
        assert after, d.describe()
    finally:
        listener.close()
    assert d.stop() == 0
