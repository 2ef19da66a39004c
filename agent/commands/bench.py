"""``rotorwatch bench``: how fast the point analysis runs, and how much memory it takes.

For each sampling rate (default 51.2 and 48 kHz) and channel count (1, and 4 points of one machine) it
runs the full :class:`~rotorwatch.analysis.point.PointAnalyzer` over 4 s blocks of a synthetic signal
(noise, shaft tones, and an impact train ringing a 3 kHz resonance), 3200 lines to 10 kHz, envelope band
2-7 kHz, and reports the real-time factor: seconds of signal analyzed per CPU second
(``time.process_time``, so other processes on the box do not count, but every thread of this one does;
each row is timed ``--repeat`` times, the repeats going round all rows in turn, and the fastest kept,
since contention only ever adds time). Peak RSS is read after the fast rows (that figure includes the
bench's own synthetic blocks, about 2 MB per block and channel) and again after the reference.
The same blocks go through the scipy-only reference (:mod:`rotorwatch.analysis.reference`: ``welch``,
Butterworth ``sosfiltfilt`` and ``hilbert`` over the full-rate block) for the speed-up ratio; one more row
times the envelope band search (no fixed band). Peak RSS comes from ``resource.getrusage``.

Timing is a measurement, not a test: the figures depend on the machine and on what else it is doing.
"""

from __future__ import annotations

import argparse
import math
import resource
import sys
import time
from dataclasses import dataclass

import numpy as np

from ..errors import InputError

WINDOW_S = 4.0


def add_parser(p: argparse.ArgumentParser) -> None:
    p.add_argument("--duration", type=float, default=60.0, help="seconds of signal per channel for the fast path (default 60)")
    p.add_argument("--reference-duration", type=float, default=16.0,
                   help="seconds of signal per channel for the reference (default 16)")
    p.add_argument("--rates", default="51200,48000", help="sampling rates in Hz, comma-separated (default 51200,48000)")
    p.add_argument("--channels", default="1,4", help="channel counts, comma-separated, 1..4 (default 1,4)")
    p.add_argument("--repeat", type=int, default=3, help="time each row this many times and keep the fastest (default 3)")


@dataclass
class Row:
    fs_hz: float
    channels: int
    band: str
    fast_s: float  # CPU seconds
    signal_s: float  # seconds of signal per channel
    ref_s: float | None = None
    ref_signal_s: float = 0.0

    @property
    def n_blocks(self) -> float:
        return self.signal_s / WINDOW_S * self.channels

    @property
    def ms_per_block(self) -> float:
        return 1e3 * self.fast_s / self.n_blocks

    @property
    def rtf_per_channel(self) -> float:
        return self.signal_s * self.channels / self.fast_s

    @property
    def ref_ms_per_block(self) -> float | None:
        if self.ref_s is None:
            return None
        return 1e3 * self.ref_s / (self.ref_signal_s / WINDOW_S * self.channels)


def bench_machine(fixed_band: bool = True):
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
        models.HzBand(name="hf", quantity="acceleration", low_hz=2000, high_hz=10000),
    ]
    envelope = models.Envelope(band_hz=(2000.0, 7000.0) if fixed_band else None)
    return models.Machine(
        id="bench", blades=8, speed=models.Speed(mode="fixed", rpm=1480), bearings=[bearing], points=points,
        bands=bands, analysis=models.Analysis(fmax_hz=10000, lines=3200, window_s=WINDOW_S, envelope=envelope),
    )


def synthetic_blocks(fs_hz: float, n_blocks: int, seed: int) -> list[np.ndarray]:
    """Distinct 4 s blocks in m/s^2: noise, 1x and blade-pass tones, impacts ringing at 3 kHz."""
    rng = np.random.default_rng(seed)
    n = int(WINDOW_S * fs_hz)
    t = np.arange(n) / fs_hz
    ring = np.exp(-2 * np.pi * 0.05 * 3000 * t[: int(0.005 * fs_hz)]) * np.sin(2 * np.pi * 3000 * t[: int(0.005 * fs_hz)])
    blocks = []
    for _ in range(n_blocks):
        x = rng.standard_normal(n) * 0.5
        x += 1.2 * np.sin(2 * np.pi * 24.67 * t + rng.uniform(0, 6.3)) + 0.4 * np.sin(2 * np.pi * 197.3 * t)
        impacts = np.zeros(n)
        period = fs_hz / 87.4
        at = (np.arange(int(n / period)) * period + rng.normal(0, 0.005 * period, int(n / period))).astype(int)
        impacts[at[(at >= 0) & (at < n)]] = 4.0
        x += np.convolve(impacts, ring)[:n]
        blocks.append(x)
    return blocks


def _run_fast(analyzers, blocks, n_rounds: int) -> float:
    t0 = time.process_time()
    for r in range(n_rounds):
        for a, bl in zip(analyzers, blocks):
            a.analyze(bl[r % len(bl)])
    return time.process_time() - t0


