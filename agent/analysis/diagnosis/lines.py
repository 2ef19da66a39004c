"""Line look-ups in one window's narrow-band spectrum, in velocity, for the shaft, drive, flow, electrical
and gear findings.

The input is the window's acceleration mean square per line (:class:`~rotorwatch.analysis.narrowband.NarrowSpectrum`,
lines 1/T apart, Hann; the AC-coupling correction applied). Velocity per line is acceleration x
(1000 / (2 pi f))^2 (ISO 10816-1 Annex A, integration of a sinusoid), computed here with a cut-off of its own
(:data:`MIN_VELOCITY_HZ`, or four lines), so that sub-synchronous content of a slow driven shaft is read
below the overall band's low edge.

A line's RMS is the root of the power within +/- 2 lines of its highest bin (a Hann-windowed tone's main
lobe holds its power there: Harris 1978); its floor is the median power per line within +/- max(20 lines,
10 % of its frequency), times the same five lines; its *ratio* is sqrt(line power / floor power): how far it
stands over the floor, as an amplitude ratio.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..result import EvidenceLine

MIN_VELOCITY_HZ = 1.0  # below this no velocity is read (DC, AC-coupling skirt)
LOBE_LINES = 2  # +/- 2 lines: a Hann-windowed tone's main lobe
FLOOR_MIN_LINES = 20
FLOOR_FRACTION = 0.10
STANDS_OUT = 4.0  # 12 dB over the local floor: the same bar as a bearing defect's fundamental (findings.py)
SEARCH_FRACTION = 0.005  # a line is searched within max(2 lines, 0.5 %) of where it is expected
SEARCH_MIN_LINES = 2


@dataclass(frozen=True)
class Line:
    """One line as read: where it was found, its RMS velocity (mm/s) and how far it stands out."""

    label: str
    expected_hz: float
    found_hz: float
    rms_mm_s: float
    ratio: float

    @property
    def stands_out(self) -> bool:
        return self.ratio >= STANDS_OUT

    def evidence(self) -> EvidenceLine:
        return EvidenceLine(self.label, self.expected_hz, self.found_hz if self.rms_mm_s > 0 else math.nan,
                            self.rms_mm_s, "mm/s", self.ratio)


_WEIGHTS: dict[tuple[int, float], np.ndarray] = {}  # velocity weights per (lines, df): built once per window shape


def _velocity_weight(n: int, df: float) -> np.ndarray:
    """(1000 / (2 pi f))^2 on lines 0 .. n - 1, 0 below the cut-off (read only; shared between windows)."""
    w = _WEIGHTS.get((n, df))
    if w is None:
        f = np.arange(n) * df
        with np.errstate(divide="ignore"):
            w = (1000.0 / (2.0 * np.pi * f)) ** 2
        w[f < max(MIN_VELOCITY_HZ, 4 * df)] = 0.0
        w.flags.writeable = False
        if len(_WEIGHTS) > 16:
            _WEIGHTS.clear()
        _WEIGHTS[(n, df)] = w
    return w


def _median(seg: np.ndarray) -> float:
    """``np.median`` of a short 1-D array without NaN (the same value: the middle element, or the mean of the
    two middle ones), by one partition: np.median's own checks cost several times the work here."""
    n = seg.size
    k = n // 2
    if n % 2:
        return float(np.partition(seg, k)[k])
    part = np.partition(seg, (k - 1, k))
    return float((part[k - 1] + part[k]) / 2)


