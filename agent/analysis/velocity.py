"""Velocity from acceleration by integration in the frequency domain, and the overall velocity RMS.

A tone of acceleration amplitude |a| at frequency f has velocity amplitude |v| = |a| / (2 pi f) (the same
for peak or RMS values; ISO 10816-1 Annex A allows integration between quantities, from memory). On a
power spectral density this is a weight (1 / (2 pi f))^2 per bin; with the factor 1000 the result is in
(mm/s)^2/Hz. Below the plan's cut-off the weight is zero: integration blows up 1/f noise and any offset
near 0 Hz (common practice: high-pass at the band's lower limit, 10 Hz for machines above 600 r/min).

The overall velocity is the RMS over ``overall.low_hz .. overall.high_hz`` (default 10-1000 Hz, the
instrument band of ISO 2954), the square root of sum(PSD_v) * df over the bins whose centre lies in the
band. The band edges are sharp (an ideal band-pass), where an instrument to ISO 2954 uses third-order
Butterworth filters; for machine signals whose content sits well inside the band the two agree.
"""

from __future__ import annotations

import numpy as np

from .plan import AnalysisPlan


def velocity_psd(plan: AnalysisPlan, accel_psd: np.ndarray) -> np.ndarray:
    """Velocity PSD in (mm/s)^2/Hz from an acceleration PSD in (m/s^2)^2/Hz."""
    return accel_psd * plan.velocity_weight


def overall_velocity_mm_s(plan: AnalysisPlan, vel_psd: np.ndarray) -> float:
    """Overall velocity RMS (mm/s) over the plan's overall band."""
    return float(np.sqrt(vel_psd[plan.overall_bins].sum() * plan.df_hz))


def velocity_line_rms(plan: AnalysisPlan, accel_line_rms: np.ndarray) -> np.ndarray:
    """Velocity RMS per line (mm/s) from the acceleration RMS per line (m/s^2)."""
    return accel_line_rms * np.sqrt(plan.velocity_weight[: accel_line_rms.size])
