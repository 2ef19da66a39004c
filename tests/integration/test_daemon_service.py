"""The daemon as a service: TLS + password broker, a wrong password, a missing broker, a stalled
input that comes back, sd_notify over a real unix socket, a real Prometheus scraping /metrics, and
start-up errors. ``rotorwatch run`` runs as a subprocess; every wait is bounded.
"""

from __future__ import annotations

import http.client
import json
import signal
import socket
import threading
import time
import uuid

import numpy as np
import pytest

from components import MosquittoBroker, MqttListener, free_port, wait_until

from .daemon_support import (
    ROTORWATCH,
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

AGENT = "halden-ef3"


@pytest.fixture
def daemons():
    started: list[DaemonProcess] = []
    yield started
    for d in started:
        d.stop()


def prefix() -> str:
    return f"rwsvc-{uuid.uuid4().hex[:8]}"


def counter(text: str, name: str) -> float:
    for line in text.splitlines():
        if line.startswith(name + "{") or line.startswith(name + " "):
            return float(line.rsplit(" ", 1)[1])
    raise AssertionError(f"{name} not exposed")


# --------------------------------------------------------------------------------------- TLS + auth
def test_tls_broker_with_password_file(mosquitto_tls_broker, tmp_path, daemons):
    b = mosquitto_tls_broker
    (tmp_path / "mqtt-password").write_text(b.password + "\n")
    p = prefix()
    cfg = daemon_config(b, prefix=p, mqtt={"host": "localhost", "tls": True, "ca_file": str(b.ca_path),
                                            "username": b.username, "password_file": "mqtt-password"})
    d = DaemonProcess(write_setup(tmp_path, cfg))
    daemons.append(d)
    root = f"{p}/{AGENT}"
    with MqttListener(b, topics=[f"{root}/#"]) as listener:
        assert wait_message(listener, f"{root}/availability", lambda m: m.payload == b"online", 20), d.describe()
        assert wait_message(listener, f"{root}/machine/ef3/point/de-h/state", timeout_s=30), d.describe()
    assert b.password not in d.log()  # the secret never reaches the log
    assert d.stop() == 0


def test_wrong_password_is_reported_once_and_the_daemon_keeps_running(mosquitto_tls_broker, tmp_path, daemons):
    b = mosquitto_tls_broker
    (tmp_path / "mqtt-password").write_text("not-the-password\n")
    cfg = daemon_config(b, prefix=prefix(), mqtt={"host": "localhost", "tls": True, "ca_file": str(b.ca_path),
                                                  "username": b.username, "password_file": "mqtt-password",
                                                  "reconnect_min_s": 0.5, "reconnect_max_s": 1.0})
    d = DaemonProcess(write_setup(tmp_path, cfg))
    daemons.append(d)
    assert d.wait_log(r"ERROR publishers\.mqtt\.link mqtt broker refused the connection: Not authorized", 20), d.describe()
    # retries go on with back-off, quietly: the count grows in the metrics, not in the log
    assert wait_until(lambda: counter(d.scrape(), "rotorwatch_mqtt_connect_failures_total") >= 3, 15), d.describe()
    refused = [ln for ln in d.log().splitlines() if "refused the connection" in ln]
    assert len(refused) == 1, refused
    assert "not-the-password" not in d.log()
    # analysis carries on without the broker
    assert wait_until(lambda: counter(d.scrape(), "rotorwatch_updates_total") >= 1, 20), d.describe()
    assert d.alive()
    assert d.stop() == 0
    assert "Traceback" not in d.log()


def test_missing_broker_never_blocks_start_and_is_joined_later(tmp_path, daemons):
    port = free_port()
    broker = MosquittoBroker(workdir=tmp_path / "late-broker", port=port)  # not started yet
    p = prefix()
    d = DaemonProcess(write_setup(tmp_path, daemon_config(broker, prefix=p)))
    daemons.append(d)
    try:
        assert wait_until(lambda: counter(d.scrape(), "rotorwatch_updates_total") >= 1, 30), d.describe()
        assert d.wait_log(r"mqtt broker not reachable", 5)
        broker.start()
        root = f"{p}/{AGENT}"
        with MqttListener(broker, topics=[f"{root}/#"]) as listener:
            assert wait_message(listener, f"{root}/availability", lambda m: m.payload == b"online", 20), d.describe()
            assert wait_message(listener, f"{root}/machine/ef3/state", timeout_s=20), d.describe()
        assert d.stop() == 0
    finally:
        broker.stop()


# --------------------------------------------------------------------------------------- stalled input
class FrameServer:
    """A TCP server streaming float32 frames at real-time pace (a DAQ bridge); pausable."""

    def __init__(self, fs_hz: float, channels: int):
        self.fs_hz, self.channels = fs_hz, channels
        self.sock = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
        self.sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        self.sock.bind(("127.0.0.1", 0))
        self.sock.listen(4)
        self.sock.settimeout(0.2)
        self.port = self.sock.getsockname()[1]
        self.sending = threading.Event()
        self.sending.set()
        self._stop = threading.Event()
        self.connections = 0
        self._thread = threading.Thread(target=self._run, daemon=True)
        self._thread.start()

    def _run(self) -> None:
        chunk = 2048
        t = np.arange(chunk) / self.fs_hz
        k = 0
        while not self._stop.is_set():
            try:
                conn, _ = self.sock.accept()
            except TimeoutError:
                continue
            self.connections += 1
            t_next = time.monotonic()
            with conn:
                while not self._stop.is_set():
                    if not self.sending.is_set():
                        time.sleep(0.02)
                        t_next = time.monotonic()
                        continue
                    # 24.7 Hz (1482 r/min) at 10 mV plus broadband noise, volts at the input
                    x = 0.01 * np.sin(2 * np.pi * 24.7 * (t + k * chunk / self.fs_hz))
                    rng = np.random.default_rng(k)
                    frames = np.stack([x + 0.003 * rng.standard_normal(chunk) for _ in range(self.channels)], axis=1)
                    try:
                        conn.sendall(frames.astype("<f4").tobytes())
                    except OSError:
                        break
                    k += 1
                    t_next += chunk / self.fs_hz
                    time.sleep(max(0.0, t_next - time.monotonic()))

    def close(self) -> None:
        self._stop.set()
        self._thread.join(5)
        self.sock.close()


def test_stalled_input_reports_sensor_fault_and_recovers(mosquitto_broker, tmp_path, daemons):
    server = FrameServer(51200.0, 2)
    p = prefix()
    root = f"{p}/{AGENT}"
    cfg = daemon_config(mosquitto_broker, prefix=p, speedup=1.0, update_interval_s=0.5,
                        acquisition={"source": "stdin", "device": f"tcp:127.0.0.1:{server.port}", "speedup": 1.0})
    del cfg["acquisition"]["scenario"]
    try:
        with MqttListener(mosquitto_broker, topics=[f"{root}/#"]) as listener:
            d = DaemonProcess(write_setup(tmp_path, cfg))
            daemons.append(d)
            topic = f"{root}/machine/ef3/point/de-h/state"
            assert wait_message(listener, topic, lambda m: as_json(m)["overall"]["velocity_mm_s"], 30), d.describe()
            server.sending.clear()  # the sensor goes quiet; the connection stays open
            t0 = time.monotonic()
            stalled = wait_message(listener, topic, lambda m: as_json(m)["sensor"]["fault"] == "stalled", 15)
            assert stalled is not None, d.describe()
            print(f"\nstall reported {time.monotonic() - t0:.2f} s after the input went quiet")
            assert as_json(stalled)["state"] == "sensor_fault"
            assert wait_message(listener, f"{root}/events", json_pred(point="de-h", new_state="sensor_fault"), 5)
            assert counter(d.scrape(), "rotorwatch_source_stalls_total") >= 1
            assert d.alive()
            n = len(listener.messages)
            server.sending.set()
            back = wait_until(lambda: [m for m in list(listener.messages)[n:] if m.topic == topic
                                       and as_json(m)["sensor"]["ok"] and as_json(m)["overall"]["velocity_mm_s"]], 30)
            assert back, d.describe()
            assert server.connections >= 2  # the daemon reopened the source
            assert d.stop() == 0
    finally:
        server.close()


# --------------------------------------------------------------------------------------- sd_notify
def test_sd_notify_ready_watchdog_stopping(mosquitto_broker, tmp_path, daemons):
    sock_path = str(tmp_path / "notify.sock")
    sock = socket.socket(socket.AF_UNIX, socket.SOCK_DGRAM)
    sock.bind(sock_path)
    sock.settimeout(0.5)
    got: list[str] = []
    try:
        cfg = daemon_config(mosquitto_broker, prefix=prefix())
        d = DaemonProcess(write_setup(tmp_path, cfg), env={"NOTIFY_SOCKET": sock_path, "WATCHDOG_USEC": "2000000"})
        daemons.append(d)

        def collect_until(pred, timeout_s):
            deadline = time.monotonic() + timeout_s
            while time.monotonic() < deadline:
                try:
                    got.append(sock.recv(4096).decode())
                except TimeoutError:
                    pass
                if pred():
                    return True
            return False

        assert collect_until(lambda: any(m.startswith("READY=1") for m in got), 30), (got, d.describe())
        assert collect_until(lambda: got.count("WATCHDOG=1") >= 2, 5), got
        first_ready = next(m for m in got if m.startswith("READY=1"))
        assert "STATUS=" in first_ready and "ef3" in first_ready
        d.signal(signal.SIGTERM)
        assert collect_until(lambda: "STOPPING=1" in got, 10), got
        assert d.wait(15) == 0
    finally:
        sock.close()


# --------------------------------------------------------------------------------------- Prometheus
def test_real_prometheus_scrapes_the_daemon(tmp_path, daemons, prometheus_server):
    d = DaemonProcess(write_setup(tmp_path, daemon_config(None, prefix=prefix())))
    daemons.append(d)
    port = d.metrics_port()
    prom = prometheus_server([f"127.0.0.1:{port}"], job="rotorwatch", scrape_interval_s=1.0)
    # Prometheus needs about 5-6 s for its first scrape (service discovery throttle; recipes §3)
    up = prom.wait_for('up{job="rotorwatch"} == 1', timeout_s=20)
    assert up, prom.targets()
    result = prom.wait_for('rotorwatch_overall_velocity_meters_per_second{machine="ef3",point="de-h"}', timeout_s=20)
    assert result, d.describe()
    v = float(result[0]["value"][1])
    assert 1e-4 < v < 5e-2  # m/s: the demo fan runs at about 1 mm/s overall
    zones = prom.query('rotorwatch_iso_zone{machine="ef3",point="de-h"} == 1')
    assert len(zones) == 1 and zones[0]["metric"]["zone"] in "ABCD"
    assert d.stop() == 0


# --------------------------------------------------------------------------------------- start-up errors
def test_bad_config_exits_with_one_line(tmp_path):
    import subprocess

    cfg = daemon_config(None, prefix="x")
    cfg["mqtt"] = {"port": 70000}
    path = write_setup(tmp_path, cfg)
    done = subprocess.run([*ROTORWATCH, "run", "--config", str(path), "--once"], capture_output=True, text=True,
                          timeout=60, cwd=tmp_path)
    assert done.returncode == 2
    lines = done.stderr.strip().splitlines()
    assert lines == [f"rotorwatch: {path}: mqtt.port = 70000: Input should be less than or equal to 65535"], lines


def test_missing_password_file_exits_with_one_line(tmp_path, mosquitto_broker):
    import subprocess

    cfg = daemon_config(mosquitto_broker, prefix="x", mqtt={"username": "u", "password_file": "nope.txt"})
    path = write_setup(tmp_path, cfg)
    done = subprocess.run([*ROTORWATCH, "run", "--config", str(path), "--once"], capture_output=True, text=True,
                          timeout=60, cwd=tmp_path)
    assert done.returncode == 2, done.stderr
    errors = [ln for ln in done.stderr.splitlines() if ln.startswith("rotorwatch:")]
    assert len(errors) == 1 and "mqtt.password_file" in errors[0] and "no such file" in errors[0], done.stderr
    assert "Traceback" not in done.stderr


def test_once_runs_one_update_and_exits_zero(tmp_path):
    import subprocess

    path = write_setup(tmp_path, daemon_config(None, prefix="x", metrics=False))
    done = subprocess.run([*ROTORWATCH, "run", "--config", str(path), "--once", "--log-format", "json"],
                          capture_output=True, text=True, timeout=60, cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    records = [json.loads(ln) for ln in done.stderr.splitlines()]
    assert any(r["message"] == "first update done; ready" for r in records)
    assert records[-1]["message"] == "rotorwatch stopped" and records[-1]["updates"] == 1


# --------------------------------------------------------------------------------------- speed sources
def test_speed_from_the_mqtt_topic_and_its_expiry(mosquitto_broker, tmp_path, daemons):
    p = prefix()
    root = f"{p}/{AGENT}"
    speed_topic = f"{p}/plc/ef3/speed"
    cfg = daemon_config(mosquitto_broker, prefix=p)
    cfg["machines"][0]["speed"] = {"mode": "mqtt", "rpm": 1482, "mqtt_topic": speed_topic, "mqtt_max_age_s": 3.0}
    with MqttListener(mosquitto_broker, topics=[f"{root}/#"]) as listener:
        d = DaemonProcess(write_setup(tmp_path, cfg))
        daemons.append(d)
        topic = f"{root}/machine/ef3/state"
        first = wait_message(listener, topic, timeout_s=30)
        assert first is not None, d.describe()
        assert as_json(first)["rpm_source"] == "nominal" and as_json(first)["rpm"] == 1482.0
        listener.client.publish(speed_topic, json.dumps({"rpm": 1450.5}), qos=1)
        got = wait_message(listener, topic, json_pred(rpm_source="mqtt"), 15)
        assert got is not None, d.describe()
        assert as_json(got)["rpm"] == 1450.5
        listener.client.publish(speed_topic, b"not a speed", qos=1)  # ignored, logged once
        assert d.wait_log(r"ignored speed reading", 10)
        # no fresh reading for mqtt_max_age_s: back to the nominal speed
        n = len(listener.messages)
        back = wait_until(lambda: [m for m in list(listener.messages)[n:] if m.topic == topic
                                   and as_json(m)["rpm_source"] == "nominal"], 20)
        assert back, d.describe()
        assert d.stop() == 0


def test_speed_from_a_tach_channel(mosquitto_broker, tmp_path, daemons):
    p = prefix()
    root = f"{p}/{AGENT}"
    cfg = daemon_config(mosquitto_broker, prefix=p)
    cfg["acquisition"]["channels"] = 3
    cfg["machines"][0]["speed"] = {"mode": "tach", "rpm": 1482, "tach_channel": 2, "pulses_per_rev": 1,
                                   "tach_threshold_v": 0.5}
    scenario = {"scenario": {"name": "test: slower drive", "config": "rotorwatch.toml", "duration_days": 1.0, "seed": 5},
                "healthy": {"speed_rpm": 1320.0, "speed_drift_pct": 0.0}}
    with MqttListener(mosquitto_broker, topics=[f"{root}/#"]) as listener:
        d = DaemonProcess(write_setup(tmp_path, cfg, scenario))
        daemons.append(d)
        got = wait_message(listener, f"{root}/machine/ef3/state", json_pred(rpm_source="tach"), 30)
        assert got is not None, d.describe()
        # the simulated drive runs at 1320 r/min; the nominal 1482 would mean the tach was not read
        assert abs(as_json(got)["rpm"] - 1320.0) < 1.0, as_json(got)
        assert d.stop() == 0


# --------------------------------------------------------------------------------------- status page
def test_status_page_served_by_the_daemon_with_its_actions(tmp_path, daemons):
    import urllib.error
    import urllib.request

    token = "status-page-test-token-0123456789"
    (tmp_path / "status-token").write_text(token + "\n")
    cfg = daemon_config(None, prefix="x", speedup=2000.0)
    cfg["status_page"] = {"bind": "127.0.0.1", "port": 0, "token_file": "status-token"}
    d = DaemonProcess(write_setup(tmp_path, cfg))
    daemons.append(d)
    m = d.wait_log(r"status page listening url=(http://127\.0\.0\.1:\d+/)", 20)
    assert m, d.describe()
    base = m.group(1)

    def get(path):
        with urllib.request.urlopen(base + path, timeout=5) as r:
            return json.loads(r.read())

    assert wait_until(lambda: get("api/overview")["machines"][0]["state"] != "no_data", 30), d.describe()
    view = get("api/overview")
    assert view["machines"][0]["id"] == "ef3" and set(view["actions"]) == {"acknowledge", "snapshot"}
    assert get("healthz")["status"] == "ok"

    def post(path, auth):
        req = urllib.request.Request(base + path, data=b"{}", method="POST",
                                     headers={"Content-Type": "application/json", **({"Authorization": f"Bearer {auth}"} if auth else {})})
        try:
            with urllib.request.urlopen(req, timeout=15) as r:
                return r.status, json.loads(r.read())
        except urllib.error.HTTPError as e:
            return e.code, json.loads(e.read() or b"{}")

    assert post("api/acknowledge/ef3", None)[0] == 401
    status, body = post("api/snapshot/ef3", token)
    assert status == 200 and body["ok"] and "snapshot" in body["detail"], body
    assert list((tmp_path / "state" / "snapshots").glob("*-ef3-command/snapshot.json"))
    status, body = post("api/acknowledge/ef3", token)
    assert status == 200 and "latched" in body["detail"], body  # "nothing latched to clear" or "cleared ..."
    assert post("api/acknowledge/nope", token)[0] == 404
    assert d.stop() == 0


# --------------------------------------------------------------------------------------- broker outage
def test_broker_outage_reconnects_and_counts_refused_publishes(make_mosquitto_broker, tmp_path, daemons):
    broker = make_mosquitto_broker()
    p = prefix()
    root = f"{p}/{AGENT}"
    # memory delivery with a tiny offline queue, so the outage overflows it and the refused publishes are counted
    cfg = daemon_config(broker, prefix=p, mqtt={"delivery": "memory", "max_queued_messages": 3,
                                                "reconnect_min_s": 0.5, "reconnect_max_s": 1.0})
    d = DaemonProcess(write_setup(tmp_path, cfg))
    daemons.append(d)
    with MqttListener(broker, topics=[f"{root}/#"]) as listener:
        assert wait_message(listener, f"{root}/machine/ef3/state", timeout_s=30), d.describe()
    broker.stop()
    assert d.wait_log(r"mqtt connection lost", 10), d.describe()
    assert wait_until(lambda: counter(d.scrape(), "rotorwatch_mqtt_publish_failures_total") > 0, 20), d.describe()
    assert counter(d.scrape(), "rotorwatch_mqtt_connected") == 0
    broker.start()
    with MqttListener(broker, topics=[f"{root}/#"]) as listener:
        assert wait_until(lambda: counter(d.scrape(), "rotorwatch_mqtt_reconnects_total") >= 1, 20), d.describe()
        assert wait_message(listener, f"{root}/availability", lambda m: m.payload == b"online", 10)
        assert wait_message(listener, f"{root}/machine/ef3/point/de-h/state", timeout_s=10)
    assert counter(d.scrape(), "rotorwatch_mqtt_connected") == 1
    assert d.stop() == 0


# --------------------------------------------------------------------------------------- HTTPS metrics
def test_metrics_over_https(tmp_path, daemons):
    import ssl
    import urllib.request

    from components import make_test_pki

    pki = make_test_pki(tmp_path / "pki")
    cfg = daemon_config(None, prefix="x")
    cfg["metrics"] = {"bind": "127.0.0.1", "port": 0, "tls_cert_file": str(pki.server_cert),
                      "tls_key_file": str(pki.server_key)}
    d = DaemonProcess(write_setup(tmp_path, cfg))
    daemons.append(d)
    assert d.wait_log(r"metrics endpoint listening .*scheme=https", 20), d.describe()
    port = d.metrics_port()
    ctx = ssl.create_default_context(cafile=str(pki.ca_cert))
    with urllib.request.urlopen(f"https://127.0.0.1:{port}/metrics", context=ctx, timeout=5) as r:
        text = r.read().decode()
    assert "rotorwatch_build_info" in text
    with pytest.raises((OSError, http.client.HTTPException)):  # plain HTTP against the TLS port fails
        urllib.request.urlopen(f"http://127.0.0.1:{port}/metrics", timeout=5).read()
    assert d.stop() == 0


# --------------------------------------------------------------------------------------- discovery
def test_discovery_configs_when_asked_for_and_cleared_when_switched_off(mosquitto_broker, tmp_path, daemons):
    p = prefix()
    disc = f"{p}-disc"
    cfg = daemon_config(mosquitto_broker, prefix=p, mqtt={"discovery_prefix": disc})
    with MqttListener(mosquitto_broker, topics=[f"{disc}/#"]) as listener:
        d = DaemonProcess(write_setup(tmp_path, cfg))
        daemons.append(d)
        assert wait_until(lambda: len(messages(listener)) >= 5, 20), d.describe()
        configs = {m.topic: as_json(m) for m in messages(listener) if m.payload}
        # every entity reads one of the agent's own state topics (deploy/mqtt-topics.md)
        assert all(body["state_topic"].startswith(f"{p}/{AGENT}/machine/ef3/") for body in configs.values()), configs
        n = len(listener.messages)
        del cfg["mqtt"]["discovery_prefix"]
        d.config_path.write_text(write_setup(tmp_path, cfg).read_text())
        d.signal(signal.SIGHUP)
        assert d.wait_log(r"configuration reloaded", 10), d.describe()
        cleared = wait_until(lambda: {m.topic for m in list(listener.messages)[n:] if m.payload == b""} >= set(configs), 10)
        assert cleared, d.describe()
    assert d.stop() == 0


def test_events_during_an_outage_wait_in_the_spool_and_arrive_after(make_mosquitto_broker, tmp_path, daemons):
    broker = make_mosquitto_broker()
    p = prefix()
    root = f"{p}/{AGENT}"
    cfg = daemon_config(broker, prefix=p, mqtt={"reconnect_min_s": 0.5, "reconnect_max_s": 1.0})
    # the defect steps in at day 0.05: several updates after start, while the broker is away
    d = DaemonProcess(write_setup(tmp_path, cfg, fast_fault_scenario(appear_day=0.05)))
    daemons.append(d)
    with MqttListener(broker, topics=[f"{root}/#"]) as listener:
        first = wait_message(listener, f"{root}/machine/ef3/state", timeout_s=30)
        assert first is not None, d.describe()
        assert as_json(first)["seq"] >= 1  # spooled records carry their sequence number
        assert not messages(listener, f"{root}/events", json_pred(new_state="alarm"))
    broker.stop()
    assert d.wait_log(r"value=de-outer-race learning -> alarm", 40), d.describe()
    assert wait_until(lambda: counter(d.scrape(), "rotorwatch_spool_records") > 0, 10), d.describe()
    broker.start()
    with MqttListener(broker, topics=[f"{root}/#"]) as listener:
        ev = wait_message(listener, f"{root}/events", json_pred(value_name="de-outer-race", new_state="alarm"), 20)
        assert ev is not None, d.describe()
        assert as_json(ev)["seq"] > as_json(first)["seq"]
    assert counter(d.scrape(), "rotorwatch_mqtt_publish_failures_total") == 0
    assert d.stop() == 0
