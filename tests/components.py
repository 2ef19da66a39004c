"""Real external components for the test suite: mosquitto, promtool/Prometheus, PulseAudio.

Every server here is a real program started with :class:`subprocess.Popen`, bound to 127.0.0.1 on a
free port, polled for readiness with a bounded loop and stopped through its own PID (SIGTERM, a bounded
wait, then SIGKILL). Children also get ``PR_SET_PDEATHSIG`` so a killed pytest cannot leave them
behind. The fixtures in ``conftest.py`` wrap these classes; tests that need a private instance (for
example a broker they are going to stop) can build one directly.

A missing program is a test failure, never a skip: :func:`find_binary` calls ``pytest.fail`` with the
Debian package to install. The one allowed skip is for what lives in ``../shared`` (the recordings
of :func:`shared_datasets_dir`, the check values of :func:`shared_references_path`), present in CI and
on developer machines but not in a user's clone; with ``CI=true`` its absence fails the test instead
(:func:`require_shared`).

Audio without hardware (PulseAudio's pipe source, per the shared recipes):
PulseAudio runs in user mode with ``module-pipe-source`` sources; PortAudio reaches them through
ALSA's ``pulse`` plugin, one ALSA PCM per source, declared in a private ``$HOME/.asoundrc``. A writer
thread (:class:`AudioFeed`) writes float32 frames into the source's FIFO at real-time pace, and what a
capture stream records is bit-exact what was written.
"""

from __future__ import annotations

import ctypes
import json
import os
import select
import shutil
import signal
import socket
import subprocess
import tempfile
import threading
import time
import urllib.parse
import urllib.request
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pytest

REPO_ROOT = Path(__file__).resolve().parent.parent

#: Extra directories searched for programs: mosquitto lives in /usr/sbin, off a normal user's PATH.
_EXTRA_BIN_DIRS = ("/usr/local/sbin", "/usr/sbin", "/sbin")

_PR_SET_PDEATHSIG = 1


# --------------------------------------------------------------------------------------------------
# small helpers
# --------------------------------------------------------------------------------------------------


def free_port() -> int:
    """A TCP port on 127.0.0.1 that was free a moment ago (bind port 0, read it back, close)."""
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


def find_binary(name: str, package: str, component: str | None = None) -> str:
    """Absolute path of program ``name``, or fail the test naming the Debian ``package`` to install."""
    search = os.pathsep.join([os.environ.get("PATH", ""), *_EXTRA_BIN_DIRS])
    path = shutil.which(name, path=search)
    if path is None:
        pytest.fail(
            f"{component or name} not installed: run bash tests/run-suite as root, "
            f"or apt-get install {package}",
            pytrace=False,
        )
    return path


def wait_until(predicate: Callable[[], object], timeout_s: float, interval_s: float = 0.02) -> object:
    """Poll ``predicate`` until it returns something truthy or ``timeout_s`` passes.

    Returns the last value of ``predicate`` (falsy on timeout). The loop is bounded in time and, through
    the interval, in count.
    """
    deadline = time.monotonic() + timeout_s
    while True:
        value = predicate()
        if value or time.monotonic() >= deadline:
            return value
        time.sleep(interval_s)


def tail(path: Path, n_lines: int = 15) -> str:
    """Last lines of a log file, for failure messages (empty string when the file is missing)."""
    try:
        lines = Path(path).read_text(errors="replace").splitlines()
    except OSError:
        return ""
    return "\n".join(lines[-n_lines:])


try:  # loaded once here: the preexec_fn below runs between fork and exec and must stay minimal
    _prctl = ctypes.CDLL(None, use_errno=True).prctl
except (OSError, AttributeError):  # not Linux/glibc: the fixtures still stop children normally
    _prctl = None


def _die_with_parent() -> None:
    """preexec_fn: ask the kernel to SIGTERM the child when the thread that started it ends.

    A safety net for a killed pytest; children are still stopped by PID. Start servers from the
    main thread (fixtures do): a child started from a short-lived thread would get SIGTERM early.
    """
    if _prctl is not None:
        _prctl(_PR_SET_PDEATHSIG, int(signal.SIGTERM), 0, 0, 0)


def spawn(argv: Sequence[str], log_path: Path, env: Mapping[str, str] | None = None,
          cwd: Path | None = None) -> subprocess.Popen:
    """Start ``argv`` with stdout+stderr appended to ``log_path`` and no stdin."""
    log_path.parent.mkdir(parents=True, exist_ok=True)
    with open(log_path, "ab") as log:
        return subprocess.Popen(
            list(argv), stdin=subprocess.DEVNULL, stdout=log, stderr=subprocess.STDOUT,
            env=dict(env) if env is not None else None, cwd=cwd, preexec_fn=_die_with_parent,
        )


