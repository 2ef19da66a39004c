"""The full analysis of one measurement point: a block of acceleration in, a :class:`PointResult` out.

    analyzer = PointAnalyzer(machine, point, fs_hz)      # builds the plan once
    result = analyzer.analyze(block_m_s2, time_s=t)      # per update

Per update: waveform indicators; one FFT of the whole block, shared by the running-speed estimate, the
narrow-band spectrum (lines 1/T apart, :mod:`.narrowband`: the overall velocity RMS with its ISO 20816-3
zone and the acceleration and velocity band values, orders following the speed used) and the envelope;
envelope and squared-envelope spectra; bearing findings and each defect's line prominence; the Welch
acceleration and velocity spectra (Hann) when spectra are kept for display. The block is calibrated acceleration in m/s^2
(the caller divides volts by the sensor's sensitivity).

Speed used when ``rpm`` is not given: ``fixed`` -> the configured rpm; ``estimated`` -> the harmonic-sum
estimate within min_rpm..max_rpm, or the nominal rpm (source ``nominal``) when no clear series shows;
``tach``/``mqtt`` without a reading -> the nominal rpm (source ``nominal``). A given ``rpm`` is reported
with the speed mode as its source (``fixed`` for fixed and estimated machines) unless ``rpm_source``
says otherwise.

An analyzer keeps no state between blocks except cached set-ups, so blocks may be analysed in any order;
a searched demodulation band that a point keeps is passed in by the caller (the pipeline keeps it with
the point's baselines). It is not safe to share one analyzer between threads.
"""

from __future__ import annotations

import logging

import numpy as np

from ..errors import InputError
from ..settings.models import Machine, Point
from . import bands as band_mod
from . import ordertrack, severity
from .envelope import BlockSpectrum, EnvelopeKernel
from .findings import assess
from .indicators import waveform
from .narrowband import NarrowbandKernel, electrical_mask
from .plan import AnalysisPlan, build_plan
from .result import PointResult, Spectrum
from .spectrum import WelchKernel
from .speed import N_HARMONICS, estimate_speed
from .velocity import velocity_line_rms

log = logging.getLogger(__name__)

HALF_SEARCH = 0.08  # each half's speed is searched within +/- 8 % of the window's estimate


