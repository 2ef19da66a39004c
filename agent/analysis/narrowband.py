"""The narrow-band spectrum of a whole update window: what the overall velocity and the acceleration and
velocity bands read.

The block spectrum (one FFT of the whole window, mean removed and ends tapered; :mod:`.envelope`, shared
with the speed estimate and the demodulation) becomes a Hann-windowed spectrum through the window's
three-tap kernel in frequency (Harris 1978), so its lines are 1/T apart: 0.25 Hz for a 4 s window, where
the Welch spectrum published for display has ``fmax_hz / lines`` (3.125 Hz for 3200 lines to 10 kHz).
The mean square of each line is (Parseval; w = taper x Hann over the M-point transform)

    P_k = 2 |Y_k|^2 / (M sum(w^2))

so the sum of P_k over the lines of a band is the band's mean square over the window, and a tone's
lines sum to its mean square wherever it falls.

Why the window's own resolution: a band (the overall band too) sums the lines whose centres lie inside its
edges. A Hann-windowed tone spreads over +/- 2 lines, and velocity weights each line by 1/(2 pi f)^2 at
that line's frequency: with 3.125 Hz lines a 12 Hz tone lost a fifth of its RMS to the lines below a
10 Hz edge, and a tone a few lines above the edge read up to 2 % high from its lower side lines' larger
weight. With lines 1/T apart the spread is +/- 2/T and the weight error of the side lines is of order
(1/(T f))^2: for T x (low edge) >= 8 (4 s for a 2 Hz edge, 0.8 s for 10 Hz) a tone anywhere from 1.2 x the
low edge to 0.8 x the high edge reads within 1 % of its RMS velocity. deploy/numbers.md tabulates the
edge response against an ideal band and ISO 2954's 3rd-order Butterworth band
(tests/unit/analysis/test_overall_band.py checks the table and the +/- 2 % promise).

Electrical lines: for a machine with ``line_frequency_hz`` the lines within ``electrical_half_width_hz``
of 2 x LF and its harmonics (100, 200, 300 ... Hz on 50 Hz mains) are left out of every band placed by
orders or on a kinematic feature (a 2-pole motor's 2x band must not read the 100 Hz electrical line as
misalignment) and out of the speed estimate. The overall velocity keeps them (it is broadband by
definition) and so do bands fixed in Hz (one may be set on 2xLF on purpose).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .diagnosis.lines import VelocityLines
from .envelope import BlockSpectrum
from .plan import AnalysisPlan
from .speed import hann_smooth

# Half width of the stretch left out around an electrical line: the Hann lobe (+/- 2 lines) and half a line
# for a line between bins, plus the mains' own wander: +/- 0.2 % (a synchronous grid holds about
# +/- 0.1 Hz on 50 Hz in normal operation; EN 50160 allows +/- 1 % over a year; from memory). A mechanical
# line closer than this to 2xLF loses part of its power with the electrical one.
ELECTRICAL_LOBE_LINES = 2.5
ELECTRICAL_DEVIATION = 0.002
# The shortest window whose resolution keeps the +/- 2 % promise at the overall band's low edge:
# T x low edge >= 8 (measured: 1 % worst case at 8, 2.2 % at 4; see the module docstring).
MIN_WINDOW_EDGE_PRODUCT = 8.0


def electrical_lines_hz(line_frequency_hz: float | None, top_hz: float) -> np.ndarray:
    """2 x LF and its harmonics up to ``top_hz`` (empty without a line frequency)."""
    if line_frequency_hz is None:
        return np.zeros(0)
    step = 2.0 * line_frequency_hz
    return step * np.arange(1, int(top_hz / step) + 1)


def electrical_half_width_hz(line_hz: np.ndarray | float, df_hz: float) -> np.ndarray:
    """Half width (Hz) of the stretch left out around each electrical line at resolution ``df_hz``."""
    return ELECTRICAL_LOBE_LINES * df_hz + ELECTRICAL_DEVIATION * np.asarray(line_hz, dtype=float)


def electrical_mask(freqs_hz: np.ndarray, line_frequency_hz: float | None, df_hz: float) -> np.ndarray | None:
    """True on the lines near 2 x LF and its harmonics, or None without a line frequency."""
    if line_frequency_hz is None or freqs_hz.size == 0:
        return None
    lines = electrical_lines_hz(line_frequency_hz, float(freqs_hz[-1]) + 1.0)
    mask = np.zeros(freqs_hz.size, dtype=bool)
    for hz, half in zip(lines, electrical_half_width_hz(lines, df_hz)):
        lo, hi = np.searchsorted(freqs_hz, [hz - half, hz + half], side="left")
        mask[lo:hi] = True
    return mask


@dataclass(frozen=True)
class _Setup:
    n_lines: int  # lines 0 .. n_lines - 1 are kept (up to the highest band edge)
    df_hz: float
    freqs_hz: np.ndarray
    scale: float  # 2 / (M sum(w^2))
    gain: np.ndarray | None  # AC-coupling power correction per line
    velocity_weight: np.ndarray  # (1000 / (2 pi f))^2 above the plan's cut-off, else 0
    overall: slice
    electrical: np.ndarray | None


@dataclass(frozen=True)
class NarrowSpectrum:
    """Mean square per line of one window: acceleration ((m/s^2)^2) and velocity ((mm/s)^2)."""

    df_hz: float
    freqs_hz: np.ndarray
    accel_ms: np.ndarray
    velocity_ms: np.ndarray
    overall_velocity_mm_s: float
    electrical: np.ndarray | None  # lines near 2xLF and its harmonics, or None

    def mean_square(self, spectrum: str) -> np.ndarray:
        """Mean square per line of the spectrum a quantity reads (``Quantity.spectrum``)."""
        return {"acceleration": self.accel_ms, "velocity": self.velocity_ms}[spectrum]


class NarrowbandKernel:
    """Narrow-band spectra of blocks for one plan; caches its set-up per block length."""

    def __init__(self, plan: AnalysisPlan):
        self.plan = plan
        self._cache: dict[tuple[int, int], _Setup] = {}

    def _setup(self, bs: BlockSpectrum) -> _Setup:
        key = (bs.n_samples, bs.n_fft)
        s = self._cache.get(key)
        if s is not None:
            return s
        p = self.plan
        n, m, n_trim = bs.n_samples, bs.n_fft, bs.n_trim
        w = 0.5 - 0.5 * np.cos(2.0 * np.pi * np.arange(n) / m)  # Hann over the M-point transform
        ramp = 0.5 - 0.5 * np.cos(np.pi * (np.arange(n_trim) + 0.5) / n_trim)  # the block's end taper
        w[:n_trim] *= ramp
        w[n - n_trim:] *= ramp[::-1]
        df = bs.df_hz
        n_lines = min(int(p.narrow_top_hz / df) + 3, bs.spec.size - 1)
        freqs = np.arange(n_lines) * df
        gain = None
        if p.point.sensor.ac_coupling_corner_hz is not None:
            from .plan import AC_CORRECTION_MAX  # noqa: PLC0415

            with np.errstate(divide="ignore"):
                gain = np.minimum(1.0 + (p.point.sensor.ac_coupling_corner_hz / freqs) ** 2, AC_CORRECTION_MAX**2)
            gain[0] = 0.0
        cutoff = max(p.integration_cutoff_hz, 2.0 * df)
        with np.errstate(divide="ignore"):
            vel_w = (1000.0 / (2.0 * np.pi * freqs)) ** 2
        vel_w[freqs < cutoff] = 0.0
        lo, hi = p.overall_band_hz
        overall = slice(int(np.searchsorted(freqs, lo, side="left")), int(np.searchsorted(freqs, hi, side="right")))
        s = _Setup(n_lines, df, freqs, 2.0 / (m * float(np.dot(w, w))), gain, vel_w, overall,
                   electrical_mask(freqs, p.machine.line_frequency_hz, df))
        if len(self._cache) > 8:
            self._cache.clear()
        self._cache[key] = s
        return s

    def lines_upto(self, bs: BlockSpectrum, n_lines: int) -> VelocityLines:
        """The velocity lines of the first ``n_lines`` lines of :meth:`spectrum` (at most all of them): the
        same values, without the work on the lines above (the window halves' steadiness check reads 1x)."""
        s = self._setup(bs)
        n = min(n_lines, s.n_lines)
        y = hann_smooth(bs.spec[: n + 1].astype(np.complex128))[:n]
        accel = y * y * s.scale
        if s.gain is not None:
            accel *= s.gain[:n]
        return VelocityLines(accel, s.df_hz, None if s.electrical is None else s.electrical[:n])

    def spectrum(self, bs: BlockSpectrum) -> NarrowSpectrum:
        s = self._setup(bs)
        y = hann_smooth(bs.spec[: s.n_lines + 1].astype(np.complex128))[: s.n_lines]
        accel = y * y * s.scale
        if s.gain is not None:
            accel *= s.gain
        vel = accel * s.velocity_weight
        overall = float(np.sqrt(vel[s.overall].sum()))
        return NarrowSpectrum(s.df_hz, s.freqs_hz, accel, vel, overall, s.electrical)
