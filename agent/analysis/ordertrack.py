"""Speed changes within one window: the shaft angle, computed order tracking, and the change measured.

A line at a fixed order of the shaft (1x, blade pass, BPFO ...) moves with the speed: when the speed
changes within the window the line smears over the range it swept, and a narrow band or a defect search
window sees only part of it (an 8 % ramp within 4 s halves a BPFO finding's strength in our tests).

With a tach the shaft angle is known at every pulse: turn k/N at pulse k (N pulses per revolution).
Between pulses the angle is interpolated linearly (constant speed within a pulse interval); before the
first and after the last pulse it is extrapolated at the speed of the nearest interval. The window is
resampled at equal steps of angle, F / fs turns per sample, F being the mean shaft frequency over the
window: the resampled signal reads as if the machine had run at F all along, so the spectrum, the bands
and the envelope work on it unchanged and a line at order o sits at o x F whatever the speed did.
This is computed order tracking (Fyfe & Munck, "Analysis of computed order tracking", MSSP 11(2) 1997,
from memory). Samples between the original instants are interpolated linearly, which loses about
(pi f / fs)^2 / 6 of a component at f (under 0.1 % below 1 kHz at 51.2 kHz sampling).

The envelope is tracked after demodulation: the structural resonance the impacts ring sits at a fixed
frequency, so the band-pass works on the time signal, and the squared envelope (baseband, sampled far
above its span) is resampled to angle before its spectrum (Randall & Antoni 2011 recommend order
tracking the envelope signal, from memory).

Without a tach, :func:`speed_change_pct` compares the speed estimated in each half of the window: the
analysis reports the change, and a window whose speed changed more than ``speed.max_change_pct`` is
reported as unsteady (its order lines and bearing findings are smeared).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

# Below this change over the window, resampling changes nothing that matters: it is skipped. A ramp
# estimated from the spectrum is followed only from a larger change, above the estimate's own scatter
# between the halves of a window (a few hundredths of a percent on clean harmonics, up to 0.4 % on the
# shared bearing recordings).
MIN_TRACKED_CHANGE_PCT = 0.1
MIN_ESTIMATED_TRACKED_CHANGE_PCT = 0.5


@dataclass(frozen=True)
class ShaftAngle:
    """Shaft turns known at instants ``knots_s`` (seconds from the window start), interpolated linearly."""

    knots_s: np.ndarray
    turns: np.ndarray  # turns at the knots, increasing
    duration_s: float  # the window: 0 .. duration_s

    def turns_at(self, t_s: np.ndarray | float) -> np.ndarray:
        t = np.asarray(t_s, dtype=float)
        k, th = self.knots_s, self.turns
        out = np.interp(t, k, th)
        lo = (th[1] - th[0]) / (k[1] - k[0])
        hi = (th[-1] - th[-2]) / (k[-1] - k[-2])
        out = np.where(t < k[0], th[0] + (t - k[0]) * lo, out)
        return np.where(t > k[-1], th[-1] + (t - k[-1]) * hi, out)

    def times_at(self, turns: np.ndarray) -> np.ndarray:
        k, th = self.knots_s, self.turns
        out = np.interp(turns, th, k)
        lo = (k[1] - k[0]) / (th[1] - th[0])
        hi = (k[-1] - k[-2]) / (th[-1] - th[-2])
        out = np.where(turns < th[0], k[0] + (turns - th[0]) * lo, out)
        return np.where(turns > th[-1], k[-1] + (turns - th[-1]) * hi, out)

    @property
    def mean_hz(self) -> float:
        """Mean shaft frequency over the window."""
        ends = self.turns_at(np.array([0.0, self.duration_s]))
        return float((ends[1] - ends[0]) / self.duration_s)

    @property
    def change_pct(self) -> float:
        """Speed change over the window in % of the mean: the slope of a straight line fitted to the speeds
        of the knot intervals, times the window length (positive when the machine speeds up)."""
        k, th = self.knots_s, self.turns
        if k.size < 3:
            return 0.0
        mid = 0.5 * (k[1:] + k[:-1])
        hz = np.diff(th) / np.diff(k)
        slope = np.polyfit(mid, hz, 1)[0]
        return float(100.0 * slope * self.duration_s / self.mean_hz)


def from_pulses(pulses_s: np.ndarray, pulses_per_rev: int, duration_s: float) -> ShaftAngle | None:
    """The shaft angle from tach pulse times (seconds from the window start); None with fewer than 3
    pulses or times that do not increase."""
    t = np.asarray(pulses_s, dtype=float).ravel()
    if t.size < 3 or not np.all(np.isfinite(t)) or not np.all(np.diff(t) > 0) or not duration_s > 0:
        return None
    return ShaftAngle(t, np.arange(t.size) / float(pulses_per_rev), float(duration_s))


def from_linear_speed(f_start_hz: float, f_end_hz: float, duration_s: float, n_knots: int = 64) -> ShaftAngle:
    """The shaft angle of a speed that changes linearly from ``f_start_hz`` to ``f_end_hz`` over the window."""
    t = np.linspace(0.0, duration_s, n_knots)
    turns = f_start_hz * t + 0.5 * (f_end_hz - f_start_hz) / duration_s * t * t
    return ShaftAngle(t, turns, float(duration_s))


def resample(x: np.ndarray, rate_hz: float, angle: ShaftAngle, t0_s: float, shaft_hz: float) -> np.ndarray:
    """``x`` (sampled at ``rate_hz`` from ``t0_s`` seconds into the window) at equal steps of angle,
    ``shaft_hz / rate_hz`` turns apart, as many as fit its span (about as many as it has)."""
    n = x.size
    th0, th1 = angle.turns_at(np.array([t0_s, t0_s + (n - 1) / rate_hz]))
    step = shaft_hz / rate_hz
    m = max(int(math.floor((th1 - th0) / step + 1e-9)) + 1, 2)
    pos = (angle.times_at(th0 + np.arange(m) * step) - t0_s) * rate_hz
    return np.interp(pos, np.arange(n), x).astype(x.dtype, copy=False)


def speed_change_pct(rpm_first_half: float, rpm_second_half: float) -> float:
    """Speed change over a window from the mean speeds of its two halves, in % of their mean: for a speed
    that changes steadily, the halves' means lie half a window apart, so the change is twice their
    difference."""
    mean = 0.5 * (rpm_first_half + rpm_second_half)
    return 200.0 * (rpm_second_half - rpm_first_half) / mean