def _run_reference(analyzers, blocks, n_rounds: int, rpm: float) -> float:
    from ..analysis.reference import reference_analyze  # noqa: PLC0415

    t0 = time.process_time()
    for r in range(n_rounds):
        for a, bl in zip(analyzers, blocks):
            reference_analyze(a.plan, bl[r % len(bl)], rpm)
    return time.process_time() - t0


def _peak_rss_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0  # kB on Linux


def _ints(text: str, what: str) -> list[float]:
    try:
        values = [float(v) for v in text.split(",") if v.strip()]
    except ValueError:
        raise InputError(f"--{what} {text!r}: give numbers separated by commas") from None
    if not values or any(v <= 0 for v in values):
        raise InputError(f"--{what} {text!r}: give positive numbers separated by commas")
    return values


def run(args: argparse.Namespace) -> int:
    from ..analysis.point import PointAnalyzer  # noqa: PLC0415

    rates = _ints(args.rates, "rates")
    channels = [int(c) for c in _ints(args.channels, "channels")]
    if any(c > 4 for c in channels):
        raise InputError(f"--channels {args.channels!r}: the bench machine has 4 points (1..4)")
    if args.repeat < 1:
        raise InputError(f"--repeat {args.repeat}: must be at least 1")
    if args.duration < WINDOW_S or args.reference_duration < WINDOW_S:
        raise InputError(f"--duration and --reference-duration must be at least one block ({WINDOW_S:g} s)")
    out = sys.stdout
    rss_start = _peak_rss_mb()
    fixed, searched = bench_machine(True), bench_machine(False)
    rpm = fixed.speed.rpm
    n_fast = max(int(round(args.duration / WINDOW_S)), 1)
    n_ref = max(int(round(args.reference_duration / WINDOW_S)), 1)
    rows: list[Row] = []
    setups = []  # (row, analyzers, blocks)
    for fs in rates:
        blocks_by_ch = [synthetic_blocks(fs, 2, seed=ch) for ch in range(max(channels))]
        for n_ch in channels:
            analyzers = [PointAnalyzer(fixed, fixed.points[i], fs) for i in range(n_ch)]
            setups.append((Row(fs, n_ch, "fixed", math.inf, n_fast * WINDOW_S), analyzers, blocks_by_ch[:n_ch]))
        search = [PointAnalyzer(searched, searched.points[0], fs)]
        setups.append((Row(fs, 1, "searched", math.inf, n_fast * WINDOW_S), search, blocks_by_ch[:1]))
    for _, analyzers, blocks in setups:  # warm the caches (plans, windows, FFT set-ups)
        for a, bl in zip(analyzers, blocks):
            a.analyze(bl[0])
    # Repeats go round all rows in turn, so a burst of load elsewhere spoils one run of each, not a row.
    for _ in range(args.repeat):
        for row, analyzers, blocks in setups:
            row.fast_s = min(row.fast_s, _run_fast(analyzers, blocks, n_fast))
    rss_fast = _peak_rss_mb()
    for _ in range(args.repeat):
        for row, analyzers, blocks in setups:
            if row.band == "fixed":
                t = _run_reference(analyzers, blocks, n_ref, rpm)
                row.ref_s = t if row.ref_s is None else min(row.ref_s, t)
                row.ref_signal_s = n_ref * WINDOW_S
    rows = [row for row, _, _ in setups]
    rss_ref = _peak_rss_mb()

    out.write(f"rotorwatch bench: {rows[0].signal_s:g} s of signal per channel in {WINDOW_S:g} s blocks; "
              "3200 lines to 10 kHz, envelope 2-7 kHz (fixed) or searched; CPU time by time.process_time, "
              f"fastest of {args.repeat}\n")
    head = (f"{'rate Hz':>8}  {'ch':>2}  {'env band':<9}{'ms/block':>9}  {'x real time':>12}  "
            f"{'reference ms/block':>19}  {'speed-up':>8}")
    out.write(head + "\n" + "-" * len(head) + "\n")
    for r in rows:
        ref = r.ref_ms_per_block
        ref_txt = f"{ref:19.1f}" if ref is not None else f"{'-':>19}"
        ratio = f"{ref / r.ms_per_block:8.1f}" if ref is not None else f"{'-':>8}"
        out.write(f"{r.fs_hz:>8g}  {r.channels:>2}  {r.band:<9}{r.ms_per_block:>9.2f}  {r.rtf_per_channel:>12.0f}  {ref_txt}  {ratio}\n")
    out.write("x real time = seconds of signal analyzed per CPU second, per channel (4 channels: total signal / CPU)\n")
    out.write(f"peak RSS: {rss_start:.0f} MB before, {rss_fast:.0f} MB after the fast analysis, "
              f"{rss_ref:.0f} MB after the reference\n")
    return 0
