"""The real-component fixtures work, and each check here can fail.

These tests talk to real programs (mosquitto, promtool, Prometheus, PulseAudio through PortAudio);
they prove the fixtures other tests rely on before those tests rely on them.
"""

from __future__ import annotations

import subprocess
import sys
import threading
import time
import uuid

import numpy as np
import paho.mqtt.client as mqtt
import pytest
from numpy.testing import assert_array_equal
from prometheus_client import CollectorRegistry, Counter, Gauge, Histogram, generate_latest, start_http_server
from scipy.signal import welch

import components
from components import MqttListener, wait_until

pytestmark = pytest.mark.integration


# ------------------------------------------------------------------------------------------ MQTT


def _publish(broker, topic: str, payload: bytes, *, username=None, password=None, tls=False,
             host=None, client_cert=None, client_key=None, timeout_s: float = 10.0):
    """Publish one retained QoS 1 message and wait for its PUBACK; returns the CONNACK reason."""
    acked = threading.Event()
    connected = threading.Event()
    result = {}
    client = mqtt.Client(mqtt.CallbackAPIVersion.VERSION2, protocol=mqtt.MQTTv5)
    if tls:
        client.tls_set(ca_certs=str(broker.ca_path),
                       certfile=str(client_cert) if client_cert else None,
                       keyfile=str(client_key) if client_key else None)
    if username is not None:
        client.username_pw_set(username, password)

    def on_connect(c, userdata, flags, reason_code, properties):
        result["reason"] = reason_code
        connected.set()
        if reason_code.is_failure:
            c.disconnect()  # paho would otherwise retry forever (recipes)
        else:
            c.publish(topic, payload, qos=1, retain=True)

    client.on_connect = on_connect
    client.on_publish = lambda *a: acked.set()
    client.connect(host or broker.host, broker.port, keepalive=10)
    client.loop_start()
    try:
        assert connected.wait(timeout_s), f"no CONNACK from {broker.host}:{broker.port}"
        if not result["reason"].is_failure:
            assert acked.wait(timeout_s), f"no PUBACK for {topic}"
    finally:
        client.disconnect()
        client.loop_stop()
    return result["reason"]


def test_plain_broker_delivers_retained_message(mosquitto_broker):
    topic = f"rw-test/{uuid.uuid4().hex}/state"
    reason = _publish(mosquitto_broker, topic, b"running")
    assert not reason.is_failure
    with MqttListener(mosquitto_broker, [topic]) as late_subscriber:
        msg = late_subscriber.wait_for(topic, timeout_s=5)
    assert msg is not None, "the retained message never reached a later subscriber"
    assert msg.payload == b"running"
    assert msg.retain is True
    assert mosquitto_broker.pid is not None and mosquitto_broker.log_path.exists()


def test_tls_broker_with_password_delivers_retained_message(mosquitto_tls_broker):
    broker = mosquitto_tls_broker
    topic = f"rw-test/{uuid.uuid4().hex}/tls"
    # By name (SAN DNS:localhost) with the client certificate, and by IP (SAN IP:127.0.0.1) without.
    reason = _publish(broker, topic, b"first", username=broker.username, password=broker.password,
                      tls=True, host="localhost", client_cert=broker.client_cert,
                      client_key=broker.client_key)
    assert not reason.is_failure, f"TLS login refused: {reason}"
    reason = _publish(broker, topic, b"second", username=broker.username, password=broker.password,
                      tls=True, host="127.0.0.1")
    assert not reason.is_failure, f"TLS login by IP refused: {reason}"
    with MqttListener(broker, [topic]) as late_subscriber:
        msg = late_subscriber.wait_for(topic, timeout_s=5)
    assert msg is not None and msg.payload == b"second" and msg.retain is True
    assert broker.passwords_file.read_text().startswith(f"{broker.username}:")


def test_tls_broker_refuses_wrong_password(mosquitto_tls_broker):
    broker = mosquitto_tls_broker
    reason = _publish(broker, "rw-test/denied", b"x", username=broker.username,
                      password=broker.password + "-wrong", tls=True, host="localhost")
    assert reason.is_failure
    assert reason.getName() == "Not authorized"


def test_tls_broker_refuses_plain_tcp(mosquitto_tls_broker):
    mosquitto_pub = components.find_binary("mosquitto_pub", "mosquitto-clients")
    done = subprocess.run([mosquitto_pub, "-h", "127.0.0.1", "-p", str(mosquitto_tls_broker.port),
                           "-u", mosquitto_tls_broker.username, "-P", mosquitto_tls_broker.password,
                           "-t", "rw-test/plain", "-m", "1"],
                          capture_output=True, text=True, timeout=20, stdin=subprocess.DEVNULL)
    assert done.returncode != 0, "a plain-TCP client got through the TLS listener"


