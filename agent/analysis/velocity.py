"""Velocity from acceleration by integration in the frequency domain, and the overall velocity RMS.

A tone of acceleration amplitude |a| at frequency f has velocity amplitude |v| = |a| / (2 pi f) (the same
for peak or RMS values; ISO 10816-1 Annex A allows integration between quantities, from memory). On a
power spectral density this is a weight (1 / (2 pi f))^2 per bin; with the factor 1000 the result is in
(mm/s)^2/Hz. Below the plan's cut-off the weight is zero: integration blows up 1/f noise and any offset
near 0 Hz (common practice: high-pass at the band's lower limit, 10 Hz for machines above 600 r/min).

These helpers weight the Welch spectrum that is published for display. The overall velocity (the RMS
over ``overall.low_hz .. overall.high_hz``, by default the ISO 20816-3 band for the machine's speed) and
the velocity bands are read from the whole window's spectrum with the same weight per line
(:mod:`.narrowband`, which explains why, and deploy/numbers.md, which compares its edges with an ideal
band and with ISO 2954's third-order Butterworth filters).
"""

from __future__ import annotations

import numpy as np

from .plan import AnalysisPlan


def velocity_psd(plan: AnalysisPlan, accel_psd: np.ndarray) -> np.ndarray:
    """Velocity PSD in (mm/s)^2/Hz from an acceleration PSD in (m/s^2)^2/Hz."""
    return accel_psd * plan.velocity_weight


def velocity_line_rms(plan: AnalysisPlan, accel_line_rms: np.ndarray) -> np.ndarray:
    """Velocity RMS per line (mm/s) from the acceleration RMS per line (m/s^2)."""
    return accel_line_rms * np.sqrt(plan.velocity_weight[: accel_line_rms.size])
