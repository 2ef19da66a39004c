"""Per-block sensor checks: is this block of volts a real vibration signal from a working sensor?

Run on the raw volts of one channel before calibration, with the sensor's settings. The checks, in the
order they are tried (the first that fires is reported):

1. ``invalid``: non-finite samples (NaN or infinity), nothing else can be said about the block;
2. ``flatline``: no variation at all (every sample equal): a stalled input, a muted channel;
3. ``dropout``: a run of at least ``min_zero_run`` exact zeros inside a varying signal: samples lost
   and zero-filled on the way (a live ADC with noise practically never repeats exactly 0.0 V);
4. ``clipping``: more than ``clip_fraction`` of the samples within ``clip_margin`` of the input range:
   the amplitude is limited, spectra and RMS read low and smeared;
5. ``disconnected``: the AC RMS sits at the interface noise floor (below ``open_rms_v``, 0.1 mV): no
   sensor, an open cable, or an unpowered IEPE supply;
6. ``bias_shift``: the mean of the input sits far from zero (``bias_fraction``, 5 %, of the input range)
   over the window, over one of its parts, or over any stretch of ``min_part_samples`` samples (a
   running mean): a cable or connector fault, a failing sensor amplifier. On a DC-coupled input a bias
   change is a lasting shift of the mean. On an AC-coupled input (IEPE conditioners, sound interfaces)
   the coupling removes DC, so a bias change shows only while it settles, as a transient decaying with
   the coupling's time constant (0.3 s at a 0.5 Hz corner): the running mean catches it in every window
   that holds its start, and the point reads normal again once the transient has left the window (the
   new bias itself cannot be seen through the coupling).

Parts of the window. The daemon's windows may overlap (an update every second over a 4 s window), so
a fault that starts inside a window covers only its newest part. Flatline, disconnected and bias are
therefore also checked on each of up to ``max_parts`` equal parts of the block (each at least
``min_part_samples`` long), and the clipped share of each part against ``part_clip_fraction``: a fault
is reported as soon as it fills one part, so within two updates whatever the overlap (an update
interval of at least one part: a window of 4 s at most 8 parts of 0.5 s), and the block stays faulty
until the faulty samples have left the window (the analysis of a window that holds them is not
trusted). A part of 4096 samples at 51.2 kHz is 80 ms, two revolutions of a 1500 r/min shaft: the
mean of a sine over two periods or more is below 1/(2 pi) of its amplitude, so a part's mean is no
false bias for any plausible vibration (at 5 % of a 1 V range that would take 0.3 V of 1x, over 100 mm/s).

The thresholds are common practice for accelerometers on sound and DAQ interfaces, not taken from a
standard; they live in :class:`SensorLimits` so a deployment can change them. This module stays one
function on one block; faults of the input as a whole (``overflow``: samples lost in the driver or
the capture queue, ``stalled``: no samples at all) are found by the daemon's capture and reported
with the same :class:`SensorHealth` record (:data:`INPUT_FAULTS`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..settings.models import Sensor
from .records import SensorHealth


@dataclass(frozen=True)
class SensorLimits:
    open_rms_v: float = 1e-4  # 0.1 mV RMS: interface noise floor, no sensor signal above it
    clip_margin: float = 0.01  # a sample within 1 % of the input range counts as clipped
    clip_fraction: float = 0.001  # more than 0.1 % clipped samples is clipping
    bias_fraction: float = 0.05  # |mean| above 5 % of the input range is a bias shift
    min_zero_run: int = 32  # this many exact zeros in a row is a dropout
    max_parts: int = 8  # the block is also checked in up to this many equal parts ...
    min_part_samples: int = 4096  # ... each at least this long
    part_clip_fraction: float = 0.01  # more than 1 % clipped samples in one part is clipping


DEFAULT_LIMITS = SensorLimits()

#: Faults found in the samples of one block by :func:`check_block` (figures in the health are measured).
BLOCK_FAULTS = ("invalid", "flatline", "dropout", "clipping", "disconnected", "bias_shift")
#: Faults of the input as a whole, reported by the daemon (no samples to measure).
INPUT_FAULTS = ("overflow", "stalled")


def _longest_zero_run(block: np.ndarray) -> int:
    z = block == 0.0
    if not z.any():
        return 0
    edges = np.diff(np.concatenate(([0], z.view(np.int8), [0])))
    starts = np.flatnonzero(edges == 1)
    ends = np.flatnonzero(edges == -1)
    return int((ends - starts).max())


def part_edges(n: int, limits: SensorLimits = DEFAULT_LIMITS) -> np.ndarray:
    """Sample indices bounding the equal parts a block of ``n`` samples is checked in (k + 1 edges)."""
    k = max(1, min(limits.max_parts, n // max(1, limits.min_part_samples)))
    return np.linspace(0, n, k + 1).round().astype(int)


def _where(i: int, k: int) -> str:
    """Which part of the window: for people, newest last."""
    if k == 1:
        return "the window"
    if i == k - 1:
        return f"the newest 1/{k} of the window"
    return f"part {i + 1} of {k} of the window"


def check_block(block_v: np.ndarray, sensor: Sensor, limits: SensorLimits = DEFAULT_LIMITS) -> SensorHealth:
    """Check one block of raw volts from ``sensor``; return ``ok`` or the first fault found."""
    x = np.asarray(block_v, dtype=float).ravel()
    n = x.size
    if n == 0:
        return SensorHealth(ok=False, fault="dropout", reason="empty block (no samples)")
    finite = np.isfinite(x)
    if not finite.all():
        bad = int(n - finite.sum())
        return SensorHealth(ok=False, fault="invalid", reason=f"{bad} of {n} samples are not finite (NaN or infinity)")

    mean_v = float(x.mean())
    ac = x - mean_v
    ac_rms_v = float(np.sqrt(np.mean(ac * ac)))
    rms_v = float(np.sqrt(np.mean(x * x)))
    full_scale = sensor.input_range_v
    clipped = float(np.count_nonzero(np.abs(x) >= (1.0 - limits.clip_margin) * full_scale)) / n

    def health(fault: str | None, reason: str) -> SensorHealth:
        return SensorHealth(
            ok=fault is None, fault=fault, reason=reason, rms_v=rms_v, mean_v=mean_v, clipped_fraction=clipped,
        )

    lo, hi = float(x.min()), float(x.max())
    if lo == hi:
        return health("flatline", f"no variation: all {n} samples are {lo:g} V")
    run = _longest_zero_run(x)
    if run >= limits.min_zero_run:
        return health("dropout", f"{run} consecutive samples are exactly 0 V (samples lost)")
    edges = part_edges(n, limits)
    k = len(edges) - 1
    parts = [x[a:b] for a, b in zip(edges[:-1], edges[1:])]
    for i, part in enumerate(parts):
        if k > 1 and part.min() == part.max():
            return health("flatline", f"no variation in {_where(i, k)}: {part.size} samples are {float(part[0]):g} V "
                                      "(the input stopped changing)")
    limit_v = (1.0 - limits.clip_margin) * full_scale
    part_clipped = [float(np.count_nonzero(np.abs(part) >= limit_v)) / part.size for part in parts]
    worst = int(np.argmax(part_clipped))
    if clipped > limits.clip_fraction or (k > 1 and part_clipped[worst] > limits.part_clip_fraction):
        share, where, bound = (clipped, "the window", limits.clip_fraction) if clipped > limits.clip_fraction \
            else (part_clipped[worst], _where(worst, k), limits.part_clip_fraction)
        return health(
            "clipping",
            f"{share * 100:.2g} % of samples in {where} within {limits.clip_margin * 100:g} % of the "
            f"{full_scale:g} V input range (limit {bound * 100:g} %)",
        )
    part_ac_rms = [float(np.std(part)) for part in parts]
    quiet = int(np.argmin(part_ac_rms))
    if ac_rms_v < limits.open_rms_v or part_ac_rms[quiet] < limits.open_rms_v:
        level, where = (ac_rms_v, "the window") if ac_rms_v < limits.open_rms_v else (part_ac_rms[quiet], _where(quiet, k))
        return health(
            "disconnected",
            f"signal {level * 1e3:.3g} mV RMS in {where} is at the input noise floor (below {limits.open_rms_v * 1e3:g} mV): "
            "sensor disconnected or unpowered",
        )
    part_mean = [float(part.mean()) for part in parts]
    off = int(np.argmax(np.abs(part_mean)))
    bias_v = limits.bias_fraction * full_scale
    if abs(mean_v) > bias_v or abs(part_mean[off]) > bias_v:
        level, where = (mean_v, "the window") if abs(mean_v) > bias_v else (part_mean[off], _where(off, k))
        return health(
            "bias_shift",
            f"mean {level * 1e3:.4g} mV in {where} is off zero by more than {limits.bias_fraction * 100:g} % of the "
            f"{full_scale:g} V input range (AC-coupled input expected near 0 V)",
        )
    span = limits.min_part_samples
    if n > span:
        c = np.concatenate(([0.0], np.cumsum(x)))
        running = (c[span:] - c[:-span]) / span
        at = int(np.argmax(np.abs(running)))
        if abs(running[at]) > bias_v:
            return health(
                "bias_shift",
                f"mean {running[at] * 1e3:.4g} mV over {span} samples from sample {at} of the window is off zero by more "
                f"than {limits.bias_fraction * 100:g} % of the {full_scale:g} V input range (a bias change settling "
                "through the input's AC coupling)",
            )
    return health(None, "")
