"""Round trip: the daemon's own evidence, replayed, gives what the daemon saw.

``rotorwatch run`` on the simulated demo machine (the daemon tests' set-up: a fast outer-race defect of our
own making, absolute levels on the drive-end outer-race envelope band) with a snapshot of every update
(``storage.snapshots.every_update``); then ``rotorwatch replay --history`` of its state folder. Every
update the live run logged in a snapshot sidecar must come back with the same time, the same machine,
point and value states, and the same values (to float32 rounding: snapshots keep the waveform as float32).
"""

from __future__ import annotations

import json
import subprocess
import sys

import pytest

from .daemon_support import DaemonProcess, daemon_config, write_setup

pytestmark = pytest.mark.integration

UPDATES = 14


def test_replay_of_the_daemons_snapshots_matches_the_live_run(tmp_path):
    cfg = daemon_config(None, prefix="rt", metrics=False, latching=False)
    cfg["storage"]["snapshots"] = {"every_update": True}
    path = write_setup(tmp_path, cfg)
    d = DaemonProcess(path, "--max-updates", str(UPDATES))
    try:
        rc = d.wait(120.0)
    finally:
        d.stop()
    assert rc == 0, d.describe()
    sidecars = sorted((tmp_path / "state" / "snapshots").glob("*/snapshot.json"))
    live = [json.loads(p.read_text()) for p in sidecars]
    assert len(live) >= UPDATES - 1, d.describe()  # the first round may have no full window yet
    assert any(s["machine_state"] in ("warning", "alarm") for s in live), "the defect should show in the live run"

    out = subprocess.run([sys.executable, "-m", "rotorwatch", "replay", "--config", str(path), "--history",
                          str(tmp_path / "state"), "--format", "jsonl", "--workers", "2"],
                         capture_output=True, text=True, timeout=300, cwd=tmp_path)
    assert out.returncode == 0, out.stderr
    replayed = {u["time_s"]: u for u in map(json.loads, out.stdout.splitlines()) if u["type"] == "update"}
    assert len(replayed) == len(live)
    for snap in live:
        r = replayed[snap["time_s"]]
        assert r["state"] == snap["machine_state"], snap["id"]
        for pid, point in snap["points"].items():
            rp = r["points"][pid]
            assert rp["state"] == point["state"], (snap["id"], pid)
            for name, v in point["values"].items():
                assert rp["values"][name]["state"] == v["state"], (snap["id"], pid, name)
                assert rp["values"][name]["value"] == pytest.approx(v["value"], rel=1e-5, abs=1e-9), (snap["id"], pid, name)
