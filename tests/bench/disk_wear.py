"""Disk-wear benchmark: bytes ``rotorwatch run`` writes per day per point, by storage component.

Prints figures; it is not a test (pytest does not collect it). Run:

    .venv/bin/python tests/bench/disk_wear.py [--seconds 300] [--variants full,memory,bare] [--set K=V ...]

What runs: the four-sensor bench machine (tests/bench/bench-4ch.toml: 4 points at 51.2 kHz, an update
every 5 s over a 4 s window) on simulated input at real speed (the healthy start of
tests/bench/bench-scenario.toml, a story of our own making), MQTT to a private mosquitto on a free
loopback port, /metrics on, every storage setting at its default. The state folder is on the disk the
work folder is on (``--work``; not tmpfs: tmpfs writes count nothing).

What is read: ``write_bytes`` of ``/proc/<daemon PID>/io`` (bytes the daemon caused to be sent to the
block layer, fsync'd pages and page-cache writeback alike) over ``--seconds`` after a warm-up. The
components are told apart by turning them off one at a time, each in its own run:

- ``full``: defaults (publish spool on, records kept in memory while the broker acknowledges them,
  trend store on, snapshots on; a daily snapshot scheduled a minute after the start so its size is seen);
- ``strict``: as full, with ``storage.spool.write = "every_record"`` (each record written before it
  is sent): spool in that mode = strict - memory;
- ``memory``: ``mqtt.delivery = "memory"`` (no spool): spool = full - memory;
- ``bare``: memory and no trend rows (``storage.trends.min_interval_s`` of a century): trends =
  memory - bare; what is left is the daemon's log (its stderr goes to a file here; under systemd it
  goes to the journal) and sqlite/baseline/other.

Baselines and snapshots are not steady: their share per day is computed from what they write each time
(the baseline file's size x saves per day while learning, at one save per checkpoint; one daily snapshot
per machine) and printed beside the measured rates. Extra ``--set`` options are passed to every run
(e.g. ``--set storage.trends.flush_interval_s=0`` for the per-update commits of the old store).
"""

from __future__ import annotations

import argparse
import os
import signal
import subprocess
import sys
import tempfile
import time
from datetime import UTC, datetime, timedelta
from pathlib import Path

HERE = Path(__file__).resolve().parent
REPO = HERE.parents[1]
sys.path.insert(0, str(REPO / "tests"))

from components import MosquittoBroker  # noqa: E402

DAY_S = 86400.0
MB = 1e6
POINTS = 4
VARIANTS = {
    "full": [],
    "strict": ["storage.spool.write=every_record"],
    "memory": ["mqtt.delivery=memory"],
    "bare": ["mqtt.delivery=memory", "storage.trends.min_interval_s=3153600000"],
}


def write_bytes(pid: int) -> int:
    with open(f"/proc/{pid}/io") as f:
        for line in f:
            if line.startswith("write_bytes:"):
                return int(line.split()[1])
    raise RuntimeError(f"/proc/{pid}/io: no write_bytes")


def folder_bytes(path: Path) -> int:
    return sum(p.stat().st_size for p in path.rglob("*") if p.is_file()) if path.exists() else 0


def run_variant(name: str, extra: list[str], args: argparse.Namespace, broker: MosquittoBroker,
                work: Path) -> dict[str, float]:
    state = work / f"state-{name}"
    log_path = work / f"daemon-{name}.log"
    daily = (datetime.now(UTC) + timedelta(minutes=1, seconds=30)).strftime("%H:%M")
    sets = ["acquisition.source=simulated", f"acquisition.scenario={HERE / 'bench-scenario.toml'}",
            "acquisition.speedup=1.0", f"mqtt.port={broker.port}", f"storage.snapshots.daily_at_utc={daily}",
            *extra, *args.set]
    argv = [sys.executable, "-m", "rotorwatch", "run", "--config", str(HERE / "bench-4ch.toml"),
            "--state-dir", str(state)]
    for s in sets:
        argv += ["--set", s]
    env = dict(os.environ)
    env.pop("NOTIFY_SOCKET", None)
    with open(log_path, "wb") as log:
        proc = subprocess.Popen(argv, stdout=log, stderr=log, stdin=subprocess.DEVNULL, cwd=work, env=env)
    try:
        deadline = time.monotonic() + 120
        while "update" not in log_path.read_text(errors="replace") or not (state / "trends.sqlite").exists():
            if proc.poll() is not None or time.monotonic() > deadline:
                raise RuntimeError(f"{name}: the daemon did not start:\n{log_path.read_text(errors='replace')[-2000:]}")
            time.sleep(0.5)
        time.sleep(args.warmup_s)
        w0, l0, s0, t0 = write_bytes(proc.pid), log_path.stat().st_size, folder_bytes(state / "snapshots"), time.monotonic()
        while time.monotonic() - t0 < args.seconds and proc.poll() is None:
            time.sleep(1.0)
        w1, l1, s1, t1 = write_bytes(proc.pid), log_path.stat().st_size, folder_bytes(state / "snapshots"), time.monotonic()
    finally:
        if proc.poll() is None:
            proc.send_signal(signal.SIGTERM)
            try:
                proc.wait(30)
            except subprocess.TimeoutExpired:
                proc.kill()
                proc.wait(10)
    if proc.returncode not in (0, -signal.SIGTERM):
        print(f"{name}: daemon exited {proc.returncode}", file=sys.stderr)
    span = t1 - t0
    baselines = sorted((state / "baselines").glob("*.json"))
    return {"span_s": span, "written": w1 - w0, "log": l1 - l0, "snapshots_in_window": s1 - s0,
            "snapshot_bytes": folder_bytes(state / "snapshots"),
            "baseline_bytes": sum(p.stat().st_size for p in baselines)}


