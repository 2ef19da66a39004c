"""Soak benchmark: ``rotorwatch run`` over simulated days at accelerated speed, with its memory and its
files sampled as it goes. Prints a table and a summary; it is not a test (pytest does not collect it;
the short CI version is tests/integration/test_soak_short.py). Run:

    .venv/bin/python tests/bench/soak.py [--days 8] [--speedup 1440] [--scenario FILE]
        [--update-interval-s 0.25] [--sample-s 10] [--outage 0.4,0.6] [--warmup-s 40] [--keep DIR]

What runs: the demo fan (config/demo-fan.toml with a 1 s analysis window, 24 h of baseline learning and
absolute levels on the drive-end outer-race band) on a simulator scenario streamed ``--speedup`` times
faster than real time: by default a story of our own written into the work folder (an outer-race
defect growing from day 1 into alarm, and a loose connector dropping nde-h for two hours twice a day,
so there are alarm and sensor-fault transitions and their snapshots), or ``--scenario FILE``; MQTT to a private mosquitto on a free port that is stopped between the
``--outage`` fractions of the run (so the spool fills up to its bound and drains after), /metrics on,
the trend store and snapshots on (on warning, alarm and sensor_fault, no minimum interval; the daily
one follows the wall clock, so a short run takes none). The storage
bounds are small so that each is reached within the run: spool 256 KiB / 2000 records, trend store
5000 rows, snapshot quota 2 MiB.

Sampled every ``--sample-s`` on the daemon's PID: VmRSS and VmHWM (/proc/<pid>/status); the sizes of
spool.sqlite and trends.sqlite with their WAL files and of the snapshots folder; from /metrics the
updates done, the spool's records, bytes and drops, and the newest update's time (the scenario clock,
as simulated days since the first update); the trend rows (read-only). The summary compares the
largest of each with its configured bound and the RSS after ``--warmup-s`` with the last and the
peak (the simulator's own noise cache, 32 MiB, fills during the first half minute). Exit status 1 if a
bound was passed.
"""

from __future__ import annotations

import argparse
import copy
import os
import re
import shutil
import signal
import sqlite3
import sys
import tempfile
import time
import urllib.request
from pathlib import Path

HERE = Path(__file__).resolve().parent
REPO = HERE.parents[1]
sys.path.insert(0, str(REPO / "tests"))
sys.path.insert(0, str(REPO / "tests" / "integration"))

from daemon_support import ROTORWATCH, daemon_config, to_toml  # noqa: E402

from components import MosquittoBroker  # noqa: E402

KIB, MIB = 1024, 1024 * 1024
DAY_S = 86400.0
BOUNDS = {
    "spool": {"max_bytes": 256 * KIB, "max_records": 2000, "durability": "power_loss"},
    "trends": {"max_rows": 5000, "min_interval_s": 0.0, "prune_interval_s": 30.0},
    "snapshots": {"quota_bytes": 2 * MIB, "on_transition_to": ["warning", "alarm", "sensor_fault"],
                  "min_interval_s": 0.0, "daily_at_utc": "03:00"},
}
WAL_ALLOWANCE = 8 * MIB  # deploy/data-guarantees.md: plan on 8 MiB of WAL per sqlite file


def rss_kb(pid: int) -> tuple[int, int]:
    rss = hwm = 0
    try:
        with open(f"/proc/{pid}/status") as f:
            for line in f:
                if line.startswith("VmRSS:"):
                    rss = int(line.split()[1])
                elif line.startswith("VmHWM:"):
                    hwm = int(line.split()[1])
    except OSError:
        pass
    return rss, hwm


def size(path: Path) -> int:
    try:
        return path.stat().st_size
    except OSError:
        return 0


def folder(path: Path) -> tuple[int, int]:
    """(bytes, snapshots) of the snapshot folder."""
    if not path.exists():
        return 0, 0
    total = sum(size(p) for p in path.rglob("*") if p.is_file())
    count = sum(1 for p in path.iterdir() if p.is_dir() and not p.name.startswith("."))
    return total, count


