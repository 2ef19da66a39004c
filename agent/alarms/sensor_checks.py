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
6. ``bias_shift``: the mean of an AC-coupled input sits far from zero (``bias_fraction``, 5 %, of the input
   range): a cable or connector fault, a failing sensor amplifier.

The thresholds are common practice for accelerometers on sound and DAQ interfaces, not taken from a
standard; they live in :class:`SensorLimits` so a deployment can change them. A later issue deepens
these checks (trends of bias and noise floor); this module stays one function on one block.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from rotorwatch.alarms.records import SensorHealth
from rotorwatch.settings.models import Sensor


@dataclass(frozen=True)
class SensorLimits:
    open_rms_v: float = 1e-4  # 0.1 mV RMS: interface noise floor, no sensor signal above it
    clip_margin: float = 0.01  # a sample within 1 % of the input range counts as clipped
    clip_fraction: float = 0.001  # more than 0.1 % clipped samples is clipping
    bias_fraction: float = 0.05  # |mean| above 5 % of the input range is a bias shift
    min_zero_run: int = 32  # this many exact zeros in a row is a dropout


DEFAULT_LIMITS = SensorLimits()


def _longest_zero_run(block: np.ndarray) -> int:
    z = block == 0.0
    if not z.any():
        return 0
    edges = np.diff(np.concatenate(([0], z.view(np.int8), [0])))
    starts = np.flatnonzero(edges == 1)
    ends = np.flatnonzero(edges == -1)
    return int((ends - starts).max())


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
    if clipped > limits.clip_fraction:
        return health(
            "clipping",
            f"{clipped * 100:.2g} % of samples within {limits.clip_margin * 100:g} % of the "
            f"{full_scale:g} V input range (limit {limits.clip_fraction * 100:g} %)",
        )
    if ac_rms_v < limits.open_rms_v:
        return health(
            "disconnected",
            f"signal {ac_rms_v * 1e3:.3g} mV RMS is at the input noise floor (below {limits.open_rms_v * 1e3:g} mV): "
            "sensor disconnected or unpowered",
        )
    if abs(mean_v) > limits.bias_fraction * full_scale:
        return health(
            "bias_shift",
            f"mean {mean_v * 1e3:.4g} mV is off zero by more than {limits.bias_fraction * 100:g} % of the "
            f"{full_scale:g} V input range (AC-coupled input expected near 0 V)",
        )
    return health(None, "")
