"""Benchmark of the daemon as a service: CPU and memory of ``rotorwatch run`` on four channels at
51.2 kHz, fed in real time. Prints figures; it is not a test (pytest does not collect it). Run:

    .venv/bin/python tests/bench/bench_daemon.py [--seconds 60] [--inputs stdin,soundcard] [--runs 1]

What runs: the four-sensor demo machine (tests/bench/bench-4ch.toml: an update every 5 s over a 4 s
window, MQTT to a private mosquitto on a free port, /metrics on, trend store and snapshots on, no
status page), fed with the demo fault rendered by the simulator (tests/bench/bench-scenario.toml,
day 28), looped. Inputs, both paced at real time by someone other than the daemon:

- ``stdin``: raw float32 frames on the daemon's standard input, written by a separate writer process
  (this file with ``--write-paced``) in 10 ms pieces;
- ``soundcard``: PortAudio capturing a 4-channel PulseAudio pipe source (tests/components.py), which
  a writer thread in this process feeds.

Measured on the daemon's PID only: ``/proc/<pid>/stat`` utime+stime (all its threads) over the steady
state (from ``--warmup-s`` after the first update, for ``--seconds``), ``/proc/<pid>/status`` VmRSS and
VmHWM, the main thread (the analysis loop) apart from the others (capture, PortAudio, MQTT, HTTP), and
from /metrics the updates done and ``rotorwatch_update_duration_seconds`` (the analysis time of each
update). The box may be busy with other work: use ``--runs`` and look at the spread.

Targets: under 5 % of one core and under 160 MB resident (issue 4); peak resident at most 80 MB (issue 13).
"""

from __future__ import annotations

import argparse
import os
import re
import signal
import statistics
import subprocess
import sys
import tempfile
import time
import urllib.request
from dataclasses import dataclass, field
from pathlib import Path

HERE = Path(__file__).resolve().parent
REPO = HERE.parents[1]
CONFIG = HERE / "bench-4ch.toml"
SCENARIO = HERE / "bench-scenario.toml"
FS = 51200
CHANNELS = 4
PIPE_SOURCE = "rw_bench_4ch"
CPU_TARGET_PCT = 5.0
RSS_TARGET_MB = 160.0
RSS_LEAN_TARGET_MB = 80.0  # issue 13: no scipy.signal or scipy.stats, lazy imports
CLK_TCK = os.sysconf("SC_CLK_TCK")
PAGE_KB = os.sysconf("SC_PAGE_SIZE") // 1024


# --------------------------------------------------------------------------------------- writer
def write_paced(path: str, rate_hz: int, channels: int, chunk_s: float = 0.01) -> int:
    """The separate writer process: loop ``path`` (raw float32 frames) to stdout at real-time pace."""
    signal.signal(signal.SIGTERM, lambda s, f: sys.exit(0))
    data = Path(path).read_bytes()
    frame_bytes = 4 * channels
    chunk_frames = max(1, int(round(rate_hz * chunk_s)))
    chunk_bytes = chunk_frames * frame_bytes
    out = sys.stdout.fileno()
    pos, next_due = 0, time.monotonic()
    try:
        while True:
            delay = next_due - time.monotonic()
            if delay > 0:
                time.sleep(delay)
            elif delay < -0.5:
                next_due = time.monotonic()  # the reader stalled: keep real-time pace, no burst
            piece = data[pos:pos + chunk_bytes]
            pos += len(piece)
            if pos >= len(data):
                pos = 0
            view = memoryview(piece)
            while view:
                view = view[os.write(out, view):]
            next_due += chunk_frames / rate_hz
    except (BrokenPipeError, OSError):
        return 0


# --------------------------------------------------------------------------------------- /proc
def proc_cpu_s(pid: int, tid: int | None = None) -> float:
    path = f"/proc/{pid}/task/{tid}/stat" if tid is not None else f"/proc/{pid}/stat"
    with open(path) as f:
        fields_ = f.read().rsplit(")", 1)[1].split()
    return (int(fields_[11]) + int(fields_[12])) / CLK_TCK  # utime, stime (fields 14, 15)


def proc_mem_mb(pid: int) -> tuple[float, float]:
    """VmRSS and VmHWM in MB."""
    found = {}
    with open(f"/proc/{pid}/status") as f:
        for line in f:
            if line.startswith(("VmRSS:", "VmHWM:")):
                key, value = line.split(":", 1)
                found[key] = int(value.split()[0]) / 1024.0
    return found.get("VmRSS", 0.0), found.get("VmHWM", 0.0)


def threads_cpu_s(pid: int) -> dict[int, float]:
    out = {}
    for tid in os.listdir(f"/proc/{pid}/task"):
        try:
            out[int(tid)] = proc_cpu_s(pid, int(tid))
        except OSError:
            pass  # the thread ended
    return out


