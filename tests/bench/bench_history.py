"""Replay speed of a history: N snapshots of 1 s at 20 kHz on 4 channels (default N = 1000).

Prints figures; asserts nothing. The history is a folder of float32 WAV files in volts (unit and
sensitivities in their metadata, the time in each name), rendered by the simulator from the bench
scenario (tests/bench/bench-scenario.toml: the invented demo spall on the four-sensor machine): 40
distinct snapshots spread over its 30 days, repeated in turn to N files 6 min apart. The machine is
bench-4ch.toml with the rate and window set from the command line (--set), as a user would:
20 kHz, 1 s windows, fmax 8 kHz (and the 2-10 kHz band to 8 kHz), learning on the first 20 updates.

    .venv/bin/python tests/bench/bench_history.py [--snapshots 1000] [--workers 1,2] [--profile 60]

For each worker count: the whole ``rotorwatch replay --history`` command (in-process): wall clock, CPU
time of this process and its worker processes (user + system, from getrusage), updates per second;
and what part of the wall clock the decoding alone takes (the elements decoded without analysis, in as
many workers). ``--profile N``: where one update's time goes, over the first N elements replayed in
this process one after the other (the first few, which build the analysis set-up, left out): decoding, the analysis of the four points
(:class:`rotorwatch.pipeline.UpdateAnalysis`, the part the workers run) and the judge (alarm logic,
in order), then cProfile's top functions of the analysis by own time.
"""

from __future__ import annotations

import argparse
import contextlib
import io
import os
import resource
import shutil
import tempfile
import time
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

HERE = Path(__file__).resolve().parent
CONFIG = HERE / "bench-4ch.toml"
SCENARIO = HERE / "bench-scenario.toml"
FS_HZ = 20000.0
SETS = ["acquisition.sample_rate_hz=20000", "machines.ef3.analysis.window_s=1.0", "machines.ef3.analysis.fmax_hz=8000",
        "machines.ef3.bands.bearing-hf.high_hz=8000"]


def write_history(folder: Path, n: int) -> None:
    from rotorwatch.recordings import write_wav
    from rotorwatch.settings.loading import load_config
    from rotorwatch.simulators.render import ScenarioRenderer
    from rotorwatch.simulators.scenario import load_scenario

    renderer = ScenarioRenderer(load_scenario(SCENARIO))
    machine = load_config(CONFIG, SETS).machines[0]
    ids = [p.id for p in sorted(machine.points, key=lambda p: p.sensor.channel)]
    sens = [p.sensor.volts_per_m_s2 for p in sorted(machine.points, key=lambda p: p.sensor.channel)]
    import numpy as np

    distinct = []
    for k in range(40):
        blocks = renderer.snapshot(k * 30 * 86400.0 / 40, 1.0, FS_HZ)
        distinct.append(np.stack([blocks[i] for i in ids], axis=1).astype(np.float32))
    t0 = datetime(2026, 3, 1, tzinfo=UTC)
    for k in range(n):
        name = (t0 + timedelta(minutes=6 * k)).strftime("ef3-%Y%m%dT%H%M%S.wav")
        write_wav(folder / name, distinct[k % len(distinct)], FS_HZ, "volts", sens)


def _cpu_s() -> float:
    """User + system CPU seconds of this process and of its children that have ended (the workers)."""
    me, kids = resource.getrusage(resource.RUSAGE_SELF), resource.getrusage(resource.RUSAGE_CHILDREN)
    return me.ru_utime + me.ru_stime + kids.ru_utime + kids.ru_stime


def run_replay(folder: Path, workers: int) -> tuple[float, float, str]:
    from rotorwatch.cli import main

    argv = ["replay", "--config", str(CONFIG), *[a for s in SETS for a in ("--set", s)], "--history", str(folder),
            "--time-pattern", "%Y%m%dT%H%M%S", "--learning-updates", "20", "--workers", str(workers)]
    out = io.StringIO()
    cpu, t = _cpu_s(), time.perf_counter()
    with contextlib.redirect_stdout(out):
        rc = main(argv)
    wall, cpu = time.perf_counter() - t, _cpu_s() - cpu
    assert rc == 0, out.getvalue()[-2000:]
    return wall, cpu, out.getvalue()


def decode_only(folder: Path, workers: int) -> float:
    from rotorwatch.history.feed import decoded
    from rotorwatch.history.readers import open_history
    from rotorwatch.history.spec import HistorySpec
    from rotorwatch.settings.loading import load_config

    machine = load_config(CONFIG, SETS).machines[0]
    h = open_history(HistorySpec(folder, time_pattern="%Y%m%dT%H%M%S"), machine, 1.0)
    t = time.perf_counter()
    for _ in decoded(h, workers):
        pass
    return time.perf_counter() - t


