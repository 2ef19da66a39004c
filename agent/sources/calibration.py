"""Sensitivity of a measurement chain from a reference tone (a handheld shaker on the sensor).

Field check (common practice): a portable reference shaker drives the accelerometer at a known level,
typically 10 m/s^2 RMS at 159.2 Hz (omega = 1000 rad/s, where 10 m/s^2 equals 10 mm/s and 10 um).
The chain's sensitivity is the tone's RMS volts at the input divided by the reference level.

The tone is measured by a least-squares sine fit (IEEE Std 1057's four-parameter fit: amplitude,
phase, offset, and frequency refined around the spectral peak), which is unbiased by window scalloping
or leakage for a record of any length; a Welch average with scipy's flat-top window is computed beside
it as an independent check (flat-top peak scalloping below 0.01 dB, i.e. about 0.1 %).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import optimize, signal

from ..errors import InputError
from ..settings.models import G_N


@dataclass(frozen=True)
class ToneMeasurement:
    frequency_hz: float       # fitted tone frequency
    rms_v: float              # tone RMS (sine fit)
    welch_rms_v: float        # tone RMS from the flat-top Welch spectrum (check)
    residual_rms_v: float     # what the fit leaves: noise, hum, distortion
    peak_abs_v: float         # largest |sample| in the record (clipping check)
    n_samples: int

    @property
    def residual_ratio(self) -> float:
        return self.residual_rms_v / self.rms_v if self.rms_v > 0 else math.inf


def _fit(x: np.ndarray, t: np.ndarray, f_hz: float) -> tuple[np.ndarray, float]:
    """Three-parameter fit at a fixed frequency: coefficients (cos, sin, offset) and residual power."""
    w = 2 * np.pi * f_hz * t
    design = np.column_stack((np.cos(w), np.sin(w), np.ones_like(t)))
    coef, *_ = np.linalg.lstsq(design, x, rcond=None)
    resid = x - design @ coef
    return coef, float(np.mean(resid * resid))


def measure_tone(x: np.ndarray, fs_hz: float, reference_hz: float, search_pct: float = 3.0) -> ToneMeasurement:
    """Measure the tone near ``reference_hz`` (within ``search_pct``) in the 1-D record ``x`` (volts)."""
    x = np.asarray(x, dtype=np.float64).ravel()
    n = x.size
    if n < 16 or n / fs_hz < 20.0 / reference_hz:
        raise InputError(f"calibration record of {n} samples is too short: need at least 20 periods "
                         f"of {reference_hz:g} Hz")
    if not np.all(np.isfinite(x)):
        raise InputError("calibration record holds non-finite samples")
    lo, hi = reference_hz * (1 - search_pct / 100), reference_hz * (1 + search_pct / 100)
    # coarse: the largest line of a zero-padded Hann spectrum within the search band
    n_fft = 1 << max(14, math.ceil(math.log2(4 * n)))
    spec = np.abs(np.fft.rfft((x - x.mean()) * signal.windows.hann(n, sym=False), n_fft))
    freqs = np.fft.rfftfreq(n_fft, 1 / fs_hz)
    band = (freqs >= lo) & (freqs <= hi)
    if not np.any(band):
        raise InputError(f"reference frequency {reference_hz:g} Hz is outside the recorded band (fs {fs_hz:g} Hz)")
    f0 = float(freqs[band][np.argmax(spec[band])])
    # fine: minimise the three-parameter residual over frequency (four-parameter fit)
    t = np.arange(n) / fs_hz
    half_bin = fs_hz / n
    res = optimize.minimize_scalar(lambda f: _fit(x, t, f)[1], bounds=(f0 - half_bin, f0 + half_bin),
                                   method="bounded", options={"xatol": 1e-9 * fs_hz})
    f_fit = float(res.x)
    coef, resid_power = _fit(x, t, f_fit)
    rms = float(math.hypot(coef[0], coef[1]) / math.sqrt(2))
    # independent check: flat-top Welch, 'spectrum' scaling (a line's value estimates RMS^2)
    nperseg = min(n, 1 << int(math.log2(max(16, min(n, fs_hz)))))
    fw, pxx = signal.welch(x, fs_hz, window="flattop", nperseg=nperseg, scaling="spectrum")
    near = (fw >= lo) & (fw <= hi)
    welch_rms = float(math.sqrt(pxx[near].max())) if np.any(near) else float("nan")
    return ToneMeasurement(frequency_hz=f_fit, rms_v=rms, welch_rms_v=welch_rms,
                           residual_rms_v=float(math.sqrt(resid_power)), peak_abs_v=float(np.max(np.abs(x))),
                           n_samples=n)


def sensitivity_mv_per_m_s2(tone_rms_v: float, reference_m_s2: float) -> float:
    return 1000.0 * tone_rms_v / reference_m_s2


def mv_per_g(mv_per_m_s2: float) -> float:
    """mV/(m/s^2) -> mV/g with standard gravity 9.80665 m/s^2."""
    return mv_per_m_s2 * G_N
