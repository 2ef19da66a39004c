"""Fixtures for real components: mosquitto (plain and TLS+auth), promtool, Prometheus, PulseAudio.

The machinery lives in ``tests/components.py``; this file only wires it into pytest scopes. A missing
program fails the test with the package to install (``bash tests/run-suite`` as root installs them
all). Only the ``../shared`` fixtures look at ``CI``: absent, they skip in a user's clone and fail
when ``CI=true`` (``components.require_shared``); everything else behaves the same everywhere.

Fixtures
--------
``mosquitto_broker`` (session)
    Plain broker, anonymous, on 127.0.0.1:free port. ``.host .port .pid .log_path .stop() .start()``
    (same port: broker outage). A test that stops it must start it again; a test that wants to
    kill or reconfigure a broker should use ``make_mosquitto_broker`` for a private one.
``mosquitto_tls_broker`` (session)
    TLS (test CA, SAN localhost + 127.0.0.1) with username/password. ``.ca_path .client_cert
    .client_key .username .password .passwords_file`` besides the above.
``make_mosquitto_broker`` (function)
    Factory ``make(tls=False, username=None, password=None) -> MosquittoBroker``, stopped at teardown.
``promtool`` (session)
    ``.path``, ``.check_metrics(text) -> (rc, stderr)`` (0 clean, 3 lint, 1 parse error),
    ``.check_config(path)``.
``prometheus_server`` (function)
    Factory ``start(targets, job="rotorwatch", scrape_interval_s=1.0) -> PrometheusServer`` with
    ``.query(expr)``, ``.wait_for(expr, timeout_s)``, ``.targets()``; every server stopped at teardown.
``pulse_audio`` (session)
    Private PulseAudio with pipe sources ``rw_pipe_2ch`` (48000 Hz, 2 ch) and ``rw_pipe_4ch``
    (51200 Hz, 4 ch); ``.add_pipe_source(name, rate_hz, channels)`` adds more.
``audio_device`` (function)
    Points this process at ``pulse_audio`` (HOME, XDG_RUNTIME_DIR, PULSE_RUNTIME_PATH, PULSE_SERVER via
    monkeypatch), re-initialises PortAudio, and offers ``feed(frames, source=...) -> AudioFeed``.
    Stop the feed (``handle.stop()``) BEFORE stopping the capture stream, and end streams with
    ``abort()``.
``audio_env`` (function)
    A full environment dict for a subprocess (``rotorwatch run``) that should see the pipe sources.
``shared_datasets`` (session)
    Path of ``../shared/datasets/bearing-faults``; when absent, skips with the reason (a user's clone)
    or fails (``CI=true``).
``shared_references`` (session)
    Path of ``../shared/references.md`` (check values with sources); absent: as above.
"""

from __future__ import annotations

import logging
import secrets
import sys
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).resolve().parent))  # for "import components" in any import mode

import components  # noqa: E402
from components import (  # noqa: E402,F401  (re-exported for tests)
    AudioFeed,
    MosquittoBroker,
    MqttListener,
    PipeSource,
    PrometheusServer,
    PulseAudioServer,
    free_port,
    shared_datasets_dir,
)

#: The pipe sources every session has: (name, rate_hz, channels).
DEFAULT_PIPE_SOURCES = (("rw_pipe_2ch", 48000, 2), ("rw_pipe_4ch", 51200, 4))


# ---------------------------------------------------------------------------------------- MQTT


@pytest.fixture(autouse=True)
def _rotorwatch_logging_restored():
    """A test that runs the CLI in-process (cli.main) sets up the ``rotorwatch`` logger as the command
    does (its own handler, no propagation); put it back afterwards, so that later tests' caplog, which
    listens at the root logger, still sees the package's records whatever the test order."""
    log = logging.getLogger("rotorwatch")
    saved = (list(log.handlers), log.level, log.propagate)
    yield
    log.handlers[:] = saved[0]
    log.setLevel(saved[1])
    log.propagate = saved[2]


@pytest.fixture(scope="session")
def mosquitto_broker(tmp_path_factory):
    broker = components.make_mosquitto_broker(tmp_path_factory.mktemp("mosquitto"))
    try:
        yield broker
    finally:
        broker.stop()


@pytest.fixture(scope="session")
def mosquitto_tls_broker(tmp_path_factory):
    root = tmp_path_factory.mktemp("mosquitto-tls")
    pki = components.make_test_pki(root / "pki")
    broker = components.make_mosquitto_broker(root / "broker", tls=pki, username="rw-edge",
                                              password=secrets.token_urlsafe(12))
    try:
        yield broker
    finally:
        broker.stop()