def test_broker_stop_and_start_keep_port_and_retained_messages(make_mosquitto_broker):
    broker = make_mosquitto_broker()
    port, first_pid = broker.port, broker.pid
    topic = f"rw-test/{uuid.uuid4().hex}/outage"
    assert not _publish(broker, topic, b"before-outage").is_failure

    broker.stop()
    assert broker.pid is None
    with pytest.raises(ConnectionRefusedError):
        mqtt.Client(mqtt.CallbackAPIVersion.VERSION2).connect(broker.host, port)

    broker.start()
    assert broker.port == port and broker.pid not in (None, first_pid)
    with MqttListener(broker, [topic]) as subscriber:
        msg = subscriber.wait_for(topic, timeout_s=5)
    assert msg is not None and msg.payload == b"before-outage", "persistence lost the retained message"


# ------------------------------------------------------------------------------------ promtool


def test_promtool_accepts_client_exposition(promtool):
    registry = CollectorRegistry()
    Counter("rotorwatch_frames_processed", "Frames analysed.", registry=registry).inc(4800)
    Gauge("rotorwatch_rms_acceleration_meters_per_second_squared", "Broadband RMS.",
          ["machine"], registry=registry).labels("fan-3").set(1.25)
    Histogram("rotorwatch_analysis_duration_seconds", "Time per window.",
              registry=registry).observe(0.004)
    rc, findings = promtool.check_metrics(generate_latest(registry))
    assert (rc, findings.strip()) == (0, "")


def test_promtool_rejects_gauge_named_total(promtool):
    registry = CollectorRegistry()
    Gauge("rotorwatch_samples_total", "A gauge wrongly named like a counter.",
          registry=registry).set(3)
    rc, findings = promtool.check_metrics(generate_latest(registry))
    # promtool exit codes: 3 = lint problems, 1 = parse error (promtool 2.42, shared recipes)
    assert rc == 3
    assert 'non-counter metrics should not have "_total" suffix' in findings


def test_promtool_reports_parse_error(promtool):
    rc, findings = promtool.check_metrics("rotorwatch_peak_hertz{machine= 12\n")
    assert rc == 1, findings
    assert findings.strip()


def test_missing_component_fails_instead_of_skipping():
    with pytest.raises(pytest.fail.Exception, match=r"not installed: run bash tests/run-suite as "
                                                    r"root, or apt-get install rw-no-such-package"):
        components.find_binary("rw-no-such-program", "rw-no-such-package")


# ---------------------------------------------------------------------------------- Prometheus


def test_prometheus_scrapes_exporter(prometheus_server):
    registry = CollectorRegistry()
    gauge = Gauge("rotorwatch_peak_velocity_millimeters_per_second", "Peak velocity.",
                  ["machine"], registry=registry)
    gauge.labels("pump-7").set(4.375)
    port = components.free_port()
    http_server, thread = start_http_server(port, addr="127.0.0.1", registry=registry)
    try:
        prom = prometheus_server([f"127.0.0.1:{port}"], job="rw_test")
        assert prom.wait_for('up{job="rw_test"} == 1', timeout_s=20), prom.targets()
        result = prom.wait_for('rotorwatch_peak_velocity_millimeters_per_second{machine="pump-7"}',
                               timeout_s=10)
        assert [float(r["value"][1]) for r in result] == [4.375]
        assert prom.query("rotorwatch_no_such_series") == []
    finally:
        http_server.shutdown()
        http_server.server_close()
        thread.join(5)


# --------------------------------------------------------------------------------------- audio


def _tones(rate_hz: int, n_frames: int, tones_hz: list[float], amplitude: float = 0.5) -> np.ndarray:
    t = np.arange(n_frames) / rate_hz
    return np.stack([amplitude * np.sin(2 * np.pi * f * t) for f in tones_hz],
                    axis=1).astype(np.float32)


class _Capture:
    """A PortAudio input stream collecting blocks (copy in the callback, nothing else)."""

    def __init__(self, sd, source, blocksize: int | None = None) -> None:
        self.blocks: list[np.ndarray] = []
        self.statuses: list = []
        self.stream = sd.InputStream(samplerate=source.rate_hz, channels=source.channels,
                                     dtype="float32", device=source.name,
                                     blocksize=blocksize or source.rate_hz // 10,
                                     callback=self._callback)

    def _callback(self, indata, frames, time_info, status) -> None:
        self.blocks.append(indata.copy())
        if status:
            self.statuses.append(status)

    @property
    def n_frames(self) -> int:
        return sum(len(b) for b in self.blocks)

    def frames(self) -> np.ndarray:
        return np.concatenate(self.blocks) if self.blocks else np.zeros((0, 0), np.float32)


