"""The slow, obvious twin of the point analysis, built from scipy's textbook calls only.

It computes the same outputs as :class:`~rotorwatch.analysis.point.PointAnalyzer` for a fixed envelope
band and a given speed, the straightforward way:

- ``scipy.stats.kurtosis(fisher=False)`` and numpy for the waveform indicators;
- ``scipy.signal.welch`` (Hann, density) for the acceleration PSD that is published;
- ``scipy.signal.periodogram`` (Hann over the whole block) for the overall velocity and the acceleration
  and velocity bands, with boolean masks (the fast path reads the block's FFT through the Hann kernel);
- a 4th-order Butterworth band-pass (``butter`` + ``sosfiltfilt``, zero phase) and ``scipy.signal.hilbert``
  over the full-rate block for the envelope, then ``scipy.signal.welch`` of |z| and |z|^2 at full rate;
- the same decision rule (:mod:`rotorwatch.analysis.findings`) on its squared-envelope spectrum.

It exists for two reasons: the unit tests hold the fast analysis to it (the Butterworth filter is not the
fast path's ideal band-pass, so agreement is close, not exact), and ``rotorwatch bench`` reports how much
faster the fast path is.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.signal
import scipy.stats

from .. import kinematics
from ..settings.quantities import quantity
from . import severity
from .findings import find_defects
from .narrowband import ELECTRICAL_DEVIATION, ELECTRICAL_LOBE_LINES
from .plan import HANN_LOBE_MARGIN_BINS, AnalysisPlan
from .result import Finding, Waveform


@dataclass(frozen=True)
class ReferenceResult:
    overall_velocity_mm_s: float
    iso_zone: str
    bands: dict[str, float]
    waveform: Waveform
    freqs_hz: np.ndarray
    accel_psd: np.ndarray
    envelope_freqs_hz: np.ndarray
    envelope_psd: np.ndarray
    squared_rms: np.ndarray
    findings: list[Finding]


def _mask(freqs: np.ndarray, edges: list[tuple[float, float]], df: float, margin: float) -> np.ndarray:
    m = np.zeros(freqs.size, dtype=bool)
    for lo, hi in edges:
        m |= (freqs >= lo - margin * df - 1e-9) & (freqs <= hi + margin * df + 1e-9)
    return m


def reference_analyze(plan: AnalysisPlan, block_m_s2: np.ndarray, rpm: float,
                      band_hz: tuple[float, float] | None = None) -> ReferenceResult:
    """Analyse one block the straightforward way at speed ``rpm`` (envelope band: ``band_hz`` or the plan's)."""
    fs = plan.fs_hz
    x = np.asarray(block_m_s2, dtype=float)
    mean = float(np.mean(x))
    x0 = x - mean
    rms = float(np.sqrt(np.mean(x0**2)))
    peak = float(np.max(np.abs(x0)))
    wave = Waveform(peak_m_s2=peak, rms_m_s2=rms, crest_factor=peak / rms,
                    kurtosis=float(scipy.stats.kurtosis(x, fisher=False)), mean_m_s2=mean)

    f, psd = scipy.signal.welch(x, fs, window="hann", nperseg=plan.n_per_seg, noverlap=plan.n_overlap,
                                detrend="constant", scaling="density")
    if plan.ac_power_gain is not None:
        psd = psd * plan.ac_power_gain
    fn, psd_n = scipy.signal.periodogram(x, fs, window="hann", detrend="constant", scaling="density")
    if plan.point.sensor.ac_coupling_corner_hz is not None:
        with np.errstate(divide="ignore"):
            psd_n = psd_n * np.minimum(1.0 + (plan.point.sensor.ac_coupling_corner_hz / fn) ** 2, 100.0)
        psd_n[0] = 0.0
    dfn = fn[1] - fn[0]
    vel = np.zeros_like(psd_n)
    above = fn >= max(plan.integration_cutoff_hz, 2 * dfn)
    vel[above] = psd_n[above] / (2 * np.pi * fn[above]) ** 2 * 1e6
    lo_hz, hi_hz = plan.overall_band_hz
    in_band = (fn >= lo_hz) & (fn <= hi_hz)
    overall = float(np.sqrt(np.sum(vel[in_band]) * dfn))
    electrical = np.zeros(fn.size, dtype=bool)
    lf = plan.machine.line_frequency_hz
    if lf is not None:
        for h in range(1, int(fn[-1] / (2 * lf)) + 1):
            hz = 2 * lf * h
            electrical |= np.abs(fn - hz) < ELECTRICAL_LOBE_LINES * dfn + ELECTRICAL_DEVIATION * hz
    shaft_hz = rpm / 60.0

    band = band_hz if band_hz is not None else plan.envelope.band_hz
    if band is None:
        raise ValueError("the reference needs a fixed envelope band (give band_hz)")
    sos = scipy.signal.butter(4, band, btype="bandpass", fs=fs, output="sos")
    z = scipy.signal.hilbert(scipy.signal.sosfiltfilt(sos, x0))
    env = np.abs(z)
    env_sq = env**2
    n_env = int(math.ceil(fs / plan.envelope.df_hz))
    n_env_overlap = int(round(n_env * plan.envelope.overlap_frac))
    fe, env_psd = scipy.signal.welch(env, fs, window="hann", nperseg=n_env, noverlap=n_env_overlap)
    _, sq_psd = scipy.signal.welch(env_sq, fs, window="hann", nperseg=n_env, noverlap=n_env_overlap)
    keep = fe <= plan.envelope.fmax_hz
    fe, env_psd, sq_psd = fe[keep], env_psd[keep], sq_psd[keep]
    dfe = fe[1] - fe[0]
    sq_rms = np.sqrt(sq_psd * dfe * 1.5)  # Hann ENBW 1.5 bins

    bands: dict[str, float] = {}
    for bp in plan.bands:
        edges = kinematics.band_edges_hz(plan.machine, bp.band, shaft_hz)
        q = quantity(bp.quantity)
        if q.demodulated:
            bands[bp.band.name] = float(np.sqrt(np.sum(env_psd[_mask(fe, edges, dfe, HANN_LOBE_MARGIN_BINS)]) * dfe))
            continue
        keep = _mask(fn, edges, dfn, HANN_LOBE_MARGIN_BINS)
        if bp.band.follows_speed:
            keep &= ~electrical
        psd = {"acceleration": psd_n, "velocity": vel}[q.spectrum]
        bands[bp.band.name] = float(np.sqrt(np.sum(psd[keep]) * dfn))
    findings = (find_defects(sq_rms, dfe, shaft_hz, plan.defects, plan.machine.line_frequency_hz)
                if rpm > plan.speed.stopped_rpm else [])
    return ReferenceResult(
        overall_velocity_mm_s=overall,
        iso_zone=severity.zone(overall, plan.iso_group, plan.support),
        bands=bands,
        waveform=wave,
        freqs_hz=f,
        accel_psd=psd,
        envelope_freqs_hz=fe,
        envelope_psd=env_psd,
        squared_rms=sq_rms,
        findings=findings,
    )