def stop_process(proc: subprocess.Popen | None, timeout_s: float = 5.0,
                 sig: int = signal.SIGTERM) -> int | None:
    """Stop one child by its PID: ``sig``, wait up to ``timeout_s``, then SIGKILL. Returns its rc."""
    if proc is None:
        return None
    if proc.poll() is None:
        try:
            proc.send_signal(sig)
        except ProcessLookupError:
            pass
        try:
            proc.wait(timeout=timeout_s)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait(timeout=5.0)
    return proc.returncode


def _port_accepts(host: str, port: int) -> bool:
    try:
        with socket.create_connection((host, port), timeout=0.2):
            return True
    except OSError:
        return False


def _run(argv: Sequence[str], timeout_s: float = 30.0, **kwargs) -> subprocess.CompletedProcess:
    return subprocess.run(list(argv), stdin=subprocess.DEVNULL, capture_output=True, text=True,
                          timeout=timeout_s, **kwargs)


def shared_datasets_dir() -> Path:
    """Where the shared bearing-fault recordings sit: ``../shared/datasets/bearing-faults``.

    The repo is cloned next to ``shared/`` on developer machines and in CI; a user's clone has no such
    folder, and tests reading it then skip, or fail in CI (``conftest.shared_datasets``, through
    :func:`require_shared`).
    """
    return REPO_ROOT.parent / "shared" / "datasets" / "bearing-faults"


def shared_references_path() -> Path:
    """The shared list of check values with their sources and confidence: ``../shared/references.md``."""
    return REPO_ROOT.parent / "shared" / "references.md"


def require_shared(path: Path, what: str, ci: bool | None = None) -> Path:
    """``path`` when it exists. Otherwise the test fails under CI (``CI=true``, where ``../shared`` must be
    next to the checkout) and skips elsewhere (a user's clone has no ``../shared``), naming ``what``
    and the path either way. ``ci`` overrides the environment (for the tests of this rule)."""
    if path.exists():
        return path
    if ci is None:
        ci = os.environ.get("CI", "").lower() == "true"
    if ci:
        pytest.fail(f"{what} missing at {path}: CI=true, and CI runs with ../shared next to the checkout",
                    pytrace=False)
    pytest.skip(f"{what} not present at {path} (a clone without ../shared); these tests run in CI")


# --------------------------------------------------------------------------------------------------
# mosquitto
# --------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class ScratchPki:
    """A throw-away certificate authority with one server and one client certificate (PEM files)."""

    ca_cert: Path
    ca_key: Path
    server_cert: Path
    server_key: Path
    client_cert: Path
    client_key: Path


def make_test_pki(directory: Path, timeout_s: float = 30.0) -> ScratchPki:
    """Create a CA and certificates valid for 2 days.

    The server certificate carries ``SAN DNS:localhost, IP:127.0.0.1`` so clients may connect by
    either name, and the explicit extensions keep it valid under strict X.509 checks
    (``ssl.VERIFY_X509_STRICT``), as in the shared recipes.
    """
    openssl = find_binary("openssl", "openssl")
    d = Path(directory)
    d.mkdir(parents=True, exist_ok=True)

    def sh(*args: str) -> None:
        done = _run([openssl, *args], timeout_s=timeout_s, cwd=d)
        if done.returncode != 0:
            pytest.fail(f"openssl {args[0]} failed: {done.stderr.strip()}", pytrace=False)

    sh("req", "-x509", "-newkey", "rsa:2048", "-nodes", "-keyout", "ca.key", "-out", "ca.crt",
       "-days", "2", "-subj", "/CN=rotorwatch-test-ca",
       "-addext", "basicConstraints=critical,CA:TRUE",
       "-addext", "keyUsage=critical,keyCertSign,cRLSign")
    leaf_ext = ("basicConstraints=critical,CA:FALSE\n"
                "keyUsage=critical,digitalSignature,keyEncipherment\n"
                "subjectKeyIdentifier=hash\nauthorityKeyIdentifier=keyid,issuer\n")
    (d / "server.ext").write_text("subjectAltName=DNS:localhost,IP:127.0.0.1\n"
                                  "extendedKeyUsage=serverAuth\n" + leaf_ext)
    (d / "client.ext").write_text("extendedKeyUsage=clientAuth\n" + leaf_ext)
    for who, cn in (("server", "localhost"), ("client", "rotorwatch-test-client")):
        sh("req", "-newkey", "rsa:2048", "-nodes", "-keyout", f"{who}.key", "-out", f"{who}.csr",
           "-subj", f"/CN={cn}")
        sh("x509", "-req", "-in", f"{who}.csr", "-CA", "ca.crt", "-CAkey", "ca.key",
           "-CAcreateserial", "-out", f"{who}.crt", "-days", "2", "-extfile", f"{who}.ext")
    return ScratchPki(ca_cert=d / "ca.crt", ca_key=d / "ca.key", server_cert=d / "server.crt",
                   server_key=d / "server.key", client_cert=d / "client.crt",
                   client_key=d / "client.key")