# --------------------------------------------------------------------------------------- metrics
def scrape(port: int) -> str:
    with urllib.request.urlopen(f"http://127.0.0.1:{port}/metrics", timeout=5) as r:
        return r.read().decode()


def metric(text: str, name: str) -> float | None:
    total, seen = 0.0, False
    for line in text.splitlines():
        if line.startswith(name + "{") or line.startswith(name + " "):
            total += float(line.rsplit(" ", 1)[1])
            seen = True
    return total if seen else None


# --------------------------------------------------------------------------------------- one run
@dataclass
class RunResult:
    input: str
    seconds: float = 0.0
    start_to_first_update_s: float = 0.0
    cpu_pct: float = 0.0
    main_thread_pct: float = 0.0
    other_threads_pct: float = 0.0
    cpu_windows_pct: list[float] = field(default_factory=list)
    thread_pcts: list[float] = field(default_factory=list)  # the other threads, busiest first
    rss_first_update_mb: float = 0.0
    rss_end_mb: float = 0.0
    hwm_mb: float = 0.0
    updates_steady: int = 0
    updates_total: int = 0
    skipped: float = 0.0
    analysis_s: list[float] = field(default_factory=list)
    samples_rate: float = 0.0
    helper_cpu_pct: float = 0.0  # the writer process or the PulseAudio server
    rc: int | None = None
    loadavg: str = ""


def render_signal(path: Path, seconds: float) -> None:
    import numpy as np

    from rotorwatch.simulators.render import ScenarioRenderer
    from rotorwatch.simulators.scenario import load_scenario

    renderer = ScenarioRenderer(load_scenario(SCENARIO))
    volts = renderer.snapshot(28 * 86400.0, seconds, float(FS))
    order = sorted(renderer.machine.points, key=lambda p: p.sensor.channel)
    frames = np.stack([volts[p.id] for p in order], axis=1).astype("<f4")
    frames.tofile(path)


def wait_log(log_path: Path, pattern: str, timeout_s: float, proc: subprocess.Popen) -> re.Match | None:
    rx = re.compile(pattern, re.M)
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        m = rx.search(log_path.read_text(errors="replace")) if log_path.exists() else None
        if m or proc.poll() is not None:
            return m
        time.sleep(0.05)
    return None


def stop(proc: subprocess.Popen | None, timeout_s: float = 10.0) -> int | None:
    if proc is None:
        return None
    if proc.poll() is None:
        proc.send_signal(signal.SIGTERM)
        try:
            proc.wait(timeout_s)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait(5)
    return proc.returncode


