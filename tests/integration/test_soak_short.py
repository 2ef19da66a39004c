"""The short soak: ``rotorwatch run`` for 450 updates with small storage bounds, so every bound is reached
and its pruning works while the daemon runs; memory stays flat and every file stays within its bound.

The set-up (demo data of our own making): the demo fan at real-time pace, an update every 0.1 s; the
drive-end sensor unplugged for 2 s every 6 s (a sensor_fault transition each time, and a snapshot,
``on_transition_to = ["sensor_fault"]``); MQTT pointed at a port where no broker listens, so every
record stays in the spool. The bounds are the smallest the configuration accepts: spool 64 KiB, trend
store 1000 rows, snapshot quota 1 MiB (about two snapshots).

Checked after the warm-up (the first 250 updates, 25 s: imports, first allocations, sqlite caches, and
the simulator's noise-block cache, an ``lru_cache`` of 64 blocks of 2^16 samples = 32 MiB, which four
noise streams at 51.2 kHz fill in about 20 s; a real input has no such cache):

- resident memory grows by less than 15 MB over the remaining 200 updates (VmRSS from /proc, sampled);
- the spool holds at most ``max_bytes`` of records and ``max_records`` rows, and dropped what did not
  fit (counted by reason); the trend store holds at most ``max_rows`` and pruned; the snapshots stay
  within the quota and the oldest were deleted; the files on disk stay within the sizes those bounds
  imply (deploy/data-guarantees.md: spool file about 1.3 x ``max_bytes`` plus the WAL).

The long version that prints figures over simulated days is tests/bench/soak.py. Waits are bounded.
"""

from __future__ import annotations

import re
import time

import pytest

from components import free_port

from .daemon_support import DaemonProcess, daemon_config, write_setup

pytestmark = pytest.mark.integration

MIB = 1024 * 1024
DAY_S = 86400.0
UPDATES = 450
WARMUP = 250
SPOOL_MAX_BYTES = 64 * 1024
SPOOL_MAX_RECORDS = 2000
TREND_MAX_ROWS = 1000
SNAPSHOT_QUOTA = MIB
WAL_ALLOWANCE = 8 * MIB  # sqlite's WAL before a checkpoint (deploy/data-guarantees.md)


def unplugging_scenario(n: int = 12, every_s: float = 6.0, for_s: float = 2.0) -> dict:
    changes = [{"start_day": (8.0 + k * every_s) / DAY_S, "end_day": (8.0 + k * every_s + for_s) / DAY_S,
                "component": "sensor", "points": ["de-h"], "fault": "disconnected"} for k in range(n)]
    return {"scenario": {"name": "test: a cable that keeps coming loose", "config": "rotorwatch.toml",
                         "duration_days": 1.0, "seed": 21}, "change": changes}


def rss_kb(pid: int) -> int | None:
    try:
        with open(f"/proc/{pid}/status") as f:
            for line in f:
                if line.startswith("VmRSS:"):
                    return int(line.split()[1])
    except OSError:
        return None
    return None


def folder_bytes(path) -> int:
    return sum(p.stat().st_size for p in path.rglob("*") if p.is_file()) if path.exists() else 0


def sizes(state) -> dict[str, int]:
    """On-disk bytes now: the spool and the trend store with their WAL/SHM files, the snapshot folder."""
    out = {"spool": 0, "spool_wal": 0, "trends": 0, "trends_wal": 0, "snapshots": folder_bytes(state / "snapshots")}
    for name, key in (("spool.sqlite", "spool"), ("spool.sqlite-wal", "spool_wal"),
                      ("trends.sqlite", "trends"), ("trends.sqlite-wal", "trends_wal")):
        try:
            out[key] = (state / name).stat().st_size
        except OSError:
            pass
    return out