@dataclass
class MosquittoBroker:
    """A real mosquitto broker on 127.0.0.1:``port``, started and stopped by its PID.

    ``stop()`` and ``start()`` keep the port, so a test can take the broker away and bring it back
    (broker outage). Persistence is on (data in ``workdir/data``, saved on SIGTERM and every second),
    so retained messages and persistent sessions survive a restart as they would in production.
    The broker log (``log_type all``) is at ``log_path``.
    """

    workdir: Path
    host: str = "127.0.0.1"
    port: int = 0
    tls: ScratchPki | None = None
    username: str | None = None
    password: str | None = None
    passwords_file: Path | None = None
    require_certificate: bool = False  # TLS: clients must present a certificate signed by the test CA
    ready_timeout_s: float = 10.0
    _proc: subprocess.Popen | None = field(default=None, repr=False)

    def __post_init__(self) -> None:
        self.workdir = Path(self.workdir)
        self.workdir.mkdir(parents=True, exist_ok=True)
        self.binary = find_binary("mosquitto", "mosquitto")
        if not self.port:
            self.port = free_port()
        if self.username is not None:
            self._write_passwords()
        self.config_path = self.workdir / "mosquitto.conf"
        self.log_path = self.workdir / "mosquitto.log"
        self.config_path.write_text(self._config_text())

    # -- configuration -------------------------------------------------------------------------
    def _write_passwords(self) -> None:
        tool = find_binary("mosquitto_passwd", "mosquitto", "mosquitto_passwd")
        self.passwords_file = self.workdir / "passwords"
        self.passwords_file.unlink(missing_ok=True)
        done = _run([tool, "-c", "-b", str(self.passwords_file), self.username, self.password or ""])
        if done.returncode != 0:
            pytest.fail(f"mosquitto_passwd failed: {(done.stderr or done.stdout).strip()}",
                        pytrace=False)

    def _config_text(self) -> str:
        data_dir = self.workdir / "data"
        data_dir.mkdir(exist_ok=True)
        lines = ["per_listener_settings false"]
        if os.geteuid() == 0:
            # As root mosquitto otherwise drops to user 'mosquitto' and cannot write our data dir.
            lines.append("user root")
        lines += [
            f"listener {self.port} {self.host}",
            "persistence true",
            f"persistence_location {data_dir}/",
            "autosave_interval 1",
            "log_dest stderr",  # stderr, not stdout: stdout is block-buffered into the log file
            "log_type all",
        ]
        if self.username is None:
            lines.append("allow_anonymous true")
        else:
            lines += ["allow_anonymous false", f"password_file {self.passwords_file}"]
        if self.tls is not None:
            lines += [
                f"cafile {self.tls.ca_cert}",
                f"certfile {self.tls.server_cert}",
                f"keyfile {self.tls.server_key}",
                "tls_version tlsv1.2",  # a minimum: TLS 1.3 is negotiated
                f"require_certificate {'true' if self.require_certificate else 'false'}",
            ]
        return "\n".join(lines) + "\n"

    # -- life cycle ------------------------------------------------------------------------------
    @property
    def pid(self) -> int | None:
        return self._proc.pid if self.running else None

    @property
    def running(self) -> bool:
        return self._proc is not None and self._proc.poll() is None

    @property
    def ca_path(self) -> Path | None:
        return self.tls.ca_cert if self.tls else None

    @property
    def client_cert(self) -> Path | None:
        return self.tls.client_cert if self.tls else None

    @property
    def client_key(self) -> Path | None:
        return self.tls.client_key if self.tls else None

    def start(self) -> MosquittoBroker:
        """Start the broker (again) on the same port; fail the test if it is not up in time."""
        if self.running:
            return self
        self._proc = spawn([self.binary, "-c", str(self.config_path)], self.log_path)
        up = wait_until(lambda: self._proc.poll() is not None or _port_accepts(self.host, self.port),
                        self.ready_timeout_s)
        if not up or self._proc.poll() is not None:
            rc = stop_process(self._proc)
            pytest.fail(f"mosquitto did not come up on {self.host}:{self.port} within "
                        f"{self.ready_timeout_s} s (rc={rc}); log {self.log_path}:\n"
                        f"{tail(self.log_path)}", pytrace=False)
        return self

    def stop(self, sig: int = signal.SIGTERM, timeout_s: float = 5.0) -> int | None:
        """Stop the broker by its PID (SIGTERM saves persistence; pass SIGKILL to simulate a crash)."""
        proc, self._proc = self._proc, None
        return stop_process(proc, timeout_s=timeout_s, sig=sig)

    def restart(self) -> MosquittoBroker:
        self.stop()
        return self.start()


def make_mosquitto_broker(workdir: Path, *, tls: ScratchPki | None = None, username: str | None = None,
                          password: str | None = None, require_certificate: bool = False) -> MosquittoBroker:
    """Create and start a broker in ``workdir``. The caller stops it (``broker.stop()``)."""
    return MosquittoBroker(workdir=workdir, tls=tls, username=username, password=password,
                           require_certificate=require_certificate).start()


