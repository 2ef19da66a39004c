"""``rotorwatch bench``: how fast the point analysis runs against its own FFT floor and a plain scipy
pipeline, and how much memory it takes.

It analyzes what the daemon analyzes: a continuous synthetic signal per channel (noise, shaft tones, an
impact train ringing a 3 kHz resonance) cut into overlapping windows (``--window``, default 4 s) advanced by
the update interval (``--update-interval``, default 1 s), 3200 lines to 10 kHz. Per row (sampling rate,
channel count) it times, in one process, with the repeats interleaved (every method of every row once, then
again), CPU time by ``time.process_time``:

- ``fft floor``: only the FFTs the fixed path makes, recorded from one of its updates (same lengths,
  types and batch shapes) and replayed on ready-made inputs: the least any implementation of the same
  outputs would spend in its transforms;
- ``scipy plain``: what a user would write per window: ``scipy.signal.welch`` (Hann, the plan's segments),
  a 4th-order Butterworth band-pass (``butter`` + ``sosfilt``, 2-7 kHz), ``hilbert``, and the ``rfft`` of
  the envelope;
- ``fixed``: rotorwatch with the envelope band set in the configuration;
- ``searched``: rotorwatch with the band searched, as the daemon runs it: searched when the point starts
  learning and kept with its baselines (the search runs again at a review, every
  ``analysis.envelope.band_review_hours``, 6 h by default: never within a bench run);
- ``search``: the same with the full band search on every update (what ``rotorwatch analyze`` does once
  per recording, and the daemon once per point and review).

Figures are x real time per channel (seconds of signal advanced per CPU second) as min / median / max over
the repeats, and ratios of medians. Peak RSS is read before the scipy pipeline first imports
``scipy.signal``, and again at the end. ``--scaling`` adds the fixed path's cost per sample over window
lengths 1-16 s and sampling rates 12.8-102.4 kHz (spectrum and envelope settings scaled with the rate).

Timing is a measurement, not a test: the figures depend on the machine and on what else it is doing.
"""

from __future__ import annotations

import argparse
import os
import platform
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ..errors import InputError

METHODS = ("fft floor", "scipy plain", "fixed", "searched", "search")


def add_parser(p: argparse.ArgumentParser) -> None:
    p.add_argument("--duration", type=float, default=60.0, help="seconds of signal per channel (default 60)")
    p.add_argument("--window", type=float, default=4.0, help="seconds of signal per update (default 4)")
    p.add_argument("--update-interval", type=float, default=1.0,
                   help="seconds between updates: windows overlap by window - interval (default 1)")
    p.add_argument("--rates", default="51200,48000", help="sampling rates in Hz, comma-separated (default 51200,48000)")
    p.add_argument("--channels", default="1,4", help="channel counts, comma-separated, 1..4 (default 1,4)")
    p.add_argument("--repeat", type=int, default=7, help="interleaved repeats of every method (default 7)")
    p.add_argument("--scaling", action="store_true", help="add the cost per sample over window lengths and rates")


def bench_machine(fixed_band: bool = True, *, window_s: float = 4.0, fmax_hz: float = 10000.0,
                  band_hz: tuple[float, float] = (2000.0, 7000.0)):
    """A fan with four measurement points, the demo's kind of settings."""
    from ..settings import models  # noqa: PLC0415

    bearing = models.Bearing(id="de", elements=9, element_diameter=12.7, pitch_diameter=62.0)
    points = [models.Point(id=f"p{i}", bearing="de", sensor=models.Sensor(channel=i, sensitivity_mv_per_g=100.0))
              for i in range(4)]
    bands: list[models.AnyBand] = [
        models.FeatureBand(name="shaft-1x", quantity="velocity", feature="shaft", harmonics=1),
        models.OrderBand(name="shaft-2x", quantity="velocity", low_order=1.9, high_order=2.1),
        models.FeatureBand(name="blade-pass", quantity="velocity", feature="blade_pass", harmonics=2),
        models.FeatureBand(name="outer-race", quantity="envelope", feature="bpfo", bearing="de"),
        models.FeatureBand(name="inner-race", quantity="envelope", feature="bpfi", bearing="de"),
        models.HzBand(name="hf", quantity="acceleration", low_hz=0.2 * fmax_hz, high_hz=fmax_hz),
    ]
    envelope = models.Envelope(band_hz=band_hz if fixed_band else None)
    return models.Machine(
        id="bench", blades=8, speed=models.Speed(mode="fixed", rpm=1480), bearings=[bearing], points=points,
        bands=bands, analysis=models.Analysis(fmax_hz=fmax_hz, lines=3200, window_s=window_s, envelope=envelope),
    )