class PointAnalyzer:
    """Analyses blocks of one point at one sampling rate (see the module docstring)."""

    def __init__(self, machine: Machine, point: Point, fs_hz: float, *, band_criterion: str | None = None):
        self.plan: AnalysisPlan = build_plan(machine, point, fs_hz)
        # how a searched envelope band is chosen: cyclic | kurtosis (default: the machine's config)
        self.band_criterion = band_criterion or machine.analysis.envelope.auto_criterion
        p = self.plan
        self._welch = WelchKernel(p.window, p.n_overlap, p.fs_hz, dtype=np.float32)
        self._envelope = EnvelopeKernel(p.envelope, p.fs_hz)
        self._narrow = NarrowbandKernel(p)
        self._speed_leave_out: dict[int, np.ndarray | None] = {}

    @property
    def min_samples(self) -> int:
        return self.plan.min_samples

    def _check_block(self, block: np.ndarray) -> np.ndarray:
        x = np.asarray(block, dtype=float)
        if x.ndim != 1:
            raise InputError(f"block has shape {x.shape}: expected one channel (a 1-D array)")
        p = self.plan
        if x.size < p.min_samples:
            raise InputError(
                f"block of {x.size} samples ({x.size / p.fs_hz:.3g} s) is too short: {p.lines} lines up to "
                f"{p.fmax_hz:g} Hz and {p.envelope.lines} envelope lines up to {p.envelope.fmax_hz:g} Hz need at "
                f"least {p.min_samples} samples ({p.min_samples / p.fs_hz:.3g} s at {p.fs_hz:g} Hz)"
            )
        if not np.isfinite(x).all():
            raise InputError(f"block holds {int(np.count_nonzero(~np.isfinite(x)))} non-finite samples (NaN or inf)")
        return x

    def _speed(self, bs: BlockSpectrum, rpm: float | None, rpm_source: str | None) -> tuple[float, str]:
        sp = self.plan.speed
        if rpm is not None:
            if not (np.isfinite(rpm) and rpm >= 0):
                raise InputError(f"rpm = {rpm!r}: must be a finite speed >= 0")
            return float(rpm), rpm_source or (sp.mode if sp.mode in ("tach", "mqtt") else "fixed")
        if sp.mode == "fixed":
            return sp.nominal_rpm, "fixed"
        if sp.mode == "estimated":
            est = self._estimate(bs, sp.min_rpm, sp.max_rpm)  # type: ignore[arg-type]
            if est.clear:
                return est.rpm, "estimated"
            log.debug("speed estimate not clear (harmonics=%d) point=%s", est.harmonics_clear, self.plan.point.id)
        return sp.nominal_rpm, "nominal"

    @property
    def searches_band(self) -> bool:
        """True when the demodulation band is not fixed in the configuration."""
        return self.plan.envelope.band_hz is None

    def _estimate(self, bs: BlockSpectrum, min_rpm: float, max_rpm: float):
        top_hz = (N_HARMONICS + 2) * max_rpm / 60.0
        n_bins = min(int(top_hz / bs.df_hz) + 2, bs.spec.size)
        return estimate_speed(bs.amplitude(n_bins), bs.df_hz, min_rpm, max_rpm,
                              leave_out=self._electrical(bs.n_fft, n_bins, bs.df_hz))

    def _change_by_halves(self, x0: np.ndarray, rpm: float) -> float | None:
        """Speed change over the window (% of the mean) from the speed estimated in each half, searched
        within +/- 8 % of the whole window's estimate; None when either half shows no clear speed."""
        sp = self.plan.speed
        if sp.min_rpm is None or sp.max_rpm is None:  # only an estimated speed gets here, and it has both
            return None
        lo = max(rpm * (1 - HALF_SEARCH), sp.min_rpm)
        hi = min(rpm * (1 + HALF_SEARCH), sp.max_rpm)
        half = x0.size // 2
        rpms = []
        for part in (x0[:half], x0[half: 2 * half]):
            est = self._estimate(self._envelope.block_spectrum(part - part.mean()), lo, hi)
            if not est.clear:
                return None
            rpms.append(est.rpm)
        return ordertrack.speed_change_pct(rpms[0], rpms[1])

    def _electrical(self, n_fft: int, n_bins: int, df_hz: float) -> np.ndarray | None:
        """Lines next to 2 x LF and its harmonics among the first ``n_bins`` of an ``n_fft`` transform."""
        key = n_fft * 100003 + n_bins
        if key not in self._speed_leave_out:
            if len(self._speed_leave_out) > 8:
                self._speed_leave_out.clear()
            self._speed_leave_out[key] = electrical_mask(np.arange(n_bins) * df_hz, self.plan.machine.line_frequency_hz, df_hz)
        return self._speed_leave_out[key]

    def analyze(self, block_m_s2: np.ndarray, *, time_s: float = 0.0, rpm: float | None = None,
                keep_spectra: bool = False, rpm_source: str | None = None,
                envelope_band_hz: tuple[float, float] | None = None, review_band: bool = False,
                tach_pulses_s: np.ndarray | None = None) -> PointResult:
        """Analyse one block. For a point whose demodulation band is searched, ``envelope_band_hz`` is the
        band it keeps (the search is skipped; ``review_band`` runs it anyway and reports in
        ``envelope_band_review`` whether it would choose a clearly better band); without it the band is
        searched on this block. A configured band always wins. ``tach_pulses_s``: the tach's pulse times in
        seconds from the block's first sample (``speed.pulses_per_rev`` per turn); with three or more the
        speed is their mean and a window whose speed changed is order-tracked (:mod:`.ordertrack`)."""
        p = self.plan
        x = self._check_block(block_m_s2)
        wave, x0 = waveform(x, dtype=np.float32)  # the transforms run in single precision (spectrum.py)

        bs = self._envelope.block_spectrum(x0)
        narrow = self._narrow.spectrum(bs)
        overall = narrow.overall_velocity_mm_s
        zone = severity.zone(overall, p.iso_group, p.support)
        angle = None
        from_tach = False
        if tach_pulses_s is not None:
            angle = ordertrack.from_pulses(tach_pulses_s, p.speed.pulses_per_rev, x.size / p.fs_hz)
            if angle is not None:
                rpm, rpm_source, from_tach = 60.0 * angle.mean_hz, rpm_source or "tach", True
        rpm_used, source = self._speed(bs, rpm, rpm_source)
        shaft_hz = rpm_used / 60.0
        change = angle.change_pct if angle is not None else None
        if source == "estimated":
            change = self._change_by_halves(x0, rpm_used)
            if change is not None and abs(change) >= ordertrack.MIN_ESTIMATED_TRACKED_CHANGE_PCT:
                # track along the straight speed ramp the two halves give
                f_mean = shaft_hz
                angle = ordertrack.from_linear_speed(f_mean * (1 - change / 200.0), f_mean * (1 + change / 200.0),
                                                     x.size / p.fs_hz)
        tracked = angle is not None and change is not None and abs(change) >= ordertrack.MIN_TRACKED_CHANGE_PCT
        if not tracked:
            angle = None
        narrow_orders = narrow
        if angle is not None:
            x_turns = ordertrack.resample(x0, p.fs_hz, angle, 0.0, shaft_hz)
            narrow_orders = self._narrow.spectrum(self._envelope.block_spectrum(x_turns))

        env, band_source, review = self._envelope.analyze(x0, shaft_hz, bs, self.band_criterion,
                                                          kept_hz=envelope_band_hz, review=review_band, angle=angle)
        band_values = band_mod.band_values(p, shaft_hz, narrow, env.envelope_psd, env.df_hz, narrow_orders)
        running = rpm_used > p.speed.stopped_rpm
        findings, prominence = (assess(env.squared_rms, env.df_hz, shaft_hz, p.defects, envelope_psd=env.envelope_psd,
                                       line_frequency_hz=p.machine.line_frequency_hz)
                                if running else ([], {}))

        spectra: dict[str, Spectrum | None] = {"acceleration": None, "velocity": None, "envelope": None}
        if keep_spectra:
            accel_psd = self._welch.psd(x0)
            if p.ac_power_gain is not None:
                accel_psd *= p.ac_power_gain
            freqs = p.freqs_hz[: p.n_keep]
            accel_rms = self._welch.line_rms(accel_psd[: p.n_keep])
            spectra["acceleration"] = Spectrum(freqs, accel_rms, "m/s^2")
            spectra["velocity"] = Spectrum(freqs, velocity_line_rms(p, accel_rms), "mm/s")
            spectra["envelope"] = Spectrum(env.freqs_hz, env.envelope_rms, "m/s^2")
        return PointResult(
            machine_id=p.machine.id,
            point_id=p.point.id,
            time_s=float(time_s),
            fs_hz=p.fs_hz,
            n_samples=int(x.size),
            rpm=float(rpm_used),
            rpm_source=source,
            overall_velocity_mm_s=overall,
            iso_zone=zone,
            bands=band_values,
            waveform=wave,
            envelope_band_hz=env.band_hz,
            findings=findings,
            envelope_kurtosis=None if np.isnan(env.kurtosis) else float(env.kurtosis),
            defect_prominence=prominence,
            envelope_band_source=band_source,
            envelope_band_review=review,
            speed_change_pct=None if change is None else float(change),
            order_tracked=tracked,
            # a speed ramp estimated from the spectrum is tracked too, but stays less certain than a tach's
            speed_unsteady=bool(change is not None and not from_tach and abs(change) > p.speed.max_change_pct),
            **spectra,
        )