class MqttListener:
    """A paho-mqtt 2.x subscriber that collects messages, for checking what a publisher sent.

    ``connect()`` blocks until the SUBACK (bounded); ``wait_for(topic)`` returns the first message on
    that topic or ``None`` when ``timeout_s`` passes. Use as a context manager to disconnect.
    """

    def __init__(self, broker: MosquittoBroker, topics: Iterable[str] = ("#",), *, qos: int = 1,
                 username: str | None = None, password: str | None = None,
                 client_id: str = "", tls: bool | None = None) -> None:
        import paho.mqtt.client as mqtt

        self.broker = broker
        self.topics = list(topics)
        self.qos = qos
        self.messages: list = []
        self._cond = threading.Condition()
        self._subscribed = threading.Event()
        self.connect_reason = None
        self.client = mqtt.Client(mqtt.CallbackAPIVersion.VERSION2, client_id=client_id,
                                  protocol=mqtt.MQTTv5)
        use_tls = broker.tls is not None if tls is None else tls
        if use_tls:
            self.client.tls_set(ca_certs=str(broker.ca_path))
        if username is not None or broker.username is not None:
            self.client.username_pw_set(username if username is not None else broker.username,
                                        password if username is not None else broker.password)
        self.client.on_connect = self._on_connect
        self.client.on_subscribe = lambda *a: self._subscribed.set()
        self.client.on_message = self._on_message

    def _on_connect(self, client, userdata, flags, reason_code, properties) -> None:
        self.connect_reason = reason_code
        if not reason_code.is_failure:
            client.subscribe([(t, self.qos) for t in self.topics])

    def _on_message(self, client, userdata, msg) -> None:
        with self._cond:
            self.messages.append(msg)
            self._cond.notify_all()

    def connect(self, timeout_s: float = 10.0) -> MqttListener:
        host = "localhost" if self.broker.tls is not None else self.broker.host
        self.client.connect(host, self.broker.port, keepalive=10)
        self.client.loop_start()
        if not self._subscribed.wait(timeout_s):
            self.close()
            raise AssertionError(f"no SUBACK from {host}:{self.broker.port} within {timeout_s} s "
                                 f"(connect reason {self.connect_reason})")
        return self

    def wait_for(self, topic: str, timeout_s: float = 10.0):
        """First collected message on ``topic`` (waiting up to ``timeout_s``), else ``None``."""
        deadline = time.monotonic() + timeout_s
        with self._cond:
            while True:
                for msg in self.messages:
                    if msg.topic == topic:
                        return msg
                remaining = deadline - time.monotonic()
                if remaining <= 0:
                    return None
                self._cond.wait(remaining)

    def close(self) -> None:
        self.client.disconnect()
        self.client.loop_stop()

    def __enter__(self) -> MqttListener:
        return self.connect()

    def __exit__(self, *exc) -> None:
        self.close()


# --------------------------------------------------------------------------------------------------
# promtool and Prometheus
# --------------------------------------------------------------------------------------------------


class PersistentSubscriber:
    """An MQTT 5 persistent-session subscriber (clean_start=False, session expiry 600 s) at QoS 1.

    It subscribes to ``topic`` on its first session only, so the broker's stored session (and what it
    queued while the subscriber or the broker was away) carries over reconnects and broker restarts.
    Subclasses handle messages in ``_on_message``; ``sessions_present`` records each connect's flag.
    """

    def __init__(self, host: str, port: int, topic: str, client_id: str,
                 reconnect_s: tuple[float, float] = (0.5, 1.0)) -> None:
        import paho.mqtt.client as mqtt  # noqa: PLC0415
        from paho.mqtt.packettypes import PacketTypes  # noqa: PLC0415
        from paho.mqtt.properties import Properties  # noqa: PLC0415

        self.sessions_present: list[bool] = []
        self._lock = threading.Lock()
        self._subscribed = threading.Event()
        self.topic = topic
        self.client = mqtt.Client(mqtt.CallbackAPIVersion.VERSION2, client_id=client_id, protocol=mqtt.MQTTv5)
        self.client.reconnect_delay_set(*reconnect_s)
        self.client.on_connect = self._on_connect
        self.client.on_subscribe = lambda *a: self._subscribed.set()
        self.client.on_message = self._on_message
        props = Properties(PacketTypes.CONNECT)
        props.SessionExpiryInterval = 600
        self.client.connect(host, port, keepalive=5, clean_start=False, properties=props)
        self.client.loop_start()
        assert self._subscribed.wait(10), "collector: no SUBACK within 10 s"

    def _on_connect(self, client, userdata, flags, reason_code, properties) -> None:
        self.sessions_present.append(bool(flags.session_present))
        if not reason_code.is_failure and not flags.session_present:
            client.subscribe(self.topic, qos=1)

    def _on_message(self, client, userdata, msg) -> None:
        raise NotImplementedError

    def close(self) -> None:
        self.client.disconnect()
        self.client.loop_stop()