def run_once(kind: str, args, work: Path, signal_path: Path, components) -> RunResult:
    res = RunResult(kind, loadavg=" ".join(open("/proc/loadavg").read().split()[:3]))
    run_dir = Path(tempfile.mkdtemp(prefix=f"{kind}-", dir=work))
    broker = components.make_mosquitto_broker(run_dir / "mosquitto")
    pulse = writer = daemon = feed = None
    log_path = run_dir / "daemon.log"
    argv = [sys.executable, *args.python_flags, "-m", "rotorwatch", "run", "--config", str(CONFIG),
            "--state-dir", str(run_dir / "state"), "--set", f"mqtt.port={broker.port}"]
    env = dict(os.environ)
    env.pop("NOTIFY_SOCKET", None)
    try:
        if kind == "stdin":
            writer = subprocess.Popen([sys.executable, __file__, "--write-paced", str(signal_path)],
                                      stdin=subprocess.DEVNULL, stdout=subprocess.PIPE)
            stdin = writer.stdout
            helper_pid = writer.pid
        else:
            pulse = components.PulseAudioServer(run_dir / "pulse", [(PIPE_SOURCE, FS, CHANNELS)]).start()
            env.update(pulse.env)
            argv += ["--set", 'acquisition.source="soundcard"', "--set", f'acquisition.device="{PIPE_SOURCE}"']
            stdin = subprocess.DEVNULL
            helper_pid = pulse.pid
        t_start = time.monotonic()
        with open(log_path, "ab") as log:
            daemon = subprocess.Popen(argv + list(args.daemon_args), stdin=stdin, stdout=log, stderr=subprocess.STDOUT,
                                      env=env, cwd=run_dir)
        if writer is not None:
            writer.stdout.close()  # the daemon holds the read end
        m = wait_log(log_path, r"metrics endpoint listening addr=\S+ port=(\d+)", 60, daemon)
        if m is None:
            raise RuntimeError(f"no metrics port; log:\n{log_path.read_text()[-3000:]}")
        port = int(m.group(1))
        if kind == "soundcard":
            if not wait_log(log_path, r"source started", 30, daemon):
                raise RuntimeError(f"the soundcard source did not start; log:\n{log_path.read_text()[-3000:]}")
            import numpy as np

            frames = np.fromfile(signal_path, dtype="<f4").reshape(-1, CHANNELS)
            feed = pulse.feed(frames, PIPE_SOURCE, loop=True)
        if not wait_log(log_path, r"first update done", 90, daemon):
            raise RuntimeError(f"no first update; log:\n{log_path.read_text()[-3000:]}")
        res.start_to_first_update_s = time.monotonic() - t_start
        res.rss_first_update_mb = proc_mem_mb(daemon.pid)[0]
        time.sleep(args.warmup_s)

        pid = daemon.pid
        text = scrape(port)
        updates0, samples0 = metric(text, "rotorwatch_updates_total") or 0, metric(text, "rotorwatch_samples_captured_total") or 0
        skipped0 = metric(text, "rotorwatch_updates_skipped_total") or 0
        t0, cpu0, th0 = time.monotonic(), proc_cpu_s(pid), threads_cpu_s(pid)
        helper0 = proc_cpu_s(helper_pid) if helper_pid else 0.0
        last_stamp, win_t, win_cpu = None, t0, cpu0
        next_scrape = t0
        while time.monotonic() - t0 < args.seconds:
            time.sleep(1.0)
            if daemon.poll() is not None:
                raise RuntimeError(f"the daemon exited rc={daemon.returncode}; log:\n{log_path.read_text()[-3000:]}")
            now, cpu = time.monotonic(), proc_cpu_s(pid)
            if now - win_t >= 10.0:
                res.cpu_windows_pct.append(100.0 * (cpu - win_cpu) / (now - win_t))
                win_t, win_cpu = now, cpu
            if now >= next_scrape:
                next_scrape = now + args.scrape_s
                text = scrape(port)
                stamp = metric(text, "rotorwatch_last_update_timestamp_seconds")
                if stamp is not None and stamp != last_stamp:
                    last_stamp = stamp
                    res.analysis_s.append(metric(text, "rotorwatch_update_duration_seconds") or float("nan"))
        t1, cpu1, th1 = time.monotonic(), proc_cpu_s(pid), threads_cpu_s(pid)
        helper1 = proc_cpu_s(helper_pid) if helper_pid else 0.0
        text = scrape(port)
        res.seconds = t1 - t0
        res.cpu_pct = 100.0 * (cpu1 - cpu0) / res.seconds
        main = th1.get(pid, 0.0) - th0.get(pid, 0.0)
        res.main_thread_pct = 100.0 * main / res.seconds
        res.other_threads_pct = res.cpu_pct - res.main_thread_pct
        res.thread_pcts = sorted((100.0 * (th1[t] - th0.get(t, 0.0)) / res.seconds for t in th1 if t != pid),
                                 reverse=True)
        res.helper_cpu_pct = 100.0 * (helper1 - helper0) / res.seconds
        res.rss_end_mb, res.hwm_mb = proc_mem_mb(pid)
        res.updates_total = int(metric(text, "rotorwatch_updates_total") or 0)
        res.updates_steady = res.updates_total - int(updates0)
        res.skipped = (metric(text, "rotorwatch_updates_skipped_total") or 0) - skipped0
        res.samples_rate = ((metric(text, "rotorwatch_samples_captured_total") or 0) - samples0) / res.seconds
        if feed is not None:
            pulse.stop_feeds([feed])  # the writer before the stream (recipes)
            feed = None
        res.rc = stop(daemon, 15)
        daemon = None
        if "Traceback" in log_path.read_text(errors="replace"):
            print(f"  WARNING: a traceback in {log_path}")
        return res
    finally:
        if feed is not None:
            pulse.stop_feeds([feed])
        stop(daemon)
        stop(writer)
        if pulse is not None:
            pulse.stop()
        broker.stop()


# --------------------------------------------------------------------------------------- report
def spread(values: list[float], fmt: str = "{:.2f}") -> str:
    if not values:
        return "-"
    if len(values) == 1:
        return fmt.format(values[0])
    return f"{fmt.format(statistics.median(values))} (min {fmt.format(min(values))}, max {fmt.format(max(values))})"


