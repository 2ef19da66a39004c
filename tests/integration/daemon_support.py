"""Helpers for the daemon tests: a test configuration derived from the demo machine, a fast scenario,
``rotorwatch run`` as a subprocess, and waiting on its log and its MQTT messages (all bounded).

The configuration is config/demo-fan.toml (the invented demo machine) read with tomllib, with test
overrides: a short analysis window and fewer lines (so one window fills in about a second of signal),
a short update interval, simulated input sped up, absolute latching levels on the drive-end outer-race
envelope band, and MQTT/metrics pointing at the test's broker and a free port. The scenario is written
next to it: an outer-race defect that appears early and grows fast, then (optionally) goes away, so a
latched alarm is left waiting for an acknowledgement. Both are demo data of our own making.
"""

from __future__ import annotations

import copy
import json
import os
import re
import signal
import subprocess
import sys
import time
import tomllib
import urllib.request
from collections.abc import Callable
from pathlib import Path
from typing import Any

REPO_ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(REPO_ROOT / "tests"))

from components import spawn, stop_process, tail, wait_until  # noqa: E402

DEMO_CONFIG = REPO_ROOT / "config" / "demo-fan.toml"
ROTORWATCH = [sys.executable, "-m", "rotorwatch"]


# ----------------------------------------------------------------------------------------- TOML out
def _toml_value(v: Any) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, (int, float)):
        return repr(v)
    if isinstance(v, str):
        return json.dumps(v)
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{ " + ", ".join(f"{k} = {_toml_value(x)}" for k, x in v.items()) + " }"
    raise TypeError(f"cannot write {type(v).__name__} to TOML")


def to_toml(data: dict, prefix: str = "") -> str:
    """A small TOML writer for configuration dictionaries (tables, arrays of tables, scalars, lists)."""
    lines, tables = [], []
    for k, v in data.items():
        if isinstance(v, dict):
            tables.append((k, v, False))
        elif isinstance(v, list) and v and all(isinstance(x, dict) for x in v):
            tables.append((k, v, True))
        else:
            lines.append(f"{k} = {_toml_value(v)}")
    out = "\n".join(lines) + ("\n" if lines else "")
    for k, v, is_array in tables:
        path = f"{prefix}.{k}" if prefix else k
        if is_array:
            for item in v:
                out += f"\n[[{path}]]\n" + to_toml(item, path)
        else:
            out += f"\n[{path}]\n" + to_toml(v, path)
    return out


# ----------------------------------------------------------------------------------------- configs
def demo_config_dict() -> dict:
    return tomllib.loads(DEMO_CONFIG.read_text())


def daemon_config(broker=None, *, prefix: str, speedup: float = 600.0, update_interval_s: float = 0.5,
                mqtt: dict | None = None, metrics: bool = True, acquisition: dict | None = None,
                latching: bool = True) -> dict:
    cfg = copy.deepcopy(demo_config_dict())
    for section in ("mqtt", "metrics", "status_page"):  # the demo's fixed loopback ports: tests pick their own
        cfg.pop(section, None)
    cfg["acquisition"].update({"source": "simulated", "scenario": "scenario.toml", "speedup": speedup,
                               "update_interval_s": update_interval_s})
    cfg["acquisition"].update(acquisition or {})
    cfg["storage"] = {"state_dir": "state"}
    m = cfg["machines"][0]
    m["analysis"].update({"window_s": 1.0, "lines": 1600})
    m["analysis"]["envelope"]["lines"] = 400
    m["alarms"] = {"learning_hours": 1000.0, "min_learning_updates": 1000}  # absolute levels only, in tests
    for band in m["bands"]:
        if band["name"] == "de-outer-race":
            band["levels"] = {"warning": 1.0, "alarm": 2.0, "on_delay_updates": 1, "latching": latching,
                              "clear_margin_pct": 10.0}
    if broker is not None:
        cfg["mqtt"] = {"host": broker.host, "port": broker.port, "topic_prefix": prefix,
                       "metrics_interval_s": 1.0, "reconnect_min_s": 0.5, "reconnect_max_s": 2.0,
                       "keepalive_s": 5, **(mqtt or {})}
    if metrics:
        cfg["metrics"] = {"bind": "127.0.0.1", "port": 0}
    return cfg


