"""1x and 2x amplitude and phase locked to a once-per-revolution tach.

With the shaft angle from the tach's pulses (:mod:`.ordertrack`: turns, 0 at the window's first pulse,
interpolated between pulses), the order-k component of the window is read by a DFT at the tach-locked
angle (computed order tracking's single-bin form; common practice):

    X_k = sum_n w_n a_n exp(-i 2 pi k theta_n) / sum_n w_n          (w: Hann window)

For a = A cos(2 pi k theta + phi) this gives X_k = (A / 2) exp(i phi), so the acceleration amplitude is
2 |X_k| and its phase at the pulse phi = arg X_k. Velocity is the integral: RMS 2 |X_k| / (sqrt 2 x 2 pi f_k)
(ISO 10816-1 Annex A) and phase phi - 90 degrees. Reported per order as the velocity RMS in mm/s and the
velocity's phase in degrees, 0 to 360: the angle the component's positive peak leads the pulse by, in the
form a(theta) = A cos(2 pi k theta + phase). (Instruments differ in sign convention: some report the lag
of the peak after the pulse, 360 minus this; from memory.) A steady 1x phase is the unbalance sign.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    from .ordertrack import ShaftAngle
    from .result import PointResult

ORDERS = (1, 2)


@dataclass(frozen=True)
class OrderReading:
    """One tach-locked order of one update, as it is published (MQTT, metrics, page) and trended."""

    order: str  # "1x", "2x"
    velocity_mm_s: float  # velocity RMS of the order
    phase_deg: float  # 0 to 360, the velocity's phase at the pulse (module docstring)
    frequency_hz: float  # the tach-locked frequency: order x the window's mean speed from the pulses


def readings(result: PointResult) -> list[OrderReading]:
    """The 1x and 2x of ``result`` locked to its tach (empty without a tach). The frequency is the order
    times the speed the analysis used, which with a tach is the pulses' mean speed over the window."""
    out = []
    for name, (v_mm_s, phase_deg) in result.order_phase.items():
        k = float(name.rstrip("x"))
        out.append(OrderReading(name, float(v_mm_s), float(phase_deg), k * float(result.rpm) / 60.0))
    return out


def order_phasors(x_m_s2: np.ndarray, fs_hz: float, angle: ShaftAngle) -> dict[str, tuple[float, float]]:
    """{"1x": (velocity RMS mm/s, phase deg), "2x": ...} of the block ``x_m_s2`` (acceleration) over
    ``angle``'s span."""
    n = x_m_s2.size
    t = np.arange(n) / fs_hz
    theta = angle.turns_at(t)
    w = 0.5 - 0.5 * np.cos(2.0 * np.pi * np.arange(n) / n)
    xw = (x_m_s2 - np.mean(x_m_s2)) * w
    f_hz = angle.mean_hz
    out = {}
    for k in ORDERS:
        z = complex(np.dot(xw, np.exp(-2j * np.pi * k * theta)) / w.sum())
        accel_peak = 2.0 * abs(z)
        velocity_rms_mm_s = accel_peak / math.sqrt(2.0) / (2.0 * math.pi * k * f_hz) * 1000.0 if f_hz > 0 else math.nan
        phase = (math.degrees(math.atan2(z.imag, z.real)) - 90.0) % 360.0
        out[f"{k}x"] = (float(velocity_rms_mm_s), float(phase))
    return out