class Promtool:
    """Prometheus' own linter. ``check_metrics`` returns promtool's rc: 0 clean, 3 lint problems,
    1 parse error (recipes, promtool 2.42), with the findings promtool wrote to stderr."""

    def __init__(self) -> None:
        self.path = find_binary("promtool", "prometheus", "promtool")

    def check_metrics(self, text: str | bytes, timeout_s: float = 20.0) -> tuple[int, str]:
        data = text.encode() if isinstance(text, str) else text
        done = subprocess.run([self.path, "check", "metrics"], input=data, capture_output=True,
                              timeout=timeout_s)
        return done.returncode, done.stderr.decode(errors="replace")

    def check_config(self, config_path: Path, timeout_s: float = 20.0) -> tuple[int, str]:
        done = _run([self.path, "check", "config", str(config_path)], timeout_s=timeout_s)
        return done.returncode, (done.stdout + done.stderr)


class PrometheusServer:
    """A real Prometheus scraping ``targets`` ("host:port" strings) every ``scrape_interval_s``.

    The config is checked with ``promtool check config`` before start. Prometheus needs about 5-6 s
    after start for its first scrape to show in queries (service discovery updates are throttled to
    5 s; recipes), so use :meth:`wait_for` with a timeout of at least 10 s.
    """

    def __init__(self, workdir: Path, targets: Sequence[str] = (), *, job: str = "rotorwatch",
                 scrape_interval_s: float = 1.0, scrape_configs: Sequence[dict] | None = None,
                 promtool: Promtool | None = None, ready_timeout_s: float = 20.0) -> None:
        self.workdir = Path(workdir)
        self.workdir.mkdir(parents=True, exist_ok=True)
        self.binary = find_binary("prometheus", "prometheus")
        self.promtool = promtool or Promtool()
        self.host = "127.0.0.1"
        self.port = free_port()
        self.url = f"http://{self.host}:{self.port}"
        self.config_path = self.workdir / "prometheus.yml"
        self.log_path = self.workdir / "prometheus.log"
        self.ready_timeout_s = ready_timeout_s
        interval_ms = int(round(scrape_interval_s * 1000))
        configs = list(scrape_configs or [])
        if targets:
            configs.insert(0, {"job_name": job, "static_configs": [{"targets": list(targets)}]})
        config = {
            "global": {"scrape_interval": f"{interval_ms}ms",
                       "scrape_timeout": f"{max(100, int(interval_ms * 0.9))}ms",
                       "evaluation_interval": f"{interval_ms}ms"},
            "scrape_configs": configs,
        }
        # JSON is valid YAML, so no YAML library is needed to write the config.
        self.config_path.write_text(json.dumps(config, indent=2) + "\n")
        self._proc: subprocess.Popen | None = None

    @property
    def pid(self) -> int | None:
        return self._proc.pid if self._proc is not None and self._proc.poll() is None else None

    def start(self) -> PrometheusServer:
        rc, out = self.promtool.check_config(self.config_path)
        if rc != 0:
            pytest.fail(f"promtool check config rejected {self.config_path} (rc={rc}): {out.strip()}",
                        pytrace=False)
        self._proc = spawn([self.binary, f"--config.file={self.config_path}",
                            f"--storage.tsdb.path={self.workdir / 'tsdb'}",
                            f"--web.listen-address={self.host}:{self.port}",
                            "--storage.tsdb.retention.time=1h"],
                           self.log_path, cwd=self.workdir)
        ready = wait_until(lambda: self._proc.poll() is not None or self._ready(), self.ready_timeout_s,
                           interval_s=0.05)
        if not ready or self._proc.poll() is not None:
            rc = stop_process(self._proc)
            pytest.fail(f"prometheus not ready on {self.url} within {self.ready_timeout_s} s "
                        f"(rc={rc}); log {self.log_path}:\n{tail(self.log_path)}", pytrace=False)
        return self

    def _ready(self) -> bool:
        try:
            with urllib.request.urlopen(f"{self.url}/-/ready", timeout=1.0) as resp:
                return resp.status == 200
        except OSError:
            return False

    def api(self, path: str, params: Mapping[str, str] | None = None, timeout_s: float = 5.0):
        """GET ``/api/v1/<path>`` and return its ``data`` (AssertionError unless status=success)."""
        query = f"?{urllib.parse.urlencode(params)}" if params else ""
        with urllib.request.urlopen(f"{self.url}/api/v1/{path}{query}", timeout=timeout_s) as resp:
            body = json.load(resp)
        assert body.get("status") == "success", f"prometheus /api/v1/{path}: {body}"
        return body["data"]

    def query(self, expr: str) -> list[dict]:
        """Instant query; returns the result vector (list of ``{"metric": ..., "value": [t, "v"]}``)."""
        return self.api("query", {"query": expr})["result"]

    def wait_for(self, expr: str, timeout_s: float = 15.0, interval_s: float = 0.25) -> list[dict]:
        """Poll ``query(expr)`` until it returns a non-empty result; ``[]`` on timeout."""
        return wait_until(lambda: self.query(expr), timeout_s, interval_s) or []

    def targets(self) -> list[dict]:
        return self.api("targets")["activeTargets"]

    def stop(self, timeout_s: float = 10.0) -> int | None:
        proc, self._proc = self._proc, None
        return stop_process(proc, timeout_s=timeout_s)