def fast_fault_scenario(*, appear_day: float = 0.02, gone_day: float | None = None, peak_m_s2: float = 80.0) -> dict:
    """An outer-race defect on the fan drive end that steps in at ``appear_day`` (and out at ``gone_day``)."""
    changes = [{"start_day": appear_day, "component": "outer_race",
                "bearing": "fan-de", "points": ["de-h"], "to": peak_m_s2, "shape": "step"}]
    if gone_day is not None:
        changes.append({"start_day": gone_day, "component": "outer_race",
                        "bearing": "fan-de", "points": ["de-h"], "to": 0.0, "shape": "step"})
    return {"scenario": {"name": "test: fast outer-race defect", "config": "rotorwatch.toml", "duration_days": 3.0,
                         "seed": 11}, "change": changes}


def write_setup(tmp_path: Path, config: dict, scenario: dict | None = None) -> Path:
    path = tmp_path / "rotorwatch.toml"
    path.write_text(to_toml(config))
    (tmp_path / "scenario.toml").write_text(to_toml(scenario if scenario is not None else fast_fault_scenario()))
    return path


# ----------------------------------------------------------------------------------------- process
class DaemonProcess:
    """``rotorwatch run`` in a subprocess; its stderr goes to ``log_path``. Stopped by its PID."""

    def __init__(self, config_path: Path, *extra: str, env: dict | None = None):
        self.config_path = config_path
        self.log_path = config_path.parent / "daemon.log"
        argv = [*ROTORWATCH, "run", "--config", str(config_path), *extra]
        full_env = dict(os.environ)
        full_env.pop("NOTIFY_SOCKET", None)
        full_env.update(env or {})
        self.started = time.monotonic()
        self.proc: subprocess.Popen = spawn(argv, self.log_path, env=full_env, cwd=config_path.parent)

    @property
    def pid(self) -> int:
        return self.proc.pid

    def alive(self) -> bool:
        return self.proc.poll() is None

    def log(self) -> str:
        try:
            return self.log_path.read_text(errors="replace")
        except OSError:
            return ""

    def wait_log(self, pattern: str, timeout_s: float = 20.0) -> re.Match | None:
        rx = re.compile(pattern, re.M)
        return wait_until(lambda: rx.search(self.log()) or (not self.alive() and rx.search(self.log())),
                          timeout_s, interval_s=0.05) or None

    def metrics_port(self, timeout_s: float = 20.0) -> int:
        m = self.wait_log(r"metrics endpoint listening addr=\S+ port=(\d+)", timeout_s)
        assert m, f"no metrics port in the log:\n{tail(self.log_path)}"
        return int(m.group(1))

    def scrape(self, timeout_s: float = 5.0) -> str:
        with urllib.request.urlopen(f"http://127.0.0.1:{self.metrics_port()}/metrics", timeout=timeout_s) as r:
            return r.read().decode()

    def signal(self, sig: int) -> None:
        os.kill(self.proc.pid, sig)

    def wait(self, timeout_s: float) -> int | None:
        try:
            return self.proc.wait(timeout=timeout_s)
        except subprocess.TimeoutExpired:
            return None

    def stop(self, timeout_s: float = 10.0) -> int | None:
        return stop_process(self.proc, timeout_s=timeout_s, sig=signal.SIGTERM)

    def describe(self) -> str:
        return f"daemon rc={self.proc.poll()} log:\n{tail(self.log_path, 40)}"


# ----------------------------------------------------------------------------------------- MQTT
def messages(listener, topic: str | None = None, pred: Callable[[Any], bool] | None = None) -> list:
    return [m for m in list(listener.messages) if (topic is None or m.topic == topic) and (pred is None or pred(m))]


def wait_message(listener, topic: str, pred: Callable[[Any], bool] | None = None, timeout_s: float = 20.0):
    found = wait_until(lambda: messages(listener, topic, pred), timeout_s, interval_s=0.05)
    return found[0] if found else None


def as_json(msg) -> Any:
    return json.loads(msg.payload.decode())


def json_pred(**want) -> Callable[[Any], bool]:
    def pred(msg) -> bool:
        try:
            body = as_json(msg)
        except ValueError:
            return False
        return isinstance(body, dict) and all(body.get(k) == v for k, v in want.items())

    return pred


def run_daemon_in_thread(d, timeout_s: float = 60.0) -> int | None:
    """Run an in-process Daemon to its end in a thread, bounded: asked to stop after ``timeout_s``
    (then given 10 s more). Returns its exit status (None when it never returned)."""
    import threading

    result: dict = {}
    t = threading.Thread(target=lambda: result.setdefault("rc", d.run()))
    t.start()
    t.join(timeout_s)
    if t.is_alive():
        d.request_stop("test timeout")
        t.join(10)
    return result.get("rc")
