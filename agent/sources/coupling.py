"""Low-frequency roll-off of AC-coupled inputs, and its magnitude correction.

Sound interfaces and IEPE conditioners block DC with a series capacitor: seen from the sensor, a
first-order high-pass with corner ``fc`` (``Sensor.ac_coupling_corner_hz``)::

    H(jf) = j(f/fc) / (1 + j(f/fc)),      |H(f)| = (f/fc) / sqrt(1 + (f/fc)^2)

(the RC high-pass of circuit theory; -3 dB at fc, -20 dB/decade below it). A spectrum measured through
it reads low by |H| near and below the corner: at f = fc by 29 %, at 3 fc by 5 %, at 10 fc by 0.5 %.
:func:`correct_ac_coupling` divides it out, capped at ``max_gain`` so that the noise floor near DC is
not blown up. Phase is not corrected (magnitude spectra only).
"""

from __future__ import annotations

import numpy as np


def highpass_gain(freqs_hz: np.ndarray | float, corner_hz: float) -> np.ndarray:
    """|H(f)| of a first-order high-pass with corner ``corner_hz`` (0 at DC, -> 1 far above)."""
    if not corner_hz > 0:
        raise ValueError(f"corner_hz = {corner_hz!r}: must be positive")
    ratio = np.abs(np.asarray(freqs_hz, dtype=np.float64)) / corner_hz
    return ratio / np.sqrt(1.0 + ratio * ratio)


def correct_ac_coupling(spectrum: np.ndarray, freqs_hz: np.ndarray, corner_hz: float | None, *,
                        power: bool = False, max_gain: float = 10.0) -> np.ndarray:
    """Undo the coupling roll-off on a spectrum (last axis along ``freqs_hz``).

    ``spectrum`` holds amplitudes (RMS, peak: anything linear in the signal) or, with ``power=True``,
    powers or PSD values (divided by |H|^2). The amplitude gain never exceeds ``max_gain``; bins where
    the roll-off is deeper are corrected by ``max_gain`` only. ``corner_hz=None`` returns the input.
    """
    spec = np.asarray(spectrum)
    if corner_hz is None:
        return spec
    if not max_gain >= 1:
        raise ValueError(f"max_gain = {max_gain!r}: must be at least 1")
    gain = 1.0 / np.maximum(highpass_gain(freqs_hz, corner_hz), 1.0 / max_gain)
    if power:
        gain = gain * gain
    return spec * gain