def test_bounded_memory_and_files_over_450_updates(tmp_path):
    cfg = daemon_config(None, prefix="soak", speedup=1.0, update_interval_s=0.1)
    cfg["mqtt"] = {"host": "127.0.0.1", "port": free_port(), "metrics_interval_s": 0.1,
                   "reconnect_min_s": 1.0, "reconnect_max_s": 2.0}
    cfg["storage"].update({
        "spool": {"max_bytes": SPOOL_MAX_BYTES, "max_records": SPOOL_MAX_RECORDS, "durability": "process_crash"},
        "trends": {"max_rows": TREND_MAX_ROWS, "min_interval_s": 0.0, "prune_interval_s": 5.0},
        "snapshots": {"quota_bytes": SNAPSHOT_QUOTA, "on_transition_to": ["sensor_fault"], "min_interval_s": 0.0},
    })
    path = write_setup(tmp_path, cfg, unplugging_scenario())
    state = tmp_path / "state"
    d = DaemonProcess(path, "--max-updates", str(UPDATES))
    samples: list[tuple[float, int, int]] = []  # (s since start, updates done, RSS kB)
    peak: dict[str, int] = {}
    updates_rx = re.compile(r"^rotorwatch_updates_total\{[^}]*\} (\S+)$", re.M)

    def updates_done() -> int:
        try:
            m = updates_rx.search(d.scrape(timeout_s=2.0))
        except OSError:
            return -1
        return int(float(m.group(1))) if m else -1

    t0 = time.monotonic()
    try:
        d.metrics_port(20)
        deadline = t0 + 300
        while d.alive() and time.monotonic() < deadline:
            n, kb = updates_done(), rss_kb(d.pid)
            if n >= 0 and kb is not None:
                samples.append((time.monotonic() - t0, n, kb))
            for k, v in sizes(state).items():
                peak[k] = max(peak.get(k, 0), v)
            time.sleep(0.5)
        rc = d.wait(30)
    finally:
        if d.alive():
            d.stop()
    assert rc == 0, d.describe()
    assert "Traceback" not in d.log()

    from rotorwatch.storage.spool import Spool
    from rotorwatch.storage.trends import TrendStore

    with Spool.in_state_dir(state) as spool:
        sp = spool.stats()
    trends = TrendStore(state / "trends.sqlite", read_only=True)
    try:
        rows = trends.stats().rows
    finally:
        trends.close()
    snap_bytes = folder_bytes(state / "snapshots")
    snapshots = [p for p in (state / "snapshots").iterdir() if p.is_dir() and not p.name.startswith(".")]
    saved = len(re.findall(r"snapshot saved", d.log()))

    warm = [s for s in samples if s[1] >= WARMUP]
    assert len(warm) >= 5, samples
    base_kb = warm[0][2]
    peak_kb = max(kb for _, _, kb in warm)
    growth_mb = (peak_kb - base_kb) / 1024
    print(f"\n[soak-short] {UPDATES} updates in {samples[-1][0]:.0f} s; RSS after {warm[0][1]} updates "
          f"{base_kb / 1024:.1f} MB, peak {peak_kb / 1024:.1f} MB, growth {growth_mb:+.1f} MB; "
          f"spool {sp.depth} records / {sp.stored_bytes} B stored (bound {SPOOL_MAX_BYTES} B), dropped {dict((k, v) for k, v in sp.dropped.items() if v)}; "
          f"trend rows {rows} (bound {TREND_MAX_ROWS}); snapshots {len(snapshots)} kept of {saved} saved, "
          f"{snap_bytes} B (quota {SNAPSHOT_QUOTA}); largest on disk during the run {peak}")
    for t, n, kb in samples[:: max(1, len(samples) // 12)]:
        print(f"  t={t:6.1f} s  updates={n:4d}  rss={kb / 1024:7.1f} MB")

    assert growth_mb < 15.0, f"RSS grew {growth_mb:.1f} MB after warm-up"
    # the spool: within its bounds, and it really had to drop to stay there
    assert sp.stored_bytes <= SPOOL_MAX_BYTES and sp.depth <= SPOOL_MAX_RECORDS
    assert sp.dropped_total > 0
    assert peak["spool"] <= 1.5 * SPOOL_MAX_BYTES + 256 * 1024
    assert peak["spool_wal"] <= WAL_ALLOWANCE
    # the trend store: at most max_rows, pruned to get there
    assert 0 < rows <= TREND_MAX_ROWS
    assert "trend store pruned" in d.log()
    assert peak["trends"] <= TREND_MAX_ROWS * 200 + 256 * 1024
    assert peak["trends_wal"] <= WAL_ALLOWANCE
    # snapshots: the oldest went, the rest within the quota (the newest is kept even if alone larger)
    assert saved > len(snapshots) >= 1
    assert snap_bytes <= SNAPSHOT_QUOTA or len(snapshots) == 1
    # during the run: at most the quota plus the snapshot being written (about 0.5 MB here)
    assert peak["snapshots"] <= SNAPSHOT_QUOTA + 1.2 * max(snap_bytes / max(1, len(snapshots)), 1)
