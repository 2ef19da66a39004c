"""What a new user meets in the first hour: ``rotorwatch run`` as a subprocess, on the shipped examples.

- ``run --once`` on a configuration that ``run`` refuses ends at once with exit 2 and one line naming
  the fix (before: it logged the problem and retried for ever);
- a finished simulation is never started again: the daemon says the scenario has ended, in those
  words, and holds the last state (on the status page and in the metrics) instead of turning back
  into a healthy machine; the page and the metrics say that time is simulated and sped up;
- every shipped configuration has a ``run`` example in its comments, and it works as printed.
"""

from __future__ import annotations

import json
import re
import shlex
import subprocess
import sys
import urllib.request
from pathlib import Path

import pytest

from components import free_port, wait_until

from .daemon_support import DaemonProcess, daemon_config, write_setup

pytestmark = pytest.mark.integration

REPO = Path(__file__).resolve().parents[2]
ROTORWATCH = [sys.executable, "-m", "rotorwatch"]


def _run(*argv: str, timeout_s: float = 90.0, cwd: Path = REPO) -> subprocess.CompletedProcess:
    return subprocess.run([*ROTORWATCH, *argv], capture_output=True, text=True, timeout=timeout_s, cwd=cwd,
                          stdin=subprocess.DEVNULL)


def test_run_once_fails_fast_on_what_the_source_refuses(tmp_path):
    rig = REPO / "config" / "university-rig.toml"
    done = _run("run", "--config", str(rig), "--once", "--state-dir", str(tmp_path / "s"))
    errors = [line for line in done.stderr.splitlines() if line.startswith("rotorwatch: ")]
    assert done.returncode == 2, done.stderr[-2000:]
    assert "Traceback" not in done.stderr
    assert len(errors) == 1 and errors[0].startswith(f"rotorwatch: {rig}: acquisition.recording"), done.stderr
    assert "--set 'acquisition.recording=" in errors[0]
    missing = tmp_path / "missing.npz"
    done = _run("run", "--config", str(rig), "--once", "--state-dir", str(tmp_path / "s"),
                "--set", f'acquisition.recording="{missing}"')
    assert done.returncode == 2 and f"rotorwatch: {missing}: no such file" in done.stderr


def test_run_once_fails_fast_when_the_input_cannot_start(tmp_path):
    """A sound interface that is not there: a daemon retries it with back-off, --once ends with exit 2."""
    cfg = daemon_config(prefix="unused", metrics=False)
    cfg["acquisition"] = {"source": "soundcard", "device": "rw-no-such-device", "sample_rate_hz": 51200,
                          "channels": 2}
    path = write_setup(tmp_path, cfg)
    done = _run("run", "--config", str(path), "--once", cwd=tmp_path)
    errors = [line for line in done.stderr.splitlines() if line.startswith("rotorwatch: ")]
    assert done.returncode == 2, done.stderr[-2000:]
    assert len(errors) == 1 and errors[0].startswith("rotorwatch: input soundcard: "), done.stderr[-2000:]


def _get_json(url: str) -> dict:
    with urllib.request.urlopen(url, timeout=5.0) as r:
        return json.loads(r.read())


def test_a_finished_simulation_holds_its_last_state_and_says_so(tmp_path):
    port = free_port()
    cfg = daemon_config(prefix="unused", speedup=2000.0, update_interval_s=1.0)
    cfg["status_page"] = {"bind": "127.0.0.1", "port": port}
    scenario = {"scenario": {"name": "test: a short healthy run", "config": "rotorwatch.toml",
                             "duration_days": 0.05, "seed": 5}}  # 72 min: ended within a few segments
    d = DaemonProcess(write_setup(tmp_path, cfg, scenario), "--duration", "120")
    try:
        ended = d.wait_log(r"input ended: the simulated scenario has ended \(acquisition\.loop = false\); "
                           r"the last state is held", timeout_s=90)
        assert ended, d.describe()
        assert "a recording without loop" not in d.log()
        base = f"http://127.0.0.1:{port}"
        ov = _get_json(base + "/api/overview")
        assert ov["input"]["state"] == "ended" and ov["input"]["clock"] == "simulated"
        assert ov["input"]["notice"] == "simulated time, x2000"
        held = ov["machines"][0]
        assert held["state"] == "learning" and held["time_s"] is not None
        # the source is not started again: nothing new is analysed, the state and its time stay as they were
        assert not wait_until(lambda: d.wait_log(r"source started", 0.1) and
                              len(re.findall(r"source started", d.log())) > 1, 8.0, 0.5)
        later = _get_json(base + "/api/overview")["machines"][0]
        assert (later["state"], later["time_s"]) == (held["state"], held["time_s"])
        assert "-> no_data" not in d.log()  # the held state is never replaced by "no data"
        metrics = urllib.request.urlopen(f"http://127.0.0.1:{d.metrics_port()}/metrics", timeout=5).read().decode()
        assert re.search(r'rotorwatch_clock_info\{[^}]*clock="simulated"[^}]*notice="simulated time, x2000"', metrics)
    finally:
        d.stop()


def _run_examples(path: Path) -> list[str]:
    """The ``rotorwatch run`` commands written in a configuration file's comments."""
    return [m.group(1) for m in re.finditer(r"^#\s+((?:\.venv/bin/)?rotorwatch run .*)$", path.read_text(), re.M)]


@pytest.mark.parametrize("path", sorted((REPO / "config").glob("*.toml")), ids=lambda p: p.name)
def test_every_shipped_config_has_a_run_example_that_works_as_printed(path, tmp_path, request):
    examples = _run_examples(path)
    assert examples, f"{path.name}: no 'rotorwatch run' example in its comments"
    for text in examples:
        argv = shlex.split(text)
        assert "--once" in argv or "--max-updates" in argv, f"{path.name}: the example should end by itself: {text}"
        if "shared/datasets" in text:
            request.getfixturevalue("shared_datasets")  # skips in a user's clone, fails in CI without it
        argv = [a.replace("var/try", str(tmp_path / "state")) for a in argv[1:]]  # keep var/ of the checkout clean
        if "--state-dir" not in argv:
            argv += ["--state-dir", str(tmp_path / "state")]
        done = _run(*argv, timeout_s=120)
        assert done.returncode == 0, f"{text}\n{done.stderr[-2000:]}"
        assert "rotorwatch stopped updates=1" in done.stderr
