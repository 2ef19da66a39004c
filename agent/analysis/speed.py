"""Running-speed estimation from the acceleration spectrum: a harmonic-sum (comb) search.

Shaft-related vibration shows as lines at 1x, 2x, 3x ... of the shaft frequency. Within the configured
range ``min_rpm .. max_rpm`` the estimator looks for the frequency f whose harmonics stand highest over
the local floor of the spectrum (common practice; harmonic summation as used for pitch estimation):

1. whiten: divide the amplitude spectrum by its local floor (medians of chunks half a shaft order wide,
   interpolated), so each bin reads "times the local floor" and a loud region cannot dominate;
2. score(f) = sum over k = 1..K of min(Z(k f), 10), with Z interpolated between bins; the cap keeps one
   strong line (e.g. an electrical line near an order) from outweighing a series of harmonics;
3. evaluate on a grid finer than df / K and refine the best point by parabolic interpolation;
4. the estimate is *clear* when at least two harmonics read 4 x the floor or more (12 dB: a single
   periodogram bin of Gaussian noise gets there with a chance of about 1e-5); otherwise the caller falls
   back on the nominal speed.

The analyzer feeds it the whole block's spectrum (resolution 1/T, 0.25 Hz for a 4 s block) rather than
the Welch average, because the shaft lines are narrow and the speed range is a few hertz wide. The
resolution of a harmonic sum improves with K: an error of df/4 on the K-th harmonic is df/(4K) on the
shaft frequency.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

N_HARMONICS = 8
CAP = 10.0
CLEAR_RATIO = 4.0
CLEAR_HARMONICS = 2


@dataclass(frozen=True)
class SpeedEstimate:
    rpm: float
    clear: bool
    harmonics_clear: int  # harmonics reading CLEAR_RATIO x the floor or more at the estimate
    score: float


def local_floor(a: np.ndarray, chunk: int) -> np.ndarray:
    """Medians of consecutive chunks of ``chunk`` bins, interpolated back to every bin."""
    n_chunks = max(a.size // chunk, 1)
    used = a[: n_chunks * chunk].reshape(n_chunks, -1)
    med = np.median(used, axis=-1)
    centres = (np.arange(n_chunks) + 0.5) * used.shape[1]
    return np.interp(np.arange(a.size), centres, med)


def estimate_speed(line_rms: np.ndarray, df_hz: float, min_rpm: float, max_rpm: float,
                   n_harmonics: int = N_HARMONICS) -> SpeedEstimate:
    """Shaft speed (rpm) whose harmonics stand out most in ``line_rms`` (bins 0, df, 2 df, ...)."""
    f_lo, f_hi = min_rpm / 60.0, max_rpm / 60.0
    top_bin = line_rms.size - 2
    k_max = max(1, min(n_harmonics, int(top_bin * df_hz / f_hi)))
    n_bins = min(int(math.ceil((k_max + 1.5) * f_hi / df_hz)) + 2, line_rms.size)
    a = np.asarray(line_rms[:n_bins], dtype=float)
    floor = local_floor(a, max(15, int(0.5 * f_lo / df_hz)))
    tiny = max(float(np.max(floor)) * 1e-12, 1e-300)
    z = np.minimum(a / np.maximum(floor, tiny), CAP)
    z[0] = 0.0
    step = df_hz / (4.0 * k_max)
    grid = np.arange(f_lo, f_hi + 0.5 * step, step)
    ks = np.arange(1, k_max + 1)
    bins = grid[:, None] * ks[None, :] / df_hz
    scores = np.interp(bins, np.arange(n_bins), z).sum(axis=1)
    i = int(np.argmax(scores))
    f = grid[i]
    if 0 < i < grid.size - 1:
        y0, y1, y2 = scores[i - 1], scores[i], scores[i + 1]
        den = y0 - 2 * y1 + y2
        if den < 0:
            f += 0.5 * (y0 - y2) / den * step
    at = np.interp(f * ks / df_hz, np.arange(n_bins), z)
    n_clear = int(np.count_nonzero(at >= CLEAR_RATIO))
    return SpeedEstimate(rpm=float(f * 60.0), clear=n_clear >= CLEAR_HARMONICS, harmonics_clear=n_clear,
                         score=float(scores[i]))
