"""Torn state after a power cut: copies of the state folder taken while the daemon writes must all start.

A power cut leaves the disk as it was at some instant, with the last writes possibly cut short. The
test imitates that without pulling a plug: ``rotorwatch run`` writes its state folder (trend store,
publish spool with no broker reachable, baselines learning, snapshots on every sensor fault); at
random instants the folder is copied file by file (so the copy's files are from slightly different
moments, as after a cut), and the copy's most recently written file and one other file are truncated
at random lengths; in every other copy ``spool.sqlite`` is also cut, at a random length or (every
fourth copy) inside its first page (a damaged spool is set aside like the trend store).
Then a daemon is started on each copy (``--max-updates``) and must:

- exit 0 after its updates (it started and kept monitoring),
- print no traceback,
- name every file it set aside in one warning line (not one per update).

The counts (copies, files truncated, which recovery each needed) are printed; run with ``-s`` to see
them. Everything is bounded: the number of copies, each daemon's run (``--max-updates``, a timeout),
and every process is stopped by its own PID. The scenario is demo data of our own making.
"""

from __future__ import annotations

import collections
import os
import re
import shutil
import subprocess
import time
from pathlib import Path

import numpy as np
import pytest

from components import free_port

from .daemon_support import ROTORWATCH, DaemonProcess, daemon_config, write_setup
from .test_soak_short import unplugging_scenario

pytestmark = pytest.mark.integration

COPIES = 8
TRUNCATED_PER_COPY = 2
RECOVERY = re.compile(r"^.*(?:set aside|moved aside).*$", re.M)
SEED = 20261205


def copy_state(src: Path, dst: Path) -> list[Path]:
    """Copy ``src`` file by file (files that vanish mid-copy are skipped); the copies, newest write first."""
    copied = []
    for root, _dirs, files in os.walk(src):
        rel = Path(root).relative_to(src)
        (dst / rel).mkdir(parents=True, exist_ok=True)
        for name in files:
            if name.endswith(".lock"):
                continue
            try:
                shutil.copy2(Path(root) / name, dst / rel / name)
            except FileNotFoundError:
                continue
            copied.append(dst / rel / name)
    return sorted(copied, key=lambda p: p.stat().st_mtime_ns, reverse=True)


def classify(line: str) -> str:
    for key in ("trends.sqlite", "spool.sqlite", "baselines", "snapshot"):
        if key in line:
            return key
    return "other"


def test_every_torn_copy_of_the_state_folder_starts(tmp_path):
    rng = np.random.default_rng(SEED)
    cfg = daemon_config(None, prefix="crash", speedup=1.0, update_interval_s=0.1, metrics=False)
    cfg["mqtt"] = {"host": "127.0.0.1", "port": free_port(), "reconnect_min_s": 1.0, "reconnect_max_s": 2.0}
    cfg["machines"][0]["alarms"] = {"learning_hours": 0.002, "min_learning_updates": 5}
    cfg["storage"].update({
        "trends": {"min_interval_s": 0.0, "flush_interval_s": 1.0, "prune_interval_s": 5.0, "max_rows": 5000},
        "snapshots": {"quota_bytes": 2 * 1024 * 1024, "on_transition_to": ["sensor_fault"], "min_interval_s": 0.0},
    })
    path = write_setup(tmp_path, cfg, unplugging_scenario(n=8, every_s=3.0, for_s=1.0))
    state = tmp_path / "state"
    writer = DaemonProcess(path, "--duration", "60")
    copies: list[tuple[Path, list[str]]] = []
    n_torn = 0
    try:
        assert writer.wait_log(r"snapshot saved", 40), writer.describe()
        for k in range(COPIES):
            time.sleep(float(rng.uniform(0.2, 1.5)))
            dst = tmp_path / f"copy-{k}"
            files = copy_state(state, dst)
            picked = files[:TRUNCATED_PER_COPY - 1]
            picked.append(files[int(rng.integers(len(picked), len(files)))])  # and one older file
            spool = dst / "spool.sqlite"
            if k % 2 == 1 and spool.exists() and spool not in picked:
                picked.append(spool)
            torn = []
            for f in picked:
                size = f.stat().st_size
                # the spool cut inside its first page in every fourth copy (a header sqlite cannot read)
                first_page = f == spool and k % 4 == 1
                cut = int(rng.integers(1, min(size, 4096))) if first_page else int(rng.integers(0, size + 1))
                os.truncate(f, cut)
                torn.append(f"{f.relative_to(dst)} {size}->{cut}")
            copies.append((dst, torn))
            n_torn += len(torn)
    finally:
        writer.stop()
    assert "Traceback" not in writer.log(), writer.log()

    needed: collections.Counter[str] = collections.Counter()
    for dst, torn in copies:
        proc = subprocess.run([*ROTORWATCH, "run", "--config", str(path), "--state-dir", str(dst),
                               "--max-updates", "5"], cwd=path.parent, capture_output=True, text=True,
                              timeout=120, stdin=subprocess.DEVNULL)
        out = proc.stdout + proc.stderr
        assert proc.returncode == 0, f"{dst.name} (torn: {torn}) did not run:\n{out[-3000:]}"
        assert "Traceback" not in out, out
        lines = RECOVERY.findall(out)
        kinds = [classify(line) for line in lines]
        named = [re.search(rf"{re.escape(str(dst))}/(\S+?)(?:\s|$)", line) for line in lines]
        assert all(named), lines  # every recovery line names the file it set aside
        assert len({m.group(1) for m in named if m}) == len(lines), lines  # one line per file
        needed.update(kinds or ["none"])
        print(f"{dst.name}: torn {torn}; recovery: {kinds or 'none'}")
    print(f"crash consistency: {len(copies)} copies, {n_torn} files truncated "
          f"({sum(1 for _, t in copies if any(x.startswith('spool.sqlite ') for x in t))} copies with spool.sqlite cut); "
          f"recoveries needed: {dict(needed)}")
    assert len(copies) == COPIES