def trend_rows(path: Path) -> int | None:
    if not path.exists():
        return None
    try:
        with sqlite3.connect(f"file:{path}?mode=ro", uri=True, timeout=1.0) as db:
            tables = [r[0] for r in db.execute("SELECT name FROM sqlite_master WHERE type='table'")]
            table = next((t for t in tables if t not in ("series", "meta") and not t.startswith("sqlite")), None)
            return int(db.execute(f"SELECT COUNT(*) FROM {table}").fetchone()[0]) if table else None
    except sqlite3.Error:
        return None


def scrape(port: int) -> dict[str, float]:
    """Sum of each metric family's samples (labels folded): enough for the gauges and counters here."""
    try:
        with urllib.request.urlopen(f"http://127.0.0.1:{port}/metrics", timeout=3) as r:
            text = r.read().decode()
    except OSError:
        return {}
    out: dict[str, float] = {}
    for line in text.splitlines():
        if line.startswith("#") or not line:
            continue
        name = re.split(r"[{ ]", line, maxsplit=1)[0]
        try:
            out[name] = out.get(name, 0.0) + float(line.rsplit(" ", 1)[1])
        except ValueError:
            pass
    return out


def soak_scenario(days: float) -> dict:
    """The default story (invented): an outer-race defect on the fan drive end that grows from day 1 to
    well past its absolute alarm level, and a loose connector on nde-h that drops the signal for two
    hours twice a day (each time a sensor_fault transition and a snapshot)."""
    changes = [{"start_day": 1.0, "end_day": max(days, 2.0), "component": "outer_race", "bearing": "fan-de",
                "points": ["de-h"], "to": 40.0, "shape": "linear"}]
    k = 0
    while 0.25 + 0.5 * k + 0.09 < days:
        start = 0.25 + 0.5 * k
        changes.append({"start_day": start, "end_day": start + 0.083, "component": "sensor",
                        "points": ["nde-h"], "fault": "disconnected"})
        k += 1
    return {"scenario": {"name": "soak: a growing outer-race defect and a loose connector", "config": "rotorwatch.toml",
                         "duration_days": days + 1.0, "seed": 5}, "change": changes}


