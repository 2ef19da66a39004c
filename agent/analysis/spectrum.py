"""Welch power spectral density of a block, and the RMS-per-line amplitude spectrum derived from it.

The estimate is Welch's averaged modified periodogram, the same as ``scipy.signal.welch`` with
``window='hann'``, ``detrend='constant'``, ``scaling='density'``, ``average='mean'`` (the unit tests hold
the two equal), computed with one batched ``scipy.fft.rfft`` over a strided view of the segments and a
window built once:

    PSD[k] = c_k / (fs * sum(w^2) * K) * sum_i |FFT(w * (x_i - mean(x_i)))[k]|^2

with c_k = 2 for every bin but DC and Nyquist (one-sided), K segments. The analyzer runs the transforms
in single precision (``dtype=np.float32``): it halves the memory traffic that dominates their cost, and
its round-off (about 1e-7 of the block's RMS per line, some 140 dB down) sits far below any
accelerometer's noise floor; sums over segments and everything after the FFT are in double precision. The segment mean is removed in the
frequency domain: the DFT of a constant times the window lives only in the few bins where the window's
own DFT is non-zero (bins 0 and 1 for the periodic Hann window), so ``mean_i * W[k]`` is subtracted there.

Scaling facts used (Heinzel, Ruediger & Schilling 2002; Harris 1978):

- sum(PSD) * df = mean-square of the signal (Parseval), for a broadband or a tonal signal;
- the power of one line is PSD * df * ENBW, with ENBW = N sum(w^2) / (sum w)^2 bins (1.5 for Hann); its
  square root is the RMS of a tone centred on that line ("RMS per line").
"""

from __future__ import annotations

from typing import Any

import numpy as np
from numpy.lib.stride_tricks import sliding_window_view

from ..errors import InputError
from .lazy import scipy


def hann(n: int) -> np.ndarray:
    """Periodic ("DFT-even") Hann window, w[k] = 0.5 - 0.5 cos(2 pi k / n): the same as
    ``scipy.signal.get_window("hann", n)``, built here so the daemon does not import ``scipy.signal``
    (tens of MB of resident memory) for one cosine."""
    return 0.5 - 0.5 * np.cos(2.0 * np.pi * np.arange(n) / n)


class WelchKernel:
    """Welch PSD for a fixed segment length, hop and window (set up once, applied to many blocks)."""

    def __init__(self, window: np.ndarray, n_overlap: int, fs_hz: float, dtype: type = np.float64):
        self.dtype: np.dtype[Any] = np.dtype(dtype)
        window = np.asarray(window, dtype=float)
        self.n_per_seg = n = window.size
        if not 0 <= n_overlap < n:
            raise ValueError(f"n_overlap = {n_overlap}: must be in 0..{n - 1}")
        self.n_overlap = n_overlap
        self.hop = n - n_overlap
        self.fs_hz = float(fs_hz)
        self.window = window
        self._window = window.astype(self.dtype)
        self.df_hz = self.fs_hz / n
        self.freqs_hz = np.fft.rfftfreq(n, 1.0 / self.fs_hz)
        sum_w2 = float(np.dot(window, window))
        self.enbw_bins = n * sum_w2 / float(window.sum()) ** 2
        w_dft = scipy.fft.rfft(window)
        self._mean_bins = np.flatnonzero(np.abs(w_dft) > 1e-9 * abs(w_dft[0]))
        self._mean_dft = w_dft[self._mean_bins]
        scale = np.full(self.freqs_hz.size, 2.0 / (self.fs_hz * sum_w2))
        scale[0] /= 2.0
        if n % 2 == 0:
            scale[-1] /= 2.0
        self._scale = scale

    def n_segments(self, n_samples: int) -> int:
        return 0 if n_samples < self.n_per_seg else 1 + (n_samples - self.n_per_seg) // self.hop

    def psd(self, x: np.ndarray) -> np.ndarray:
        """One-sided PSD of the last axis of ``x`` (unit^2/Hz); leading axes are kept (several channels)."""
        x = np.asarray(x, dtype=self.dtype)
        n_seg = self.n_segments(x.shape[-1])
        if n_seg == 0:
            raise InputError(
                f"block of {x.shape[-1]} samples is shorter than one spectrum segment of {self.n_per_seg} "
                f"samples ({self.n_per_seg / self.fs_hz:.3g} s at {self.fs_hz:g} Hz)"
            )
        segs = sliding_window_view(x, self.n_per_seg, axis=-1)[..., :: self.hop, :][..., :n_seg, :]
        spec = scipy.fft.rfft(segs * self._window, axis=-1, overwrite_x=True)
        means = segs.mean(axis=-1, dtype=np.float64)
        spec[..., self._mean_bins] -= (means[..., None] * self._mean_dft).astype(spec.dtype)
        # sum over segments of |X|^2 without temporaries: the complex array seen as (re, im) pairs
        pairs = spec.view(spec.real.dtype)
        sums = np.einsum("...ij,...ij->...j", pairs, pairs).astype(np.float64)
        power = sums[..., 0::2] + sums[..., 1::2]
        return power * (self._scale / n_seg)

    def line_rms(self, psd: np.ndarray) -> np.ndarray:
        """RMS of each line: sqrt(PSD * df * ENBW); a tone centred on a line reads its RMS there."""
        return np.sqrt(psd * (self.df_hz * self.enbw_bins))


def band_power(psd: np.ndarray, df_hz: float, bins: slice | np.ndarray) -> float:
    """Mean-square within the selected bins: sum(PSD) * df."""
    return float(psd[bins].sum() * df_hz)