class VelocityLines:
    """Velocity lines of one window: ``accel_ms`` is the acceleration mean square per line ((m/s^2)^2)."""

    def __init__(self, accel_ms: np.ndarray, df_hz: float, electrical: np.ndarray | None = None):
        self.df = float(df_hz)
        n = accel_ms.size
        self.ms = np.asarray(accel_ms, dtype=float) * _velocity_weight(n, self.df)  # (mm/s)^2 per line
        self.n = n
        self.electrical = electrical
        self.cutoff_hz = max(MIN_VELOCITY_HZ, 4 * self.df)

    def covers(self, hz: float) -> bool:
        return self.cutoff_hz <= hz and hz / self.df < self.n - LOBE_LINES - 1

    def _floor(self, i: int) -> float:
        half = max(FLOOR_MIN_LINES, int(FLOOR_FRACTION * i))
        lo, hi = max(i - half, 1), min(i + half + 1, self.n)
        seg = self.ms[lo:hi]
        return _median(seg) * (2 * LOBE_LINES + 1) if seg.size else 0.0

    def power_at(self, i: int) -> float:
        lo, hi = max(i - LOBE_LINES, 0), min(i + LOBE_LINES + 1, self.n)
        return float(self.ms[lo:hi].sum())

    def is_electrical(self, hz: float) -> bool:
        if self.electrical is None:
            return False
        i = int(round(hz / self.df))
        return 0 <= i < self.electrical.size and bool(self.electrical[i])

    def line(self, label: str, hz: float, tol_hz: float | None = None, electrical: bool = False) -> Line:
        """The highest local maximum within ``hz`` +/- ``tol_hz`` (default max(2 lines, 0.5 %)) and its line; a line
        out of reach, or on an electrical line (2xLF and harmonics, unless ``electrical``), reads 0."""
        if not self.covers(hz) or (self.is_electrical(hz) and not electrical):
            return Line(label, hz, hz, 0.0, 0.0)
        tol = tol_hz if tol_hz is not None else max(SEARCH_MIN_LINES * self.df, SEARCH_FRACTION * hz)
        lo = max(int(math.ceil((hz - tol) / self.df)), 1)
        hi = min(int(math.floor((hz + tol) / self.df)), self.n - 2)
        if hi < lo:
            lo = hi = int(round(hz / self.df))
        i = _highest_local_max(self.ms[lo - 1:hi + 2].tolist())  # a bin rising out of the window is a skirt
        if i < 0:
            return Line(label, hz, hz, 0.0, 0.0)
        i += lo
        power, floor = self.power_at(i), self._floor(i)
        ratio = math.sqrt(power / floor) if floor > 0 else (math.inf if power > 0 else 0.0)
        return Line(label, hz, i * self.df, math.sqrt(power), ratio)

    def band_power(self, lo_hz: float, hi_hz: float, leave_out_hz: tuple[float, ...] = ()) -> tuple[float, float]:
        """Power ((mm/s)^2) between ``lo_hz`` and ``hi_hz`` with the lobes of the lines ``leave_out_hz`` taken out,
        and the share of it held by its strongest line (its +/- 2 lines)."""
        lo = max(int(math.ceil(max(lo_hz, self.cutoff_hz) / self.df)), 1)
        hi = min(int(math.floor(hi_hz / self.df)), self.n - 1)
        if hi <= lo:
            return 0.0, 0.0
        seg = self.ms[lo:hi + 1].copy()
        for hz in leave_out_hz:
            j = int(round(hz / self.df)) - lo
            seg[max(j - LOBE_LINES - 1, 0): max(j + LOBE_LINES + 2, 0)] = 0.0
        total = float(seg.sum())
        if total <= 0:
            return 0.0, 0.0
        lobes = np.convolve(seg, np.ones(2 * LOBE_LINES + 1), mode="same")
        return total, float(lobes.max()) / total


def lines_read(hz: float, df_hz: float) -> int:
    """How many lines (from 0) :meth:`VelocityLines.line` reads for a line at ``hz`` with the default search
    window: a :class:`VelocityLines` holding at least these (or all of a window's) answers as a longer one."""
    tol = max(SEARCH_MIN_LINES * df_hz, SEARCH_FRACTION * hz)
    hi = max(int(math.floor((hz + tol) / df_hz)), int(round(hz / df_hz)), 1)
    return hi + max(FLOOR_MIN_LINES, int(FLOOR_FRACTION * hi)) + LOBE_LINES + 4


def _highest_local_max(seg: list[float]) -> int:
    """Index (into ``seg[1:-1]``) of the first of the highest of its local maxima (>= both neighbours), or -1.
    A few lines at a time: plain Python over a list beats numpy's per-call overhead."""
    best, best_v = -1, 0.0
    for j in range(1, len(seg) - 1):
        v = seg[j]
        if v >= seg[j - 1] and v >= seg[j + 1] and (best < 0 or v > best_v):
            best, best_v = j - 1, v
    return best


def rss(lines: list[Line] | tuple[Line, ...]) -> float:
    """Root-sum-square of the lines' RMS (mm/s)."""
    return math.sqrt(sum(x.rms_mm_s ** 2 for x in lines))