def build_config(broker: MosquittoBroker, scenario: Path, speedup: float, interval_s: float) -> dict:
    cfg = daemon_config(broker, prefix="soak", speedup=speedup, update_interval_s=interval_s,
                        mqtt={"metrics_interval_s": 1.0, "reconnect_min_s": 0.5, "reconnect_max_s": 2.0})
    cfg["acquisition"]["scenario"] = str(scenario.resolve())
    cfg["machines"][0]["alarms"] = {"learning_hours": 24.0, "min_learning_updates": 20}
    cfg["storage"].update(copy.deepcopy(BOUNDS))
    return cfg


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--days", type=float, default=8.0, help="simulated days to run (default 8)")
    ap.add_argument("--speedup", type=float, default=1440.0, help="scenario seconds per wall second (default 1440)")
    ap.add_argument("--scenario", type=Path, default=None,
                    help="a scenario file (default: the soak story written into the work folder)")
    ap.add_argument("--update-interval-s", type=float, default=0.25)
    ap.add_argument("--sample-s", type=float, default=10.0)
    ap.add_argument("--outage", default="0.4,0.6", help="broker away between these fractions of the run ('' for none)")
    ap.add_argument("--warmup-s", type=float, default=40.0)
    ap.add_argument("--keep", type=Path, default=None, help="work in this folder and keep it")
    args = ap.parse_args(argv)

    work = Path(args.keep) if args.keep else Path(tempfile.mkdtemp(prefix="rotorwatch-soak-"))
    work.mkdir(parents=True, exist_ok=True)
    wall_s = args.days * DAY_S / args.speedup
    outage = [float(x) * wall_s for x in args.outage.split(",")] if args.outage else []
    broker = MosquittoBroker(workdir=work / "broker").start()
    scenario = args.scenario
    if scenario is None:
        scenario = work / "scenario.toml"
        scenario.write_text(to_toml(soak_scenario(args.days)))
    cfg = build_config(broker, scenario, args.speedup, args.update_interval_s)
    (work / "rotorwatch.toml").write_text(to_toml(cfg))
    state = work / "state"
    log_path = work / "daemon.log"
    env = dict(os.environ)
    env.pop("NOTIFY_SOCKET", None)
    with open(log_path, "wb") as log:
        proc = __import__("subprocess").Popen([*ROTORWATCH, "run", "--config", str(work / "rotorwatch.toml")],
                                              stdout=log, stderr=log, stdin=__import__("subprocess").DEVNULL,
                                              cwd=work, env=env)
    print(f"soak: {args.days:g} simulated days of {scenario.name} at x{args.speedup:g} = {wall_s:.0f} s wall; "
          f"update every {args.update_interval_s:g} s (scenario clock); broker away {outage and f'{outage[0]:.0f}-{outage[1]:.0f} s' or 'never'}; "
          f"work folder {work}; daemon PID {proc.pid}", flush=True)
    print(f"bounds: spool {BOUNDS['spool']['max_bytes'] // KIB} KiB / {BOUNDS['spool']['max_records']} records, "
          f"trends {BOUNDS['trends']['max_rows']} rows, snapshots {BOUNDS['snapshots']['quota_bytes'] // MIB} MiB", flush=True)
    head = (f"{'wall_s':>7} {'sim_day':>7} {'updates':>7} {'rss_MB':>7} {'hwm_MB':>7} {'spool_kB':>8} {'wal_kB':>7} "
            f"{'sp_recs':>7} {'sp_drop':>7} {'trend_kB':>8} {'twal_kB':>7} {'rows':>6} {'snap_kB':>7} {'snaps':>5} broker")
    print(head, flush=True)
    rows = []
    port = None
    t0 = time.monotonic()
    first_ts = None
    broker_up = True
    try:
        while proc.poll() is None:
            now = time.monotonic() - t0
            if outage and broker_up and outage[0] <= now < outage[1]:
                broker.stop()
                broker_up = False
            elif outage and not broker_up and now >= outage[1]:
                broker.start()
                broker_up = True
            if port is None:
                m = re.search(r"metrics endpoint listening addr=\S+ port=(\d+)", log_path.read_text(errors="replace"))
                port = int(m.group(1)) if m else None
            metrics = scrape(port) if port else {}
            ts = metrics.get("rotorwatch_last_update_timestamp_seconds")
            if ts and first_ts is None:
                first_ts = ts
            rss, hwm = rss_kb(proc.pid)
            snap_b, snap_n = folder(state / "snapshots")
            row = {
                "wall_s": now, "sim_day": ((ts - first_ts) / DAY_S) if ts and first_ts else 0.0,
                "updates": metrics.get("rotorwatch_updates_total", 0.0), "rss": rss, "hwm": hwm,
                "spool": size(state / "spool.sqlite"), "spool_wal": size(state / "spool.sqlite-wal"),
                "spool_records": metrics.get("rotorwatch_spool_records", 0.0),
                "spool_bytes": metrics.get("rotorwatch_spool_bytes", 0.0),
                "spool_dropped": metrics.get("rotorwatch_spool_dropped_records_total", 0.0),
                "trends": size(state / "trends.sqlite"), "trends_wal": size(state / "trends.sqlite-wal"),
                "rows": trend_rows(state / "trends.sqlite") or 0, "snap_bytes": snap_b, "snaps": snap_n,
                "broker": "up" if broker_up else "DOWN",
            }
            rows.append(row)
            print(f"{row['wall_s']:7.0f} {row['sim_day']:7.2f} {row['updates']:7.0f} {rss / 1024:7.1f} {hwm / 1024:7.1f} "
                  f"{row['spool'] / KIB:8.0f} {row['spool_wal'] / KIB:7.0f} {row['spool_records']:7.0f} "
                  f"{row['spool_dropped']:7.0f} {row['trends'] / KIB:8.0f} {row['trends_wal'] / KIB:7.0f} "
                  f"{row['rows']:6d} {snap_b / KIB:7.0f} {snap_n:5d} {row['broker']}", flush=True)
            if now >= wall_s:
                break
            time.sleep(max(0.0, args.sample_s - (time.monotonic() - t0 - now)))
    finally:
        if proc.poll() is None:
            proc.send_signal(signal.SIGTERM)
            try:
                proc.wait(30)
            except Exception:  # noqa: BLE001 - a daemon that will not stop is killed
                proc.kill()
                proc.wait(10)
        broker.stop()
    text = log_path.read_text(errors="replace")
    rc = proc.returncode
    warm = [r for r in rows if r["wall_s"] >= args.warmup_s] or rows[-1:]
    base, last = warm[0]["rss"] / 1024, rows[-1]["rss"] / 1024
    peak = max(r["rss"] for r in warm) / 1024
    sb = BOUNDS["spool"]["max_bytes"]
    checks = [
        ("RSS after warm-up -> last / peak", f"{base:.1f} -> {last:.1f} / {peak:.1f} MB (growth {peak - base:+.1f} MB)",
         peak - base < 15.0),
        ("spool bytes held (bound)", f"{max(r['spool_bytes'] for r in rows) / KIB:.0f} KiB ({sb // KIB} KiB)",
         max(r["spool_bytes"] for r in rows) <= sb * 1.05),
        ("spool records held (bound)", f"{max(r['spool_records'] for r in rows):.0f} ({BOUNDS['spool']['max_records']})",
         max(r["spool_records"] for r in rows) <= BOUNDS["spool"]["max_records"] + 20),
        ("spool.sqlite file (1.3 x bound + 256 KiB)", f"{max(r['spool'] for r in rows) / KIB:.0f} KiB",
         max(r["spool"] for r in rows) <= 1.3 * sb + 256 * KIB),
        ("spool WAL (8 MiB)", f"{max(r['spool_wal'] for r in rows) / KIB:.0f} KiB",
         max(r["spool_wal"] for r in rows) <= WAL_ALLOWANCE),
        ("trend rows (bound)", f"{max(r['rows'] for r in rows)} ({BOUNDS['trends']['max_rows']})",
         max(r["rows"] for r in rows) <= BOUNDS["trends"]["max_rows"] + 100),
        ("trends.sqlite file (200 B/row + 256 KiB)", f"{max(r['trends'] for r in rows) / KIB:.0f} KiB",
         max(r["trends"] for r in rows) <= BOUNDS["trends"]["max_rows"] * 200 + 256 * KIB),
        ("trends WAL (8 MiB)", f"{max(r['trends_wal'] for r in rows) / KIB:.0f} KiB",
         max(r["trends_wal"] for r in rows) <= WAL_ALLOWANCE),
        ("snapshots on disk (quota + one)", f"{max(r['snap_bytes'] for r in rows) / KIB:.0f} KiB, at most "
         f"{max(r['snaps'] for r in rows)} kept of {len(re.findall('snapshot saved', text))} saved",
         max(r["snap_bytes"] for r in rows) <= BOUNDS["snapshots"]["quota_bytes"] + MIB),
    ]
    print(f"\nsoak summary: {rows[-1]['updates']:.0f} updates over {rows[-1]['sim_day']:.2f} simulated days in "
          f"{rows[-1]['wall_s']:.0f} s; spool dropped {rows[-1]['spool_dropped']:.0f} records to stay in bounds; "
          f"trend prunes logged {text.count('trend store pruned')}; daemon exit {rc}; tracebacks {text.count('Traceback')}")
    ok = True
    for name, value, good in checks:
        ok = ok and good
        print(f"  {'ok  ' if good else 'OVER'} {name:45s} {value}")
    if not args.keep:
        shutil.rmtree(work, ignore_errors=True)
    return 0 if ok and rc == 0 and "Traceback" not in text else 1


if __name__ == "__main__":
    sys.exit(main())