def synthetic_signal(fs_hz: float, seconds: float, seed: int) -> np.ndarray:
    """Continuous signal in m/s^2 (float32): noise, 1x and blade-pass tones, impacts ringing at 3 kHz."""
    rng = np.random.default_rng(seed)
    n = int(round(seconds * fs_hz))
    t = np.arange(n) / fs_hz
    tr = t[: int(0.005 * fs_hz)]
    ring = np.exp(-2 * np.pi * 0.05 * 3000 * tr) * np.sin(2 * np.pi * 3000 * tr)
    x = rng.standard_normal(n) * 0.5
    x += 1.2 * np.sin(2 * np.pi * 24.67 * t + rng.uniform(0, 6.3)) + 0.4 * np.sin(2 * np.pi * 197.3 * t)
    period = fs_hz / 87.4
    count = int(n / period)
    at = (np.arange(count) * period + rng.normal(0, 0.005 * period, count)).astype(int)
    impacts = np.zeros(n)
    impacts[at[(at >= 0) & (at < n)]] = 4.0
    x += np.convolve(impacts, ring)[:n]
    return x.astype(np.float32)


@dataclass
class Row:
    label: str
    fs_hz: float
    channels: int
    n_updates: int
    interval_s: float
    times: dict[str, list[float]] = field(default_factory=dict)  # method -> CPU seconds per repeat

    def rtf(self, method: str) -> list[float]:
        """x real time per channel of each repeat."""
        return [self.n_updates * self.interval_s * self.channels / t for t in self.times.get(method, []) if t > 0]

    def median_s(self, method: str) -> float:
        return statistics.median(self.times[method])


# ------------------------------------------------------------------------------------------ methods
class FftRecorder:
    """Records the scipy.fft calls made while it is active: (function, input shape, dtype, keywords)."""

    NAMES = ("rfft", "irfft", "fft", "ifft")

    def __init__(self) -> None:
        self.calls: list[tuple[str, tuple[int, ...], np.dtype, dict]] = []
        self._saved: dict[str, Callable] = {}

    def __enter__(self) -> FftRecorder:
        import scipy.fft  # noqa: PLC0415

        for name in self.NAMES:
            fn = self._saved[name] = getattr(scipy.fft, name)
            setattr(scipy.fft, name, self._wrap(name, fn))
        return self

    def _wrap(self, name: str, fn: Callable) -> Callable:
        def recorded(x, *args, **kw):
            a = np.asarray(x)
            keep = {k: v for k, v in kw.items() if k != "overwrite_x"}
            self.calls.append((name, a.shape, a.dtype, {"args": args, **keep}))
            return fn(x, *args, **kw)
        return recorded

    def __exit__(self, *exc) -> None:
        import scipy.fft  # noqa: PLC0415

        for name, fn in self._saved.items():
            setattr(scipy.fft, name, fn)

    def replayer(self) -> Callable[[], None]:
        """A function making the same transforms on ready-made inputs (of the recorded shapes and types)."""
        import scipy.fft  # noqa: PLC0415

        rng = np.random.default_rng(0)
        jobs = []
        for name, shape, dtype, kw in self.calls:
            x: np.ndarray = rng.standard_normal(shape)
            if dtype.kind == "c":
                x = x + 1j * rng.standard_normal(shape)
            x = x.astype(dtype)
            args = kw.pop("args")
            jobs.append((getattr(scipy.fft, name), x, args, kw))

        def run() -> None:
            for fn, x, args, kw in jobs:
                fn(x, *args, **kw)
        return run


def plain_scipy(fs_hz: float, plan, band_hz: tuple[float, float]) -> Callable[[np.ndarray], None]:
    """The pipeline a user would write per window (see the module docstring)."""
    sos: list[np.ndarray] = []

    def run(x: np.ndarray) -> None:
        import scipy.fft  # noqa: PLC0415
        import scipy.signal  # noqa: PLC0415 - on first use: the peak RSS of rotorwatch's methods is read before

        if not sos:
            sos.append(scipy.signal.butter(4, band_hz, btype="bandpass", fs=fs_hz, output="sos"))
        x = np.asarray(x, dtype=float)
        scipy.signal.welch(x, fs_hz, window="hann", nperseg=plan.n_per_seg, noverlap=plan.n_overlap)
        env = np.abs(scipy.signal.hilbert(scipy.signal.sosfilt(sos[0], x)))
        scipy.fft.rfft(env - env.mean())
    return run