def report(res: RunResult) -> None:
    a = [x * 1000 for x in res.analysis_s if x == x]
    print(f"  steady state {res.seconds:.0f} s (load average at start {res.loadavg}); "
          f"start to first update {res.start_to_first_update_s:.1f} s")
    print(f"  CPU of one core     {res.cpu_pct:5.2f} %   (main thread / analysis loop {res.main_thread_pct:.2f} %, "
          f"other threads {res.other_threads_pct:.2f} %; per 10 s: {', '.join(f'{x:.1f}' for x in res.cpu_windows_pct)})")
    busy = [f"{x:.2f}" for x in res.thread_pcts if x >= 0.005]
    print(f"  other threads       {', '.join(busy) or 'none busy'} % of one core, busiest first "
          f"({len(res.thread_pcts)} threads besides the main one)")
    print(f"  resident            {res.rss_end_mb:5.1f} MB at the end, peak (VmHWM) {res.hwm_mb:.1f} MB, "
          f"{res.rss_first_update_mb:.1f} MB at the first update")
    print(f"  updates             {res.updates_steady} in the steady state ({res.updates_total} in all), "
          f"{res.skipped:.0f} skipped; samples {res.samples_rate:.0f}/s (expected {CHANNELS * FS})")
    print(f"  analysis per update {spread(a, '{:.1f}')} ms over {len(a)} sampled updates")
    helper = "paced writer process" if res.input == "stdin" else "PulseAudio server"
    print(f"  {helper}: {res.helper_cpu_pct:.2f} % of one core (not the daemon's)")
    print(f"  exit status after SIGTERM: {res.rc}")


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--seconds", type=float, default=60.0, help="steady-state seconds measured per run")
    p.add_argument("--warmup-s", type=float, default=10.0, help="wait after the first update before measuring")
    p.add_argument("--inputs", default="stdin,soundcard", help="comma-separated: stdin, soundcard")
    p.add_argument("--runs", type=int, default=1, help="runs per input (the box may be busy: look at the spread)")
    p.add_argument("--scrape-s", type=float, default=5.0, help="seconds between /metrics scrapes")
    p.add_argument("--signal-s", type=float, default=20.0, help="seconds of rendered signal (looped)")
    p.add_argument("--python-flag", dest="python_flags", action="append", default=[],
                   help="extra interpreter flag for the daemon (e.g. -X importtime)")
    p.add_argument("--daemon-arg", dest="daemon_args", action="append", default=[],
                   help="extra argument for rotorwatch run (e.g. --set=...)")
    p.add_argument("--write-paced", metavar="FILE", help=argparse.SUPPRESS)
    args = p.parse_args(argv)
    if args.write_paced:
        return write_paced(args.write_paced, FS, CHANNELS)

    sys.path.insert(0, str(REPO / "tests"))
    import components  # real mosquitto and PulseAudio, stopped by their PIDs

    kinds = [k.strip() for k in args.inputs.split(",") if k.strip()]
    unknown = set(kinds) - {"stdin", "soundcard"}
    if unknown:
        p.error(f"--inputs: unknown {', '.join(sorted(unknown))} (choose stdin, soundcard)")
    results: dict[str, list[RunResult]] = {k: [] for k in kinds}
    with tempfile.TemporaryDirectory(prefix="rw-bench-") as tmp:
        work = Path(tmp)
        signal_path = work / "signal.f32"
        t = time.monotonic()
        render_signal(signal_path, args.signal_s)
        print(f"rendered {args.signal_s:g} s of 4-channel signal in {time.monotonic() - t:.1f} s; "
              f"{os.cpu_count()} CPUs")
        for i in range(args.runs):
            for kind in kinds:
                print(f"\n[{kind} run {i + 1}/{args.runs}] rotorwatch run, {CHANNELS} channels at {FS} Hz, "
                      f"update every 5 s over a 4 s window")
                res = run_once(kind, args, work, signal_path, components)
                report(res)
                results[kind].append(res)
    print("\nsummary (median, min, max over runs)")
    for kind, runs in results.items():
        cpu = spread([r.cpu_pct for r in runs])
        hwm = spread([r.hwm_mb for r in runs], "{:.1f}")
        per = spread([statistics.median([x * 1000 for x in r.analysis_s]) for r in runs if r.analysis_s], "{:.1f}")
        ok_cpu = "ok" if max(r.cpu_pct for r in runs) < CPU_TARGET_PCT else "OVER"
        ok_rss = "ok" if max(r.hwm_mb for r in runs) < RSS_TARGET_MB else "OVER"
        ok_lean = "ok" if max(r.hwm_mb for r in runs) <= RSS_LEAN_TARGET_MB else "OVER"
        print(f"  {kind:9s} CPU {cpu} % [{ok_cpu} vs < {CPU_TARGET_PCT:g} %]; peak RSS {hwm} MB "
              f"[{ok_rss} vs < {RSS_TARGET_MB:g} MB, {ok_lean} vs <= {RSS_LEAN_TARGET_MB:g} MB]; analysis {per} ms/update; "
              f"updates {sum(r.updates_steady for r in runs)} in {sum(r.seconds for r in runs):.0f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
