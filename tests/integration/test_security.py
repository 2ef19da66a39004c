"""Security of the running daemon against real components: TLS with CA pinning and client certificates
(a mosquitto that requires them), credentials that never reach a log, the spool, the trend store or a
snapshot, and a warning when a file holding a secret is readable by every user.

``rotorwatch run`` is a subprocess; the PKI is a throw-away CA made with openssl (tests/components.py,
shared recipes section 2); brokers bind 127.0.0.1 on free ports and are stopped by their PIDs.
"""

from __future__ import annotations

import json
import os
import secrets
import ssl
import threading
import uuid
from pathlib import Path

import paho.mqtt.client as mqtt
import pytest

from components import MqttListener, free_port, make_mosquitto_broker, make_test_pki, wait_until

from .daemon_support import (
    DaemonProcess,
    as_json,
    daemon_config,
    fast_fault_scenario,
    json_pred,
    wait_message,
    write_setup,
)

pytestmark = pytest.mark.integration

AGENT = "halden-ef3"


def metric(d: DaemonProcess, name: str) -> float | None:
    try:
        text = d.scrape()
    except OSError:
        return None
    for line in text.splitlines():
        if line.startswith(name + "{") or line.startswith(name + " "):
            return float(line.rsplit(" ", 1)[1])
    return None


class CertListener:
    """A subscriber that itself presents a client certificate (the broker requires one)."""

    def __init__(self, broker, topic: str, pki) -> None:
        self.messages: list = []
        self._ready = threading.Event()
        self.client = mqtt.Client(mqtt.CallbackAPIVersion.VERSION2, client_id=f"cert-{uuid.uuid4().hex[:6]}",
                                  protocol=mqtt.MQTTv5)
        self.client.tls_set(ca_certs=str(pki.ca_cert), certfile=str(pki.client_cert), keyfile=str(pki.client_key),
                            cert_reqs=ssl.CERT_REQUIRED)
        self.client.username_pw_set(broker.username, broker.password)
        self.client.on_connect = lambda c, u, f, rc, p: c.subscribe(topic, qos=1)
        self.client.on_subscribe = lambda *a: self._ready.set()
        self.client.on_message = lambda c, u, msg: self.messages.append(msg)
        self.client.connect("localhost", broker.port, keepalive=10)
        self.client.loop_start()
        assert self._ready.wait(10), "no SUBACK with a client certificate"

    def close(self) -> None:
        self.client.disconnect()
        self.client.loop_stop()


def tls_config(broker, prefix: str, ca: Path, **extra) -> dict:
    return daemon_config(broker, prefix=prefix, mqtt={"host": "localhost", "tls": True, "ca_file": str(ca),
                                                      "username": broker.username, "password_file": "mqtt-password",
                                                      "reconnect_min_s": 0.5, "reconnect_max_s": 1.0, **extra})


def test_client_certificate_required_by_the_broker(tmp_path):
    pki = make_test_pki(tmp_path / "pki")
    broker = make_mosquitto_broker(tmp_path / "broker", tls=pki, username="rw-edge",
                                   password=secrets.token_urlsafe(12), require_certificate=True)
    prefix = f"rwsec-{uuid.uuid4().hex[:8]}"
    with_cert, without = tmp_path / "with-cert", tmp_path / "without-cert"
    daemons = []
    listener = None
    try:
        listener = CertListener(broker, f"{prefix}/#", pki)
        for folder, extra in ((with_cert, {"client_cert_file": str(pki.client_cert),
                                           "client_key_file": str(pki.client_key)}), (without, {})):
            folder.mkdir()
            (folder / "mqtt-password").write_text(broker.password + "\n")
            os.chmod(folder / "mqtt-password", 0o600)
            p = f"{prefix}/{folder.name}"
            daemons.append(DaemonProcess(write_setup(folder, tls_config(broker, p, pki.ca_cert, **extra))))
        good, bad = daemons
        online = f"{prefix}/with-cert/{AGENT}/availability"
        assert wait_until(lambda: any(m.topic == online and m.payload == b"online" for m in listener.messages), 30), \
            good.describe()
        assert wait_until(lambda: any(m.topic.startswith(f"{prefix}/with-cert/{AGENT}/machine/")
                                      for m in listener.messages), 30), good.describe()
        # without a certificate the handshake is refused: counted, reported, the daemon keeps measuring
        assert wait_until(lambda: (metric(bad, "rotorwatch_mqtt_connect_failures_total") or 0) >= 2, 30), bad.describe()
        assert wait_until(lambda: (metric(bad, "rotorwatch_updates_total") or 0) >= 1, 30), bad.describe()
        assert metric(bad, "rotorwatch_mqtt_connected") == 0 and bad.alive()
        assert not any(m.topic.startswith(f"{prefix}/without-cert/") for m in listener.messages)
        assert "mqtt" in bad.log() and "Traceback" not in bad.log()
    finally:
        rcs = [d.stop() for d in daemons]
        if listener is not None:
            listener.close()
        broker.stop()
    assert rcs == [0, 0]