def _windows(signal: np.ndarray, n: int, hop: int, n_updates: int) -> list[np.ndarray]:
    return [signal[k * hop: k * hop + n] for k in range(n_updates)]


def _time(fn: Callable[[], None]) -> float:
    t0 = time.process_time()
    fn()
    return time.process_time() - t0


def _row_methods(fs_hz: float, channels: int, window_s: float, interval_s: float, duration_s: float,
                 signals: list[np.ndarray]) -> tuple[Row, dict[str, Callable[[], None]]]:
    """A row and, per method, a function running every update of every channel once."""
    from ..analysis.point import PointAnalyzer  # noqa: PLC0415

    fixed, searched = bench_machine(True, window_s=window_s), bench_machine(False, window_s=window_s)
    n, hop = int(round(window_s * fs_hz)), int(round(interval_s * fs_hz))
    n_updates = (int(round(duration_s * fs_hz)) - n) // hop + 1
    if n_updates < 1:
        raise InputError(f"--duration {duration_s:g}: shorter than one window ({window_s:g} s)")
    wins = [_windows(s, n, hop, n_updates) for s in signals[:channels]]
    fix = [PointAnalyzer(fixed, fixed.points[i], fs_hz) for i in range(channels)]
    sea = [PointAnalyzer(searched, searched.points[i], fs_hz) for i in range(channels)]
    kept = [a.analyze(w[0]).envelope_band_hz for a, w in zip(sea, wins)]  # chosen when learning starts
    with FftRecorder() as rec:
        fix[0].analyze(wins[0][0])
    floor_one = rec.replayer()
    plain = plain_scipy(fs_hz, fix[0].plan, (2000.0, 7000.0))  # the bench machine's fixed band

    def each(call: Callable[[int, int], object]) -> Callable[[], None]:
        def run() -> None:
            for k in range(n_updates):
                for c in range(channels):
                    call(c, k)
        return run

    methods = {
        "fft floor": each(lambda c, k: floor_one()),
        "scipy plain": each(lambda c, k: plain(wins[c][k])),
        "fixed": each(lambda c, k: fix[c].analyze(wins[c][k])),
        "searched": each(lambda c, k: sea[c].analyze(wins[c][k], envelope_band_hz=kept[c])),
        "search": each(lambda c, k: sea[c].analyze(wins[c][k])),
    }
    label = f"{fs_hz / 1000:g} kHz"
    return Row(label, fs_hz, channels, n_updates, interval_s), methods


def _peak_rss_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0  # kB on Linux


def _numbers(text: str, what: str) -> list[float]:
    try:
        values = [float(v) for v in text.split(",") if v.strip()]
    except ValueError:
        raise InputError(f"--{what} {text!r}: give numbers separated by commas") from None
    if not values or any(v <= 0 for v in values):
        raise InputError(f"--{what} {text!r}: give positive numbers separated by commas")
    return values


def _check(args: argparse.Namespace) -> tuple[list[float], list[int]]:
    rates = _numbers(args.rates, "rates")
    channels = [int(c) for c in _numbers(args.channels, "channels")]
    if any(c > 4 for c in channels):
        raise InputError(f"--channels {args.channels!r}: the bench machine has 4 points (1..4)")
    if args.repeat < 1:
        raise InputError(f"--repeat {args.repeat}: must be at least 1")
    if not 0 < args.update_interval <= args.window:
        raise InputError(f"--update-interval {args.update_interval:g}: must be > 0 and at most --window ({args.window:g} s)")
    if args.duration < args.window:
        raise InputError(f"--duration {args.duration:g}: must be at least one window ({args.window:g} s)")
    return rates, channels


def _fmt(values: list[float]) -> str:
    if not values:
        return "-"
    return f"{statistics.median(values):.0f} ({min(values):.0f}-{max(values):.0f})"


