"""Band values: the RMS of a spectrum within a band's edges.

A band's value is sqrt(sum of the mean square of its lines) over the lines of its windows, in the unit of
its quantity (acceleration m/s^2, velocity mm/s, envelope m/s^2). Acceleration and velocity bands read the
window's narrow-band spectrum (lines 1/T apart, :mod:`.narrowband`); envelope bands read the envelope
spectrum (its PSD times its line spacing). Windows:

- ``low_hz``/``high_hz``: one window, fixed;
- ``low_order``/``high_order``: one window whose edges are orders times the shaft speed *used for this
  update* (configured, measured or estimated), so the band follows the speed;
- ``feature``: one window per harmonic, k x centre +/- ``tolerance_pct`` (see ``kinematics.band_edges_hz``);
  the value is the root-sum-square over the windows, i.e. the RMS of their union (overlapping windows are
  merged, so no line is counted twice).

Each window is widened by 1.5 lines on each side: the Hann window spreads a tone over +/- 2 lines, and a
narrow window (a shaft order +/- 3 % is narrower than a line of a coarse spectrum) must still collect the
whole main lobe of a tone inside it to read that tone's RMS.

Bands placed by orders or on a feature leave out the lines next to 2 x the line frequency and its
harmonics when the machine has ``line_frequency_hz`` (electrical, not mechanical: a 2-pole motor's 2x band
must not read the 100 Hz line as misalignment). Bands fixed in Hz keep them.
"""

from __future__ import annotations

import math

import numpy as np

from .. import kinematics
from ..settings.quantities import quantity
from .narrowband import NarrowSpectrum
from .plan import HANN_LOBE_MARGIN_BINS, AnalysisPlan, BandPlan


def window_bins(edges_hz: list[tuple[float, float]] | tuple[tuple[float, float], ...], df_hz: float,
                n_bins: int, margin_bins: float = HANN_LOBE_MARGIN_BINS) -> list[tuple[int, int]]:
    """Merged half-open bin ranges [start, stop) covering the windows, each widened by ``margin_bins``."""
    ranges = []
    for lo, hi in edges_hz:
        start = max(int(math.ceil(lo / df_hz - margin_bins - 1e-9)), 0)
        stop = min(int(math.floor(hi / df_hz + margin_bins + 1e-9)) + 1, n_bins)
        if stop > start:
            ranges.append((start, stop))
    ranges.sort()
    merged: list[tuple[int, int]] = []
    for start, stop in ranges:
        if merged and start <= merged[-1][1]:
            merged[-1] = (merged[-1][0], max(merged[-1][1], stop))
        else:
            merged.append((start, stop))
    return merged


def band_mean_square(ms: np.ndarray, df_hz: float, edges_hz, margin_bins: float = HANN_LOBE_MARGIN_BINS,
                     leave_out: np.ndarray | None = None) -> float:
    """Sum of the per-line mean squares ``ms`` within the (merged, widened) windows, without ``leave_out``."""
    total = 0.0
    for start, stop in window_bins(edges_hz, df_hz, ms.shape[-1], margin_bins):
        part = ms[start:stop]
        if leave_out is not None:
            part = part[~leave_out[start:stop]]
        total += float(part.sum())
    return total


def band_rms(psd: np.ndarray, df_hz: float, edges_hz, margin_bins: float = HANN_LOBE_MARGIN_BINS) -> float:
    """RMS within the (merged, widened) windows ``edges_hz`` of a one-sided PSD with uniform bins."""
    return math.sqrt(band_mean_square(psd, df_hz, edges_hz, margin_bins) * df_hz)


def band_edges(plan: AnalysisPlan, bp: BandPlan, shaft_hz: float) -> list[tuple[float, float]]:
    """Edges in Hz of a band at this update's shaft speed."""
    if bp.fixed_edges_hz is not None:
        return list(bp.fixed_edges_hz)
    return kinematics.band_edges_hz(plan.machine, bp.band, shaft_hz)


def band_values(plan: AnalysisPlan, shaft_hz: float, narrow: NarrowSpectrum,
                env_psd: np.ndarray | None, env_df_hz: float,
                narrow_orders: NarrowSpectrum | None = None) -> dict[str, float]:
    """Every band of the point, by name, in its quantity's unit. Bands fixed in Hz read ``narrow``; bands
    placed by orders or on a feature read ``narrow_orders`` when given (the window resampled to shaft
    angle, :mod:`.ordertrack`)."""
    out: dict[str, float] = {}
    for bp in plan.bands:
        edges = band_edges(plan, bp, shaft_hz)
        if not quantity(bp.quantity).demodulated:
            spectrum = narrow if bp.fixed_edges_hz is not None or narrow_orders is None else narrow_orders
            ms = spectrum.mean_square(quantity(bp.quantity).spectrum)
            leave_out = spectrum.electrical if bp.fixed_edges_hz is None else None
            out[bp.band.name] = math.sqrt(band_mean_square(ms, spectrum.df_hz, edges, leave_out=leave_out))
        elif env_psd is not None:
            out[bp.band.name] = band_rms(env_psd, env_df_hz, edges)
        else:
            out[bp.band.name] = float("nan")
    return out
