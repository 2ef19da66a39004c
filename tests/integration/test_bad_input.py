"""Bad input gets a clear one-line error or a reported state: never a traceback, a hang or a dead daemon.

- The corpus ``tests/cases/bad-configs/*.toml`` (``rotorwatch check``) and ``tests/cases/bad-scenarios/*.toml``
  (``rotorwatch replay --scenario``): each file says what it breaks and carries ``# expect: <text>``;
  the command exits 2, prints no traceback and one line per problem, each naming the file at fault
  (the case itself, or the file its ``# file:`` line names) and one containing the expected text.
- Damaged WAV files for ``rotorwatch analyze`` (truncated, header only, empty, garbage, NaN samples):
  exit 2 with one line naming the file.
- The running daemon (``rotorwatch run`` as a subprocess) keeps going and reports the problem when its
  input is bad or goes away: a corrupt recording, a recording truncated while it plays, a raw TCP
  stream whose peer closes the connection; each comes back when the input does.
- Fuzzed MQTT command payloads (hypothesis: random bytes, random JSON, known keys with wrong types,
  huge payloads) published to a running daemon's command topic against a real mosquitto: every one
  gets an error result whose message is the command parser's own, and the daemon still publishes and
  its metrics endpoint still answers.

Every wait is bounded; daemons are stopped by their PIDs.
"""

from __future__ import annotations

import json
import re
import socket
import subprocess
import threading
import time
import uuid
from pathlib import Path

import numpy as np
import pytest
import soundfile
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from components import MqttListener, wait_until

from .daemon_support import ROTORWATCH, DaemonProcess, as_json, daemon_config, messages, wait_message, write_setup

pytestmark = pytest.mark.integration

REPO = Path(__file__).resolve().parents[2]
CASES = REPO / "tests" / "cases"
BAD_CONFIGS = sorted((CASES / "bad-configs").glob("*.toml"))
BAD_SCENARIOS = sorted((CASES / "bad-scenarios").glob("*.toml"))
AGENT = "halden-ef3"


# ----------------------------------------------------------------------------------------- corpus
def directives(path: Path) -> dict[str, str]:
    """``# expect: ...`` and ``# file: ...`` from the head of a case file (read as bytes: some are not UTF-8)."""
    out = {}
    for raw in path.read_bytes().splitlines()[:5]:
        m = re.match(rb"#\s*(expect|file):\s*(.+?)\s*$", raw)
        if m:
            out[m.group(1).decode()] = m.group(2).decode()
    return out


def run_cli(*args: str, timeout_s: float = 60.0) -> subprocess.CompletedProcess:
    return subprocess.run([*ROTORWATCH, *args], capture_output=True, text=True, errors="replace",
                          timeout=timeout_s, cwd=REPO, stdin=subprocess.DEVNULL)


def check_one_line_errors(done: subprocess.CompletedProcess, case: Path, named: Path, expect: str) -> list[str]:
    assert done.returncode == 2, (done.returncode, done.stdout[-500:], done.stderr[-500:])
    assert "Traceback" not in done.stdout + done.stderr
    lines = done.stderr.strip().splitlines()
    assert lines, "no error line at all"
    for line in lines:
        # where -> what: "rotorwatch: FILE: field = value: what is wrong"
        assert line.startswith(f"rotorwatch: {named}: "), line
        assert len(line) < 400, line
    assert any(expect in line for line in lines), f"{case.name}: no line contains {expect!r}:\n" + "\n".join(lines)
    return lines


def test_corpus_is_complete():
    assert len(BAD_CONFIGS) >= 20 and len(BAD_SCENARIOS) >= 15
    for case in BAD_CONFIGS + BAD_SCENARIOS:
        assert directives(case).get("expect"), f"{case}: no '# expect:' line"


@pytest.mark.parametrize("case", BAD_CONFIGS, ids=[p.stem for p in BAD_CONFIGS])
def test_bad_config_gets_its_one_line_error(case):
    d = directives(case)
    named = (case.parent / d["file"]).resolve() if "file" in d else case
    lines = check_one_line_errors(run_cli("check", str(case)), case, named, d["expect"])
    if case.stem == "inline-password":
        assert not any("s3cret-in-the-file" in line for line in lines)  # a secret is never echoed