def _write_table(out, rows: list[Row], args: argparse.Namespace) -> None:
    out.write(f"{'rate':>9} {'ch':>2} " + " ".join(f"{m:>17}" for m in METHODS)
              + f" {'fixed/floor':>11} {'plain/fixed':>11} {'searched/fixed':>14} {'search/fixed':>12}\n")
    for r in rows:
        cells = " ".join(f"{_fmt(r.rtf(m)):>17}" for m in METHODS)
        fixed = r.median_s("fixed")
        out.write(f"{r.label:>9} {r.channels:>2} {cells} {fixed / r.median_s('fft floor'):>10.2f}x "
                  f"{r.median_s('scipy plain') / fixed:>10.2f}x {fixed / r.median_s('searched'):>13.2f}x "
                  f"{fixed / r.median_s('search'):>11.2f}x\n")
    out.write("cells: x real time per channel (seconds of signal advanced per CPU second), median (min-max) of "
              f"{args.repeat} interleaved repeats\n"
              "fixed/floor: fixed's CPU time over its FFTs' alone (1 = nothing but transforms); plain/fixed: "
              "how many times faster than the plain scipy pipeline; searched/fixed and search/fixed: speed "
              "relative to the fixed band (1 = as fast)\n")


def _machine_line() -> str:
    cpu = platform.processor() or platform.machine()
    try:
        with open("/proc/cpuinfo", encoding="utf-8") as f:
            cpu = next((ln.split(":", 1)[1].strip() for ln in f if ln.startswith("model name")), cpu)
    except OSError:
        pass
    import scipy  # noqa: PLC0415

    return (f"machine: {cpu}, {os.cpu_count()} CPUs, load {os.getloadavg()[0]:.1f}; Python {platform.python_version()}, "
            f"numpy {np.__version__}, scipy {scipy.__version__}")


def _analyzing(analyzer: Any, wins: list[np.ndarray]) -> Callable[[], None]:
    def run() -> None:
        for w in wins:
            analyzer.analyze(w)
    return run


SCALING = ((51200.0, 1.0), (51200.0, 4.0), (51200.0, 16.0), (12800.0, 4.0), (25600.0, 4.0), (102400.0, 4.0))


def _scaling(out, repeat: int) -> None:
    """The fixed path's CPU time per window sample over window lengths and rates (settings scaled)."""
    from ..analysis.point import PointAnalyzer  # noqa: PLC0415

    cases: list[tuple[float, float, Any, list[np.ndarray], list[float]]] = []
    for fs, window_s in SCALING:
        m = bench_machine(True, window_s=window_s, fmax_hz=fs / 5.12, band_hz=(fs / 25.6, fs / 7.3))
        a = PointAnalyzer(m, m.points[0], fs)
        n = int(round(window_s * fs))
        x = synthetic_signal(fs, window_s + 3.0, seed=9)
        wins = [x[k * int(fs): k * int(fs) + n] for k in range(4)]
        a.analyze(wins[0])
        cases.append((fs, window_s, a, wins, []))
    for _ in range(repeat):
        for _, _, a, wins, times in cases:
            times.append(_time(_analyzing(a, wins)) / sum(w.size for w in wins))
    out.write("\nfixed path, CPU per window sample (ns), median (min-max); spectrum to rate / 5.12, envelope band "
              "rate / 25.6 .. rate / 7.3:\n")
    for fs, window_s, _, _, times in cases:
        ns = [1e9 * t for t in times]
        out.write(f"  {fs / 1000:>6g} kHz, {window_s:>4g} s windows: {statistics.median(ns):6.1f} "
                  f"({min(ns):.1f}-{max(ns):.1f})\n")


IMPORT_PROBE = (
    "import time\n"
    "t0 = time.process_time()\n"
    "import rotorwatch.analysis.point\n"
    "t1 = time.process_time()\n"
    "import scipy.fft\n"
    "print(t1 - t0, time.process_time() - t1)\n"
)


def import_cpu_s(repeat: int = 3) -> tuple[float, float]:
    """CPU seconds of ``import rotorwatch.analysis.point`` in a fresh interpreter, and of the ``scipy.fft``
    import the first transform adds (medians of ``repeat`` runs)."""
    runs = []
    for _ in range(repeat):
        done = subprocess.run([sys.executable, "-c", IMPORT_PROBE], capture_output=True, text=True, timeout=120,
                              check=True)
        runs.append(tuple(float(v) for v in done.stdout.split()))
    return statistics.median(r[0] for r in runs), statistics.median(r[1] for r in runs)


ANALYZE_PROBE = (
    "import sys\n"
    "from rotorwatch.cli import main\n"
    "rc = main(sys.argv[1:])\n"
    "with open('/proc/self/status') as f:\n"
    "    sys.stderr.write(next(ln for ln in f if ln.startswith('VmHWM')))\n"
    "sys.exit(rc)\n"
)