def test_a_broker_certificate_from_another_ca_is_refused(mosquitto_tls_broker, tmp_path):
    """CA pinning: the broker's certificate is valid, but not signed by the CA the daemon trusts."""
    other = make_test_pki(tmp_path / "other-pki")
    b = mosquitto_tls_broker
    (tmp_path / "mqtt-password").write_text(b.password + "\n")
    os.chmod(tmp_path / "mqtt-password", 0o600)
    prefix = f"rwsec-{uuid.uuid4().hex[:8]}"
    d = DaemonProcess(write_setup(tmp_path, tls_config(b, prefix, other.ca_cert)))
    try:
        with MqttListener(b, topics=[f"{prefix}/#"]) as listener:
            assert wait_until(lambda: (metric(d, "rotorwatch_mqtt_connect_failures_total") or 0) >= 2, 30), d.describe()
            assert wait_until(lambda: (metric(d, "rotorwatch_updates_total") or 0) >= 1, 30), d.describe()
            assert metric(d, "rotorwatch_mqtt_connected") == 0 and d.alive()
            assert not listener.messages  # nothing reached the broker: the password was never sent to it
        line = d.wait_log(r"^ERROR publishers\.mqtt\.link mqtt TLS handshake with the broker failed: .*certificate verify failed", 5)
        assert line, d.describe()
    finally:
        rc = d.stop()
    assert rc == 0
    assert "Traceback" not in d.log() and b.password not in d.log()


def test_credentials_never_reach_logs_spool_trends_or_snapshots(mosquitto_tls_broker, tmp_path):
    b = mosquitto_tls_broker
    (tmp_path / "mqtt-password").write_text(b.password + "\n")
    os.chmod(tmp_path / "mqtt-password", 0o600)
    prefix = f"rwsec-{uuid.uuid4().hex[:8]}"
    root = f"{prefix}/{AGENT}"
    cfg = tls_config(b, prefix, b.ca_path)
    cfg["storage"]["snapshots"] = {"on_transition_to": ["warning", "alarm"], "min_interval_s": 0}
    cfg["storage"]["trends"] = {"min_interval_s": 0}
    d = DaemonProcess(write_setup(tmp_path, cfg, fast_fault_scenario(appear_day=0.02)))
    try:
        with MqttListener(b, topics=[f"{root}/#"]) as listener:
            assert wait_message(listener, f"{root}/events", json_pred(value_name="de-outer-race", new_state="alarm"), 60), \
                d.describe()
            listener.client.publish(f"{root}/command", json.dumps({"command": "snapshot", "id": "s1"}), qos=1)
            res = wait_message(listener, f"{root}/command/result", json_pred(id="s1"), 15)
            assert res is not None and as_json(res)["ok"], d.describe()
            secret = b.password.encode()
            assert not [m.topic for m in listener.messages if secret in m.payload]
    finally:
        rc = d.stop()
    assert rc == 0
    state = tmp_path / "state"
    sidecars = list(state.rglob("snapshot.json"))
    assert len(sidecars) >= 2, sorted(str(p) for p in state.rglob("*"))  # the alarm's and the command's
    checked = 0
    for f in [d.log_path, *[p for p in state.rglob("*") if p.is_file()]]:
        assert secret not in f.read_bytes(), f"the broker password is in {f}"
        checked += 1
    print(f"\n[secrets] password absent from the log and {checked - 1} files of the state folder "
          f"({len(sidecars)} snapshot sidecars, spool, trends, baselines)")


def _warnings_about(d: DaemonProcess, path: Path) -> list[str]:
    return [ln for ln in d.log().splitlines() if ln.startswith("WARNING") and str(path) in ln]


@pytest.mark.parametrize("mode,warned", [(0o644, True), (0o604, True), (0o640, False), (0o600, False)])
def test_a_world_readable_password_file_is_warned_about(tmp_path, mode, warned):
    pw = tmp_path / "mqtt-password"
    pw.write_text("not-a-real-password\n")
    os.chmod(pw, mode)
    cfg = daemon_config(None, prefix="x", metrics=False)
    cfg["mqtt"] = {"host": "127.0.0.1", "port": free_port(), "username": "edge", "password_file": "mqtt-password",
                   "reconnect_min_s": 0.5, "reconnect_max_s": 1.0}
    d = DaemonProcess(write_setup(tmp_path, cfg), "--max-updates", "1")
    rc = d.wait(60)
    if rc is None:
        d.stop()
    assert rc == 0, d.describe()
    lines = _warnings_about(d, pw)
    if warned:
        assert len(lines) == 1, lines
        assert "mqtt.password_file" in lines[0] and f"chmod 600 {pw}" in lines[0] and f"{mode:04o}" in lines[0]
    else:
        assert lines == [], lines
    assert "not-a-real-password" not in d.log()