@pytest.mark.parametrize("case", BAD_SCENARIOS, ids=[p.stem for p in BAD_SCENARIOS])
def test_bad_scenario_gets_its_one_line_error(case):
    d = directives(case)
    named = (case.parent / d["file"]).resolve() if "file" in d else case
    check_one_line_errors(run_cli("replay", "--scenario", str(case)), case, named, d["expect"])


# ----------------------------------------------------------------------------------------- WAV files
FS_HZ = 51200


def demo_volts(seconds: float, channels: int = 2, seed: int = 1) -> np.ndarray:
    """A running machine at the input, invented: 24.7 Hz at 10 mV plus broadband noise, volts."""
    rng = np.random.default_rng(seed)
    t = np.arange(int(seconds * FS_HZ)) / FS_HZ
    cols = [0.01 * np.sin(2 * np.pi * 24.7 * t + c) + 0.003 * rng.standard_normal(t.size) for c in range(channels)]
    return np.stack(cols, axis=1).astype(np.float32)


def damaged_wavs(folder: Path) -> dict[str, tuple[Path, str]]:
    folder.mkdir(parents=True, exist_ok=True)
    good = folder / "good.wav"
    soundfile.write(good, demo_volts(4.0, 1)[:, 0] * 10, FS_HZ, subtype="FLOAT")  # in g for analyze
    data = good.read_bytes()
    cases = {
        "truncated": (data[: len(data) // 2], "truncated: the header declares"),
        "header-only": (data[:44], "not a readable sound file"),
        "zero-bytes": (b"", "not a readable sound file"),
        "text": (b"this is a note, not a recording\n", "not a readable sound file"),
        "garbage": (np.random.default_rng(3).bytes(6000), "not a readable sound file"),
        "broken-fmt": (b"RIFX" + data[4:], "not a readable sound file"),
    }
    out = {}
    for name, (blob, expect) in cases.items():
        p = folder / f"{name}.wav"
        p.write_bytes(blob)
        out[name] = (p, expect)
    nan = folder / "nan.wav"
    soundfile.write(nan, np.full(FS_HZ * 2, np.nan, np.float32), FS_HZ, subtype="FLOAT")
    out["nan"] = (nan, "not finite")
    return out


def test_damaged_wavs_for_analyze_are_one_line_errors(tmp_path):
    for name, (path, expect) in damaged_wavs(tmp_path).items():
        done = run_cli("analyze", str(path), "--rpm", "1482", "--unit", "g")
        lines = check_one_line_errors(done, path, path, expect)
        assert len(lines) == 1, (name, lines)


# ----------------------------------------------------------------------------------------- daemon
def metric(text: str, name: str, **labels: str) -> float | None:
    for line in text.splitlines():
        if not line.startswith(name + "{") and not line.startswith(name + " "):
            continue
        if all(f'{k}="{v}"' in line for k, v in labels.items()):
            return float(line.rsplit(" ", 1)[1])
    return None


def scrape(d: DaemonProcess) -> str:
    try:
        return d.scrape()
    except OSError:
        return ""


def recording_daemon(tmp_path: Path, recording: str) -> DaemonProcess:
    cfg = daemon_config(None, prefix="x", speedup=1.0, update_interval_s=0.5,
                        acquisition={"source": "recording", "recording": recording, "loop": True})
    del cfg["acquisition"]["scenario"]
    return DaemonProcess(write_setup(tmp_path, cfg))


def no_data_now(d: DaemonProcess) -> bool:
    text = scrape(d)
    return metric(text, "rotorwatch_source_up") == 0 and \
        metric(text, "rotorwatch_point_state", point="de-h", state="no_data") == 1


def test_corrupt_recording_is_reported_and_the_daemon_keeps_running(tmp_path):
    (tmp_path / "rec.wav").write_bytes(b"RIFF\x00\x00\x00\x00WAVEnot a recording at all")
    d = recording_daemon(tmp_path, "rec.wav")
    try:
        m = d.wait_log(r"^WARNING service\.capture source unavailable .*not a readable sound file", 20)
        assert m, d.describe()
        assert wait_until(lambda: no_data_now(d), 15), d.describe()
        assert d.alive()
    finally:
        rc = d.stop()
    assert rc == 0 and "Traceback" not in d.log()
    assert len([ln for ln in d.log().splitlines() if "source unavailable" in ln]) == 1  # said once, counted after


def test_recording_truncated_while_playing_is_reported_then_recovers(tmp_path):
    rec = tmp_path / "rec.wav"
    soundfile.write(rec, demo_volts(3.0), FS_HZ, subtype="FLOAT")
    whole = rec.read_bytes()
    d = recording_daemon(tmp_path, "rec.wav")
    try:
        assert wait_until(lambda: (metric(scrape(d), "rotorwatch_updates_total", machine="ef3") or 0) >= 2, 30), \
            d.describe()
        with open(rec, "r+b") as f:  # the file is cut short under the running daemon (a disk problem)
            f.truncate(200)
        assert d.wait_log(r"^WARNING service\.capture source unavailable", 20), d.describe()
        assert wait_until(lambda: no_data_now(d), 20), d.describe()
        assert re.search(r"source unavailable .*(truncated|read failed|no samples|not a readable)", d.log()), d.describe()
        n = metric(scrape(d), "rotorwatch_updates_total", machine="ef3")
        rec.write_bytes(whole)  # the complete copy is back
        assert wait_until(lambda: metric(scrape(d), "rotorwatch_source_up") == 1
                          and metric(scrape(d), "rotorwatch_updates_total", machine="ef3") > n, 40), d.describe()
        assert d.alive()
    finally:
        rc = d.stop()
    assert rc == 0 and "Traceback" not in d.log()


class DroppingFrameServer:
    """A TCP server sending float32 frames at real-time pace (a DAQ bridge). ``refuse()`` closes the
    current connection and every new one at once (the peer goes away); ``accept()`` serves again."""

    def __init__(self, channels: int = 2):
        self.channels = channels
        self.sock = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
        self.sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        self.sock.bind(("127.0.0.1", 0))
        self.sock.listen(4)
        self.sock.settimeout(0.1)
        self.port = self.sock.getsockname()[1]
        self.serving = threading.Event()
        self.serving.set()
        self._stop = threading.Event()
        self.connections = 0
        self._thread = threading.Thread(target=self._run, daemon=True)
        self._thread.start()

    def refuse(self) -> None:
        self.serving.clear()

    def accept(self) -> None:
        self.serving.set()

    def _run(self) -> None:
        block = demo_volts(1.0, self.channels)
        chunk = 2048
        while not self._stop.is_set():
            try:
                conn, _ = self.sock.accept()
            except TimeoutError:
                continue
            self.connections += 1
            t_next, k = time.monotonic(), 0
            with conn:
                while not self._stop.is_set() and self.serving.is_set():
                    i = (k * chunk) % (block.shape[0] - chunk)
                    try:
                        conn.sendall(block[i:i + chunk].astype("<f4").tobytes())
                    except OSError:
                        break
                    k += 1
                    t_next += chunk / FS_HZ
                    time.sleep(max(0.0, t_next - time.monotonic()))

    def close(self) -> None:
        self._stop.set()
        self._thread.join(5)
        self.sock.close()


def test_raw_stream_peer_closing_is_reported_then_reconnected(tmp_path):
    server = DroppingFrameServer()
    cfg = daemon_config(None, prefix="x", speedup=1.0, update_interval_s=0.5,
                        acquisition={"source": "stdin", "device": f"tcp:127.0.0.1:{server.port}"})
    del cfg["acquisition"]["scenario"]
    d = DaemonProcess(write_setup(tmp_path, cfg))
    try:
        assert wait_until(lambda: (metric(scrape(d), "rotorwatch_updates_total", machine="ef3") or 0) >= 2, 30), \
            d.describe()
        server.refuse()
        assert d.wait_log(r"^WARNING service\.capture source unavailable .*peer closed the connection", 20), \
            d.describe()
        assert wait_until(lambda: no_data_now(d), 20), d.describe()
        n = metric(scrape(d), "rotorwatch_updates_total", machine="ef3")
        server.accept()
        assert wait_until(lambda: metric(scrape(d), "rotorwatch_source_up") == 1
                          and metric(scrape(d), "rotorwatch_updates_total", machine="ef3") > n, 40), d.describe()
        assert server.connections >= 2 and d.alive()
    finally:
        rc = d.stop()
        server.close()
    assert rc == 0 and "Traceback" not in d.log()


# ----------------------------------------------------------------------------------------- fuzzing
KNOWN_KEYS = ("command", "machine", "point", "value", "id")
json_values = st.recursive(
    st.none() | st.booleans() | st.integers() | st.floats(allow_nan=False) | st.text(max_size=40),
    lambda kids: st.lists(kids, max_size=5) | st.dictionaries(st.text(max_size=10), kids, max_size=5),
    max_leaves=20,
)
wrong_types = st.fixed_dictionaries(
    {"command": st.one_of(st.integers(), st.floats(allow_nan=False), st.lists(st.text(max_size=5)), st.none(),
                          st.sampled_from(["acknowledge", "snapshot", "reload", "ACK", "rm -rf", ""]))},
    optional={k: json_values for k in KNOWN_KEYS[1:]},
)
payloads = st.one_of(
    st.binary(max_size=300),
    json_values.map(lambda v: json.dumps(v).encode()),
    wrong_types.map(lambda v: json.dumps(v).encode()),
    st.integers(4097, 300_000).map(lambda n: b'{"command": "snapshot", "pad": "' + b"x" * n + b'"}'),
    st.text(max_size=200).map(lambda s: s.encode("utf-8", "surrogatepass")),
)


def test_fuzzed_commands_get_error_results_and_the_daemon_survives(mosquitto_broker, tmp_path):
    from rotorwatch.service.commands import CommandRejected, parse_command
    from rotorwatch.settings.loading import load_config

    prefix = f"rwfuzz-{uuid.uuid4().hex[:8]}"
    root = f"{prefix}/{AGENT}"
    cfg = daemon_config(mosquitto_broker, prefix=prefix, mqtt={"metrics_interval_s": 0.5})
    path = write_setup(tmp_path, cfg)
    config = load_config(path)
    listener = MqttListener(mosquitto_broker, topics=[f"{root}/#"]).connect()
    d = DaemonProcess(path)
    sent = {"n": 0, "valid": 0}
    try:
        assert wait_message(listener, f"{root}/machine/ef3/state", timeout_s=30), d.describe()

        @settings(max_examples=60, deadline=None, database=None,
                  suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
        @given(payload=payloads)
        def one(payload: bytes) -> None:
            before = len(messages(listener, f"{root}/command/result"))
            info = listener.client.publish(f"{root}/command", payload, qos=1)
            info.wait_for_publish(5)
            sent["n"] += 1
            got = wait_until(lambda: len(messages(listener, f"{root}/command/result")) > before, 10)
            assert got, f"no result for {payload[:80]!r}\n{d.describe()}"
            result = as_json(messages(listener, f"{root}/command/result")[before])
            try:
                parse_command(payload, config)
            except CommandRejected as e:
                assert result["ok"] is False and result["message"] == str(e), (payload[:80], result)
            else:  # the fuzzer found a well-formed, documented command: it is carried out
                sent["valid"] += 1
                assert result["command"] in ("acknowledge", "snapshot", "reload"), result

        one()
        # a payload larger than anything above, once
        listener.client.publish(f"{root}/command", b"[" + b"1," * 600_000 + b"1]", qos=1).wait_for_publish(10)
        assert wait_until(lambda: any("exceeds" in as_json(m)["message"]
                                      for m in messages(listener, f"{root}/command/result")), 10), d.describe()
        # still alive: still publishing and still answering on /metrics
        n = len(messages(listener, f"{root}/machine/ef3/point/de-h/state"))
        assert wait_until(lambda: len(messages(listener, f"{root}/machine/ef3/point/de-h/state")) > n, 15), \
            d.describe()
        text = d.scrape()
        rejected = metric(text, "rotorwatch_commands_total", result="rejected")
        assert rejected is not None and rejected >= sent["n"] - sent["valid"], text
        assert d.alive()
    finally:
        listener.close()
        rc = d.stop()
    print(f"\n[fuzz] {sent['n']} fuzzed command payloads (+1 of 1.2 MB), {sent['valid']} happened to be valid; "
          f"every one answered; daemon exit {rc}")
    assert rc == 0
    assert "Traceback" not in d.log()