# --------------------------------------------------------------------------------------------------
# PulseAudio pipe sources and the real-time feeder
# --------------------------------------------------------------------------------------------------

#: Channel maps that ALSA's pulse plugin asks for (PA_CHANNEL_MAP_ALSA). The pipe source must use the
#: same map, otherwise PulseAudio remixes and the capture is no longer bit-exact: with its default
#: 4-channel map (FL,FC,FR,RC) a 4-channel capture came back mixed (measured here, PulseAudio 16.1).
ALSA_CHANNEL_MAPS = {
    1: "mono",
    2: "front-left,front-right",
    4: "front-left,front-right,rear-left,rear-right",
    6: "front-left,front-right,rear-left,rear-right,front-center,lfe",
    8: "front-left,front-right,rear-left,rear-right,front-center,lfe,side-left,side-right",
}


@dataclass(frozen=True)
class PipeSource:
    """One PulseAudio pipe source. ``name`` is the PA source, the ALSA PCM and the sounddevice
    device name at once; frames written to ``fifo_path`` (float32le interleaved) are what a capture
    from ``name`` records."""

    name: str
    fifo_path: Path
    rate_hz: int
    channels: int

    @property
    def frame_bytes(self) -> int:
        return 4 * self.channels


class AudioFeed:
    """Writes a signal into a pipe source's FIFO at real-time pace from a thread.

    The signal is written in ``chunk_s`` pieces (10 ms), the k-th due at ``t0 + k * chunk_s`` on
    ``time.monotonic()``; each piece is split into writes of whole frames of at most PIPE_BUF bytes,
    which the kernel keeps atomic, so the FIFO never holds a partial frame. Writes are non-blocking
    and the thread checks its stop flag between them, so ``stop()`` returns promptly even when
    nothing reads the FIFO.

    Order matters: call ``stop()`` BEFORE stopping the capture stream, and end a capture stream with
    ``stream.abort()`` rather than ``stream.stop()``, which can wait forever once data stops arriving
    (recipes). Frames written while no stream records from the source are consumed and dropped by
    PulseAudio (measured here), as a real sensor's would be: start the capture first, then feed.

    ``pause()`` stops writing (a stalled sensor: the capture stream gets no data and no error);
    ``resume()`` continues with the next frame and re-bases the clock, so there is no catch-up burst.
    ``loop=True`` repeats the signal until stopped.
    """

    def __init__(self, source: PipeSource, signal_frames: np.ndarray, *, chunk_s: float = 0.01,
                 loop: bool = False) -> None:
        frames = np.asarray(signal_frames)
        if frames.ndim == 1 and source.channels == 1:
            frames = frames[:, None]
        if frames.ndim != 2 or frames.shape[1] != source.channels:
            raise ValueError(f"feed for {source.name}: signal shape {frames.shape} must be "
                             f"(frames, {source.channels})")
        self.source = source
        self.signal = np.ascontiguousarray(frames, dtype="<f4")
        self.loop = loop
        self.chunk_frames = max(1, int(round(source.rate_hz * chunk_s)))
        self.chunk_s = self.chunk_frames / source.rate_hz
        self.frames_written = 0
        self.error: BaseException | None = None
        self._bytes = self.signal.tobytes()
        self._stop = threading.Event()
        self._running = threading.Event()
        self._running.set()
        self._finished = threading.Event()
        self._fd: int | None = None
        self._thread = threading.Thread(target=self._run, name=f"feed-{source.name}", daemon=True)

    # -- control -------------------------------------------------------------------------------
    def start(self) -> AudioFeed:
        # O_NONBLOCK open fails with ENXIO when nothing holds the FIFO open for reading (no server).
        try:
            self._fd = os.open(self.source.fifo_path, os.O_WRONLY | os.O_NONBLOCK)
        except OSError as exc:
            raise RuntimeError(f"feed for {self.source.name}: cannot open {self.source.fifo_path}: "
                               f"{exc.strerror} (is the PulseAudio server running?)") from exc
        self._thread.start()
        return self

    def pause(self) -> None:
        """Stop writing until ``resume()``: the capture sees a stalled device."""
        self._running.clear()

    def resume(self) -> None:
        self._running.set()

    @property
    def paused(self) -> bool:
        return not self._running.is_set()

    @property
    def done(self) -> bool:
        """True once the whole signal is written (never with ``loop=True``) or the feed stopped."""
        return self._finished.is_set()

    def wait(self, timeout_s: float) -> bool:
        """Wait until the whole signal is written; False if ``timeout_s`` passed first."""
        return self._finished.wait(timeout_s)

    def stop(self, timeout_s: float = 2.0) -> None:
        """Stop the writer thread and close the FIFO. Raises if the writer had failed."""
        self._stop.set()
        self._running.set()
        if self._thread.is_alive():
            self._thread.join(timeout_s)
            if self._thread.is_alive():
                raise RuntimeError(f"feed for {self.source.name}: writer did not stop in {timeout_s} s")
        if self._fd is not None:
            os.close(self._fd)
            self._fd = None
        if self.error is not None:
            raise RuntimeError(f"feed for {self.source.name} failed: {self.error!r}") from self.error

    # -- writer thread ---------------------------------------------------------------------------
    def _run(self) -> None:
        try:
            self._write_all()
        except BaseException as exc:  # reported by stop()
            self.error = exc
        finally:
            self._finished.set()

    def _write_all(self) -> None:
        frame_bytes = self.source.frame_bytes
        piece_bytes = max(frame_bytes, (select.PIPE_BUF // frame_bytes) * frame_bytes)
        chunk_bytes = self.chunk_frames * frame_bytes
        data = self._bytes
        total = len(data)
        pos = 0
        next_due = time.monotonic()
        while not self._stop.is_set():
            if pos >= total:
                if not self.loop or total == 0:
                    return
                pos = 0
            if not self._running.is_set():
                while not self._running.wait(0.05):
                    if self._stop.is_set():
                        return
                next_due = time.monotonic()  # re-base after a pause: no catch-up burst
            delay = next_due - time.monotonic()
            if delay > 0:
                time.sleep(delay)
            elif delay < -0.1:
                next_due = time.monotonic()  # fell far behind (reader stalled): keep real-time pace
            end = min(pos + chunk_bytes, total)
            while pos < end and not self._stop.is_set():
                piece = data[pos:min(pos + piece_bytes, end)]
                try:
                    written = os.write(self._fd, piece)
                except BlockingIOError:
                    select.select([], [self._fd], [], 0.01)
                    continue
                pos += written
                self.frames_written += written // frame_bytes
            next_due += self.chunk_s


class PulseAudioServer:
    """A private PulseAudio server (user mode, anonymous unix socket) with pipe sources.

    Its environment (``env``: HOME with the ``.asoundrc``, XDG_RUNTIME_DIR, PULSE_RUNTIME_PATH,
    PULSE_SERVER) is what a process needs to see the sources through PortAudio/ALSA; ``process_env()``
    merges it into a copy of ``os.environ`` for a subprocess such as ``rotorwatch run``.
    """

    def __init__(self, root: Path, sources: Iterable[tuple[str, int, int]] = (),
                 ready_timeout_s: float = 10.0) -> None:
        self.root = Path(root)
        self.binary = find_binary("pulseaudio", "pulseaudio", "PulseAudio")
        self.pactl = find_binary("pactl", "pulseaudio-utils", "pactl")
        find_binary("arecord", "alsa-utils")  # the ALSA side; libasound2-plugins gives the pulse PCM
        self.home = self.root / "home"
        self.runtime_dir = self.root / "run"
        self.home.mkdir(parents=True, exist_ok=True)
        self.runtime_dir.mkdir(parents=True, exist_ok=True)
        self.runtime_dir.chmod(0o700)
        self.socket_path = self.runtime_dir / "native"
        if len(str(self.socket_path)) > 100:
            raise ValueError(f"PulseAudio socket path too long for AF_UNIX: {self.socket_path}")
        self.asoundrc = self.home / ".asoundrc"
        self.asoundrc.write_text("# ALSA PCMs for the test PulseAudio pipe sources\n")
        self.log_path = self.root / "pulseaudio.log"
        self.script_path = self.root / "server.pa"
        self.ready_timeout_s = ready_timeout_s
        self.env = {
            "HOME": str(self.home),
            "XDG_RUNTIME_DIR": str(self.runtime_dir),
            "PULSE_RUNTIME_PATH": str(self.runtime_dir),
            "PULSE_SERVER": f"unix:{self.socket_path}",
        }
        self.sources: dict[str, PipeSource] = {}
        self._initial = list(sources)
        self._feeds: list[AudioFeed] = []
        self._proc: subprocess.Popen | None = None

    @property
    def pid(self) -> int | None:
        return self._proc.pid if self._proc is not None and self._proc.poll() is None else None

    def process_env(self, base: Mapping[str, str] | None = None) -> dict[str, str]:
        """A full environment for a subprocess that should capture from the pipe sources."""
        env = dict(os.environ if base is None else base)
        env.update(self.env)
        return env

    def _pactl(self, *args: str) -> subprocess.CompletedProcess:
        return _run([self.pactl, *args], timeout_s=10.0, env=self.process_env())

    @staticmethod
    def _module_args(source: PipeSource) -> list[str]:
        return [f"source_name={source.name}", f"file={source.fifo_path}", "format=float32le",
                f"rate={source.rate_hz}", f"channels={source.channels}",
                f"channel_map={ALSA_CHANNEL_MAPS[source.channels]}"]

    def _new_source(self, name: str, rate_hz: int, channels: int) -> PipeSource:
        if channels not in ALSA_CHANNEL_MAPS:
            raise ValueError(f"pipe source {name}: channels = {channels}: must be one of "
                             f"{sorted(ALSA_CHANNEL_MAPS)} (ALSA pulse plugin channel maps)")
        if not name.replace("_", "").isalnum():
            raise ValueError(f"pipe source name {name!r}: use letters, digits and '_' only")
        return PipeSource(name=name, fifo_path=self.root / f"{name}.f32", rate_hz=int(rate_hz),
                          channels=int(channels))

    def _register(self, source: PipeSource) -> None:
        self.sources[source.name] = source
        with open(self.asoundrc, "a") as rc:
            rc.write(f'pcm.{source.name} {{ type pulse device "{source.name}" }}\n')

    def start(self) -> PulseAudioServer:
        lines = [f"load-module module-native-protocol-unix auth-anonymous=1 socket={self.socket_path}"]
        for name, rate_hz, channels in self._initial:
            source = self._new_source(name, rate_hz, channels)
            lines.append("load-module module-pipe-source " + " ".join(self._module_args(source)))
            self._register(source)
        self.script_path.write_text("\n".join(lines) + "\n")
        server_env = self.process_env()
        server_env.pop("PULSE_SERVER", None)
        self._proc = spawn([self.binary, "--daemonize=no", "--system=no", "--exit-idle-time=-1", "-n",
                            "-F", str(self.script_path), "--use-pid-file=no", "--realtime=no",
                            "--high-priority=no", "--disable-shm=yes",
                            f"--log-target=file:{self.log_path}"],
                           self.root / "pulseaudio.out", env=server_env)
        ready = wait_until(lambda: self._proc.poll() is not None
                           or self._pactl("info").returncode == 0, self.ready_timeout_s, 0.05)
        if not ready or self._proc.poll() is not None:
            rc = stop_process(self._proc)
            pytest.fail(f"PulseAudio did not come up within {self.ready_timeout_s} s (rc={rc}); "
                        f"log {self.log_path}:\n{tail(self.log_path)}\n"
                        f"{tail(self.root / 'pulseaudio.out')}", pytrace=False)
        for source in self.sources.values():
            if not source.fifo_path.exists():
                pytest.fail(f"PulseAudio did not create pipe source FIFO {source.fifo_path}; "
                            f"log:\n{tail(self.log_path)}", pytrace=False)
        return self

    def add_pipe_source(self, name: str, rate_hz: int, channels: int) -> PipeSource:
        """Load one more pipe source into the running server (idempotent for identical settings).

        PortAudio enumerates devices only at initialisation: re-initialise it afterwards (the
        ``audio_device`` fixture does so when it starts).
        """
        source = self._new_source(name, rate_hz, channels)
        known = self.sources.get(name)
        if known is not None:
            if known != source:
                raise ValueError(f"pipe source {name} exists with other settings: {known}")
            return known
        done = self._pactl("load-module", "module-pipe-source", *self._module_args(source))
        if done.returncode != 0:
            pytest.fail(f"pactl load-module module-pipe-source {name} failed: "
                        f"{(done.stderr or done.stdout).strip()}", pytrace=False)
        self._register(source)
        return source

    def feed(self, signal_frames: np.ndarray, source: str | PipeSource, *, loop: bool = False,
             chunk_s: float = 0.01) -> AudioFeed:
        """Start an :class:`AudioFeed` of ``signal_frames`` (frames x channels) into ``source``."""
        src = source if isinstance(source, PipeSource) else self.sources[source]
        feed = AudioFeed(src, signal_frames, loop=loop, chunk_s=chunk_s).start()
        self._feeds.append(feed)
        return feed

    def stop_feeds(self, feeds: Iterable[AudioFeed] | None = None) -> list[str]:
        """Stop feeds (all by default); returns the errors met instead of raising on the first."""
        errors = []
        for feed in list(self._feeds if feeds is None else feeds):
            try:
                feed.stop()
            except RuntimeError as exc:
                errors.append(str(exc))
            if feed in self._feeds:
                self._feeds.remove(feed)
        return errors

    def stop(self, timeout_s: float = 5.0) -> int | None:
        self.stop_feeds()
        proc, self._proc = self._proc, None
        return stop_process(proc, timeout_s=timeout_s)


def make_pulse_root(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A directory for the PulseAudio server whose socket path fits AF_UNIX's ~108-byte limit."""
    root = tmp_path_factory.mktemp("pulse")
    if len(str(root / "run" / "native")) > 100:
        root = Path(tempfile.mkdtemp(prefix="rw-pulse-"))
    return root