def _replay_parts(folder: Path, n: int, prof: Any = None) -> tuple[dict[str, float], int, int]:
    """CPU seconds of this process spent decoding, analysing and judging updates ``warm``..``n`` of the
    history one after the other (the first ones build the analysis set-up); ``prof`` profiles the analysis."""
    from rotorwatch.history.feed import HistoryFrames
    from rotorwatch.history.readers import open_history
    from rotorwatch.history.spec import HistorySpec
    from rotorwatch.pipeline import MachinePipeline
    from rotorwatch.replaypool import _input
    from rotorwatch.settings.loading import load_config
    from rotorwatch.settings.models import AlarmPolicy

    config = load_config(CONFIG, SETS)
    machine = config.machines[0]
    h = open_history(HistorySpec(folder, time_pattern="%Y%m%dT%H%M%S"), machine, 1.0)
    frames = HistoryFrames(h, FS_HZ)
    spent = {"decode": 0.0, "analysis": 0.0, "judge": 0.0}
    n = min(n, len(frames.elapsed_s))
    warm = min(5, n // 4)
    with tempfile.TemporaryDirectory() as state:
        pipeline = MachinePipeline(config, machine, state, policy=AlarmPolicy(learning_hours=0.0,
                                                                             min_learning_updates=20))
        for i in range(n):
            on = prof is not None and i >= warm
            t0 = time.process_time()
            frame, meta = frames.frame(i)
            frames.check(i, meta)
            t1 = time.process_time()
            inp = _input(frame, frames.fs_hz, h.start_unix_s)
            if on:
                prof.enable()
            outcomes = pipeline.analysis.update(inp, pipeline.forecast([inp.time_s])[0])
            if on:
                prof.disable()
            t2 = time.process_time()
            pipeline.judge(inp, outcomes)
            t3 = time.process_time()
            if i >= warm:
                spent["decode"] += t1 - t0
                spent["analysis"] += t2 - t1
                spent["judge"] += t3 - t2
        pipeline.close()
    h.close()
    return spent, n - warm, warm


def profile(folder: Path, n: int) -> None:
    """CPU per update (this process's, so the load of others does not count): decoding, analysis and judge,
    one after the other here; then, in a second pass, the analysis's top functions by their own CPU time."""
    import cProfile
    import pstats

    spent, n, warm = _replay_parts(folder, n)
    total = sum(spent.values())
    print(f"profile over {n} updates in one process (after {warm} to warm up): {1000 * total / n:.1f} ms of CPU per "
          "update = " + ", ".join(f"{k} {1000 * v / n:.1f} ms ({100 * v / total:.0f} %)" for k, v in spent.items()))
    prof = cProfile.Profile(time.process_time)
    _replay_parts(folder, n + warm, prof)
    out = io.StringIO()
    pstats.Stats(prof, stream=out).sort_stats("tottime").print_stats(12)
    print("the analysis's top functions by own CPU time (second pass under cProfile, which inflates small calls):")
    body = out.getvalue()
    print(body[body.index("ncalls"):].rstrip() if "ncalls" in body else body)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--snapshots", type=int, default=1000)
    ap.add_argument("--workers", default="1,2", help="worker counts to try, comma-separated")
    ap.add_argument("--profile", type=int, default=0, metavar="N", help="also profile the first N updates")
    ap.add_argument("--no-decode", action="store_true", help="skip the decoding-alone figure")
    args = ap.parse_args()
    folder = Path(tempfile.mkdtemp(prefix="rotorwatch-bench-history-"))
    try:
        t = time.perf_counter()
        write_history(folder, args.snapshots)
        size = sum(f.stat().st_size for f in folder.iterdir())
        print(f"history: {args.snapshots} WAV files, 4 channels x 1 s at {FS_HZ:g} Hz, {size / 1e6:.0f} MB, "
              f"written in {time.perf_counter() - t:.1f} s")
        print(f"box: {os.cpu_count()} CPUs, load average {os.getloadavg()[0]:.1f} at the start")
        for w in (int(x) for x in args.workers.split(",")):
            load = os.getloadavg()[0]
            wall, cpu, text = run_replay(folder, w)
            dec = "" if args.no_decode else f"; decoding alone {decode_only(folder, w):.1f} s"
            print(f"workers {w}: {args.snapshots} updates in {wall:.1f} s wall, {cpu:.1f} s CPU "
                  f"({args.snapshots / wall:.1f} updates/s, {1000 * wall / args.snapshots:.1f} ms per update; "
                  f"load average {load:.1f} before){dec}")
        if args.profile:
            profile(folder, args.profile)
        print(f"load average {os.getloadavg()[0]:.1f} at the end (2 cores shared: figures vary with the load)")
    finally:
        shutil.rmtree(folder, ignore_errors=True)


if __name__ == "__main__":
    main()