@pytest.mark.parametrize(("source_name", "tones_hz"), [
    ("rw_pipe_2ch", [120.0, 3000.0]),
    ("rw_pipe_4ch", [120.0, 1000.0, 2500.0, 7000.0]),
])
def test_pipe_source_capture_is_bit_exact_and_real_time(audio_device, source_name, tones_hz):
    source = audio_device.source(source_name)
    duration_s = 1.5
    n = int(source.rate_hz * duration_s)
    fed = _tones(source.rate_hz, n, tones_hz)
    capture = _Capture(audio_device.sd, source)
    capture.stream.start()
    t0 = time.monotonic()
    feed = audio_device.feed(fed, source_name)
    try:
        got_all = wait_until(lambda: capture.n_frames >= n, timeout_s=duration_s + 5)
        elapsed_s = time.monotonic() - t0
    finally:
        feed.stop()  # the writer first, then the stream (recipes)
        capture.stream.abort()
        capture.stream.close()
    assert got_all, f"captured {capture.n_frames} of {n} frames"
    captured = capture.frames()[:n]
    assert_array_equal(captured, fed)
    assert not capture.statuses
    # Paced like a device: the writer's clock, not a burst (lower bound only; not a speed target).
    assert elapsed_s >= 0.9 * duration_s
    # Reference: scipy.signal.welch. 10 Hz bins (nperseg = rate/10) put every tone on a bin.
    freqs_hz, psd = welch(captured, fs=source.rate_hz, nperseg=source.rate_hz // 10, axis=0)
    assert [float(freqs_hz[np.argmax(psd[:, ch])]) for ch in range(source.channels)] == tones_hz


def test_paused_feed_stalls_capture_without_losing_frames(audio_device):
    source = audio_device.source("rw_pipe_2ch")
    fed = _tones(source.rate_hz, source.rate_hz * 4, [250.0, 500.0])
    capture = _Capture(audio_device.sd, source, blocksize=480)
    capture.stream.start()
    feed = audio_device.feed(fed, source.name)
    try:
        assert wait_until(lambda: capture.n_frames >= source.rate_hz // 2, timeout_s=5)
        feed.pause()
        # Every frame written so far arrives (480-frame chunks and blocks line up), then nothing more.
        assert wait_until(lambda: capture.n_frames == feed.frames_written, timeout_s=3), \
            f"captured {capture.n_frames} frames, written {feed.frames_written}"
        stalled_at = capture.n_frames
        time.sleep(0.5)
        assert capture.n_frames == stalled_at, "frames kept arriving from a paused feed"
        feed.resume()
        target = stalled_at + source.rate_hz // 2
        assert wait_until(lambda: capture.n_frames >= target, timeout_s=5), "no frames after resume"
    finally:
        feed.stop()
        capture.stream.abort()
        capture.stream.close()
    captured = capture.frames()
    assert_array_equal(captured, fed[:len(captured)])


def test_recording_through_mono_pipe_source(audio_device, shared_datasets):
    # A real CWRU drive-end recording (48 kHz, see shared/datasets/bearing-faults/README.md) goes
    # through a mono pipe source added at run time and comes back unchanged.
    with np.load(shared_datasets / "cwru_135_outer_race_007_at6_0hp_48k.npz", allow_pickle=False) as z:
        rate_hz = int(float(z["fs"]))
        fed = z["signal"][:rate_hz].astype(np.float32)
    source = audio_device.add_pipe_source("rw_pipe_1ch", rate_hz, 1)
    capture = _Capture(audio_device.sd, source)
    capture.stream.start()
    feed = audio_device.feed(fed, source)
    try:
        assert wait_until(lambda: capture.n_frames >= len(fed), timeout_s=6)
    finally:
        feed.stop()
        capture.stream.abort()
        capture.stream.close()
    assert_array_equal(capture.frames()[:len(fed), 0], fed)


def test_audio_env_lets_a_subprocess_see_the_sources(audio_env, pulse_audio):
    code = ("import sounddevice as sd; "
            "print(','.join(d['name'] for d in sd.query_devices() if d['max_input_channels'] > 0))")
    done = subprocess.run([sys.executable, "-c", code], env=audio_env, capture_output=True,
                          text=True, timeout=30, stdin=subprocess.DEVNULL)
    assert done.returncode == 0, done.stderr
    names = done.stdout.strip().split(",")
    assert {"rw_pipe_2ch", "rw_pipe_4ch"} <= set(names), names


def test_shared_datasets_fixture_points_at_recordings(shared_datasets):
    names = sorted(p.name for p in shared_datasets.glob("*.npz"))
    assert "cwru_097_normal_0hp_48k.npz" in names
    assert (shared_datasets / "README.md").is_file()
