"""Running-speed estimation from the acceleration spectrum: a harmonic-sum (comb) search.

Shaft-related vibration shows as lines at 1x, 2x, 3x ... of the shaft frequency. Within the configured
range ``min_rpm .. max_rpm`` the estimator looks for the frequency f whose harmonics stand highest over
the local floor of the spectrum (common practice; harmonic summation as used for pitch estimation):

1. whiten: divide the amplitude spectrum by its local floor (medians of chunks half a shaft order wide,
   interpolated), so each bin reads "times the local floor" and a loud region cannot dominate;
2. score(f) = sum over k = 1..K of ln(max(Z(k f), 1)), with Z interpolated between bins; the logarithm
   keeps one strong line (e.g. an electrical line near an order) from outweighing a series of harmonics,
   and unlike a hard cap it does not flatten the top of a strong line (which would bias the estimate);
3. evaluate on a grid finer than df / K, then refine by a least-squares fit to the clear harmonics;
4. the estimate is *clear* when at least two harmonics read 4 x the floor or more (12 dB: a single
   periodogram bin of Gaussian noise gets there with a chance of about 1e-5); otherwise the caller falls
   back on the nominal speed.

Electrical lines are not shaft harmonics: for a machine with ``line_frequency_hz`` the stretches around
2 x LF and its harmonics (``leave_out``, see :mod:`.narrowband`) count as floor, so a 4-pole motor at
1485 r/min with a strong 100 Hz line reads 1485, not 1500 r/min, and a spectrum holding nothing but the
electrical lines gives no clear speed.

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


def hann_smooth(spec: np.ndarray) -> np.ndarray:
    """|X| of a Hann-windowed transform from the unwindowed complex spectrum X: the periodic Hann window
    is 0.5 - 0.25 (e^{+j} + e^{-j}), a three-tap kernel in frequency (Harris 1978)."""
    out = 0.5 * spec
    out[1:] -= 0.25 * spec[:-1]
    out[:-1] -= 0.25 * spec[1:]
    return np.abs(out)


def _refine(a: np.ndarray, f_hz: float, ks: np.ndarray, df_hz: float, ok: np.ndarray) -> float:
    """Least-squares shaft rate from the interpolated peaks of the clear harmonics: p_k = k f."""
    num = den = 0.0
    for k in ks[ok]:
        i = int(round(k * f_hz / df_hz))
        lo, hi = max(i - 2, 1), min(i + 3, a.size - 1)
        j = lo + int(np.argmax(a[lo:hi]))
        if not 1 <= j < a.size - 1:
            continue
        y0, y1, y2 = np.log(np.maximum(a[j - 1: j + 2], 1e-300))
        den_p = y0 - 2 * y1 + y2
        shift = 0.5 * (y0 - y2) / den_p if den_p < 0 else 0.0
        num += k * (j + shift) * df_hz
        den += k * k
    return num / den if den > 0 else f_hz


def estimate_speed(amplitude: np.ndarray, df_hz: float, min_rpm: float, max_rpm: float,
                   n_harmonics: int = N_HARMONICS, leave_out: np.ndarray | None = None) -> SpeedEstimate:
    """Shaft speed (rpm) whose harmonics stand out most in ``amplitude`` (bins 0, df, 2 df, ...).

    The comb search gives the estimate to about a bin over K; it is then refined by a least-squares fit
    of k x f to the clear harmonics' peaks, each located by parabolic interpolation of the log amplitude
    (a Hann-windowed spectrum keeps that interpolation's bias to a few hundredths of a bin).
    """
    f_lo, f_hi = min_rpm / 60.0, max_rpm / 60.0
    top_bin = amplitude.size - 2
    k_max = max(1, min(n_harmonics, int(top_bin * df_hz / f_hi)))
    n_bins = min(int(math.ceil((k_max + 1.5) * f_hi / df_hz)) + 2, amplitude.size)
    a = np.asarray(amplitude[:n_bins], dtype=float)
    floor = local_floor(a, max(15, int(0.5 * f_lo / df_hz)))
    tiny = max(float(np.max(floor)) * 1e-12, 1e-300)
    z = np.log(np.maximum(a / np.maximum(floor, tiny), 1.0))
    z[0] = 0.0
    if leave_out is not None:
        z[leave_out[:n_bins]] = 0.0
    step = df_hz / (4.0 * k_max)
    grid = np.arange(f_lo, f_hi + 0.5 * step, step)
    ks = np.arange(1, k_max + 1)
    bins = grid[:, None] * ks[None, :] / df_hz
    scores = np.interp(bins, np.arange(n_bins), z).sum(axis=1)
    i = int(np.argmax(scores))
    f = grid[i]
    at = np.interp(f * ks / df_hz, np.arange(n_bins), z)
    ok = at >= np.log(CLEAR_RATIO)
    n_clear = int(np.count_nonzero(ok))
    if n_clear:
        f = min(max(_refine(a, f, ks, df_hz, ok), f_lo), f_hi)
    return SpeedEstimate(rpm=float(f * 60.0), clear=n_clear >= CLEAR_HARMONICS, harmonics_clear=n_clear,
                         score=float(scores[i]))
