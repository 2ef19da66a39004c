"""Time-waveform indicators of a block: mean, RMS, peak, crest factor and kurtosis.

- mean: the DC content (a sensor bias shift or a cable fault shows here); the other indicators are taken
  on the block with its mean removed;
- RMS = sqrt(mean(x^2)), peak = max |x|, crest factor = peak / RMS (sine sqrt(2), square 1);
- kurtosis is Pearson's beta_2 = mu_4 / sigma^4 (Gaussian 3, sine 1.5, square 1, uniform 1.8), the
  ``fisher=False`` form of ``scipy.stats.kurtosis``. Dyer & Stewart (1978) found it stays near the Gaussian
  value for an undamaged bearing and rises with impacts; crest factor and kurtosis fall back as damage
  spreads, so they are trended beside RMS and the envelope, never alone.

All moments come from a few vectorised passes over the block, with two temporary arrays.
"""

from __future__ import annotations

import math

import numpy as np

from .result import Waveform


def waveform(block_m_s2: np.ndarray, dtype: type = np.float64) -> tuple[Waveform, np.ndarray]:
    """Indicators of a block (m/s^2) and the block with its mean removed, in ``dtype`` (the analyzer asks
    for float32, which its transforms use; the moments are accumulated in double precision either way)."""
    x = np.asarray(block_m_s2, dtype=float)
    n = x.size
    mean = float(x.sum() / n)
    x0 = np.subtract(x, mean, dtype=dtype)
    peak = float(max(x0.max(), -x0.min()))
    sq = x0 * x0
    m2 = float(sq.sum(dtype=np.float64) / n)
    sq *= sq  # in place; (BLAS dot products are avoided: threaded start-up costs more than they save here)
    m4 = float(sq.sum(dtype=np.float64) / n)
    rms = math.sqrt(m2)
    if m2 > 0.0:
        crest = peak / rms
        kurt = m4 / (m2 * m2)
    else:  # a flat block: no shape to speak of
        crest = float("nan")
        kurt = float("nan")
    return Waveform(peak_m_s2=peak, rms_m_s2=rms, crest_factor=crest, kurtosis=kurt, mean_m_s2=mean), x0