def per_day_per_point(nbytes: float, span_s: float) -> float:
    return nbytes / span_s * DAY_S / POINTS / MB


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--seconds", type=float, default=300.0, help="measured span per variant (default 300)")
    ap.add_argument("--warmup-s", type=float, default=20.0)
    ap.add_argument("--variants", default="full,strict,memory,bare")
    ap.add_argument("--checkpoint-s", type=float, default=3600.0,
                    help="baseline save interval while learning, for the computed share (default 3600)")
    ap.add_argument("--set", action="append", default=[], metavar="KEY=VALUE")
    ap.add_argument("--work", type=Path, default=None, help="work folder (default: a new one under /var/tmp)")
    args = ap.parse_args(argv)
    work = args.work or Path(tempfile.mkdtemp(prefix="rotorwatch-wear-", dir="/var/tmp"))
    work.mkdir(parents=True, exist_ok=True)
    broker = MosquittoBroker(workdir=work / "broker").start()
    print(f"disk wear: bench-4ch ({POINTS} points), real speed, {args.seconds:g} s per variant after "
          f"{args.warmup_s:g} s warm-up; work {work}; extra {args.set or 'none'}", flush=True)
    results = {}
    try:
        for name in args.variants.split(","):
            r = run_variant(name, VARIANTS[name], args, broker, work)
            results[name] = r
            steady = r["written"] - r["snapshots_in_window"]
            print(f"  {name:7s} written {r['written'] / 1e3:9.0f} kB in {r['span_s']:.0f} s "
                  f"(log {r['log'] / 1e3:.0f} kB, snapshots {r['snapshots_in_window'] / 1e3:.0f} kB) -> "
                  f"{per_day_per_point(steady, r['span_s']):7.2f} MB/day/point without snapshots", flush=True)
    finally:
        broker.stop()
    rate = {k: (r["written"] - r["snapshots_in_window"]) / r["span_s"] * DAY_S for k, r in results.items()}
    print("\nMB per day (4 points | per point):")
    rows = []
    if "full" in rate and "memory" in rate:
        rows.append(("publish spool", rate["full"] - rate["memory"]))
    strict_spool = rate["strict"] - rate["memory"] if "strict" in rate and "memory" in rate else None
    if "memory" in rate and "bare" in rate:
        rows.append(("trend store", rate["memory"] - rate["bare"]))
    if "bare" in rate:
        r = results["bare"]
        log_day = r["log"] / r["span_s"] * DAY_S
        rows += [("log (stderr file)", log_day), ("other (sqlite opens, metadata)", rate["bare"] - log_day)]
    baseline_bytes = max(r["baseline_bytes"] for r in results.values())
    snapshot_bytes = max(r["snapshot_bytes"] for r in results.values())
    rows.append(("baselines while learning (computed)", baseline_bytes * DAY_S / args.checkpoint_s))
    rows.append(("daily snapshot (computed, 1/day)", snapshot_bytes))
    total = sum(v for _, v in rows)
    for label, v in rows:
        print(f"  {label:38s} {v / MB:9.1f} | {v / MB / POINTS:7.2f}")
    print(f"  {'total':38s} {total / MB:9.1f} | {total / MB / POINTS:7.2f}   (budget: 250 MB/day for 4 points)")
    if strict_spool is not None:
        spool_now = rows[0][1] if rows and rows[0][0] == "publish spool" else 0.0
        strict_total = total - spool_now + strict_spool
        print(f"  {'publish spool, write = every_record':38s} {strict_spool / MB:9.1f} | {strict_spool / MB / POINTS:7.2f}")
        print(f"  {'total with write = every_record':38s} {strict_total / MB:9.1f} | {strict_total / MB / POINTS:7.2f}")
    print(f"  measured whole 'full' run: {rate.get('full', float('nan')) / MB:.1f} MB/day "
          f"(baseline file {baseline_bytes / 1e3:.0f} kB, one snapshot {snapshot_bytes / 1e3:.0f} kB)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