@pytest.fixture
def make_mosquitto_broker(tmp_path):
    """Factory for private brokers (for tests that stop, kill or restart them)."""
    brokers: list[MosquittoBroker] = []

    def make(tls: bool = False, username: str | None = None,
             password: str | None = None) -> MosquittoBroker:
        root = tmp_path / f"broker{len(brokers)}"
        pki = components.make_test_pki(root / "pki") if tls else None
        broker = components.make_mosquitto_broker(root, tls=pki, username=username,
                                                  password=password)
        brokers.append(broker)
        return broker

    try:
        yield make
    finally:
        for broker in brokers:
            broker.stop()


# ---------------------------------------------------------------------------------- Prometheus


@pytest.fixture(scope="session")
def promtool():
    return components.Promtool()


@pytest.fixture
def prometheus_server(tmp_path, promtool):
    """Factory: ``start(targets, job=..., scrape_interval_s=..., scrape_configs=...)``."""
    servers: list[PrometheusServer] = []

    def start(targets=(), **kwargs) -> PrometheusServer:
        server = PrometheusServer(tmp_path / f"prometheus{len(servers)}", targets,
                                  promtool=promtool, **kwargs)
        servers.append(server)
        return server.start()

    try:
        yield start
    finally:
        for server in servers:
            server.stop()


# ---------------------------------------------------------------------------------------- audio


@pytest.fixture(scope="session")
def pulse_audio(tmp_path_factory):
    server = PulseAudioServer(components.make_pulse_root(tmp_path_factory), DEFAULT_PIPE_SOURCES)
    server.start()
    try:
        yield server
    finally:
        server.stop()


def _sounddevice():
    try:
        import sounddevice
    except OSError as exc:  # "PortAudio library not found"
        pytest.fail(f"PortAudio not installed ({exc}): run bash tests/run-suite as root, "
                    f"or apt-get install libportaudio2", pytrace=False)
    return sounddevice


def _reinit_portaudio(sd) -> None:
    # PortAudio lists devices only when it initialises.
    sd._terminate()
    sd._initialize()


class AudioDevice:
    """This process's view of the ``pulse_audio`` server, for one test."""

    def __init__(self, server: PulseAudioServer, sd) -> None:
        self.server = server
        self.sd = sd
        self.env = dict(server.env)
        self.sources = server.sources
        self._feeds: list[AudioFeed] = []

    def source(self, name: str = DEFAULT_PIPE_SOURCES[0][0]) -> PipeSource:
        return self.server.sources[name]

    def feed(self, frames, source: str | PipeSource = DEFAULT_PIPE_SOURCES[0][0], *,
             loop: bool = False, chunk_s: float = 0.01) -> AudioFeed:
        """Write ``frames`` (float32, frames x channels) into ``source`` at real-time pace.

        Start the capture stream first (frames written while nothing records are dropped), call
        ``handle.stop()`` before stopping the stream; ``handle.pause()/resume()`` stall the feed.
        """
        handle = self.server.feed(frames, source, loop=loop, chunk_s=chunk_s)
        self._feeds.append(handle)
        return handle

    def add_pipe_source(self, name: str, rate_hz: int, channels: int) -> PipeSource:
        source = self.server.add_pipe_source(name, rate_hz, channels)
        _reinit_portaudio(self.sd)
        return source


@pytest.fixture
def audio_device(pulse_audio):
    sd = _sounddevice()
    with pytest.MonkeyPatch.context() as mp:
        for key, value in pulse_audio.env.items():
            mp.setenv(key, value)
        _reinit_portaudio(sd)
        device = AudioDevice(pulse_audio, sd)
        try:
            yield device
        finally:
            errors = pulse_audio.stop_feeds(device._feeds)
    _reinit_portaudio(sd)  # back to the machine's own (empty) device list
    if errors:
        pytest.fail("; ".join(errors), pytrace=False)


@pytest.fixture
def audio_env(pulse_audio):
    """Environment for a subprocess that captures from the pipe sources (e.g. ``rotorwatch run``)."""
    return pulse_audio.process_env()


# ---------------------------------------------------------------------------------------- data


@pytest.fixture(scope="session")
def shared_datasets() -> Path:
    return components.require_shared(shared_datasets_dir(), "shared datasets")


@pytest.fixture(scope="session")
def shared_references() -> Path:
    return components.require_shared(components.shared_references_path(), "shared check values")