def analyze_peak_rss_mb(seconds: float = 5.0, fs_hz: float = 48000.0) -> float:
    """Peak resident memory (MB, the process's VmHWM) of ``rotorwatch analyze`` in a fresh interpreter on a
    recording the size of the shared bearing recordings (``seconds`` of this module's synthetic signal at
    ``fs_hz``). Read inside the child: a forked child's rusage would count this process's pages too."""
    with tempfile.TemporaryDirectory() as tmp:
        path = os.path.join(tmp, "bench.npz")
        np.savez(path, signal=synthetic_signal(fs_hz, seconds, seed=5), fs=fs_hz, unit="m/s2")
        done = subprocess.run([sys.executable, "-c", ANALYZE_PROBE, "analyze", path, "--rpm", "1480", "--format",
                               "json"], stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True, timeout=300)
    hwm = [ln for ln in done.stderr.splitlines() if ln.startswith("VmHWM")]
    if done.returncode != 0 or not hwm:
        raise InputError(f"rotorwatch analyze of the bench recording failed: {done.stderr.strip()[-200:]}")
    return float(hwm[0].split()[1]) / 1024.0  # kB


def _targets(out, rows: list[Row], import_s: tuple[float, float], analyze_mb: float) -> None:
    """The issue's targets against this run's figures, one line each."""
    def worst(ratios: list[float]) -> str:
        return f"{min(ratios):.2f}-{max(ratios):.2f}x"

    floor = [r.median_s("fixed") / r.median_s("fft floor") for r in rows]
    plain = [r.median_s("scipy plain") / r.median_s("fixed") for r in rows]
    kept = [r.median_s("fixed") / r.median_s("searched") for r in rows]
    marks = {True: "met", False: "NOT met"}
    out.write("\ntargets (this run):\n"
              f"  fixed path within 1.5x of its FFT floor: {worst(floor)} ({marks[max(floor) <= 1.5]})\n"
              f"  fixed path >= 5x the plain scipy pipeline: {worst(plain)} ({marks[min(plain) >= 5.0]})\n"
              f"  searched band (kept) >= 0.9x the fixed band: {worst(kept)} ({marks[min(kept) >= 0.9]})\n"
              f"  import of the analysis under 150 ms CPU: {1000 * import_s[0]:.0f} ms "
              f"({marks[import_s[0] < 0.15]}; scipy.fft adds {1000 * import_s[1]:.0f} ms at the first transform)\n"
              f"  peak RSS of rotorwatch analyze (5 s at 48 kHz, a fresh process) <= 80 MB: {analyze_mb:.1f} MB "
              f"({marks[analyze_mb <= 80]}; the daemon on four channels: tests/bench/bench_daemon.py)\n")


def run(args: argparse.Namespace) -> int:
    rates, channels = _check(args)
    out = sys.stdout
    rss_start = _peak_rss_mb()
    setups = []
    signals_mb = 0.0
    for fs in rates:
        signals = [synthetic_signal(fs, args.duration, seed=ch) for ch in range(max(channels))]
        signals_mb += sum(s.nbytes for s in signals) / 2**20
        for n_ch in channels:
            setups.append(_row_methods(fs, n_ch, args.window, args.update_interval, args.duration, signals))
    order = [m for m in METHODS if m != "scipy plain"]
    rss_ours = None
    for _ in range(args.repeat):
        for row, methods in setups:
            for m in order:
                row.times.setdefault(m, []).append(_time(methods[m]))
        if rss_ours is None:
            rss_ours = _peak_rss_mb()  # before anything imports scipy.signal
            import scipy.signal  # noqa: F401, PLC0415 - loaded before the plain pipeline is timed
        for row, methods in setups:
            row.times.setdefault("scipy plain", []).append(_time(methods["scipy plain"]))
    out.write(f"rotorwatch bench: {args.duration:g} s of signal per channel, {args.window:g} s windows advanced "
              f"{args.update_interval:g} s (as the daemon updates); 3200 lines to 10 kHz; envelope 2-7 kHz (fixed) "
              f"or searched; CPU time by time.process_time\n{_machine_line()}\n")
    rows = [row for row, _ in setups]
    _write_table(out, rows, args)
    out.write(f"peak RSS of this process: {rss_start:.0f} MB at start, {rss_ours:.0f} MB after rotorwatch's methods "
              f"(holding {signals_mb:.0f} MB of bench signal), {_peak_rss_mb():.0f} MB after the scipy pipeline "
              "(scipy.signal loaded)\n")
    _targets(out, rows, import_cpu_s(), analyze_peak_rss_mb())
    if args.scaling:
        _scaling(out, args.repeat)
    return 0
