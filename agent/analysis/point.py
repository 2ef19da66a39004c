"""The full analysis of one measurement point: a block of acceleration in, a :class:`PointResult` out.

    analyzer = PointAnalyzer(machine, point, fs_hz)      # builds the plan once
    result = analyzer.analyze(block_m_s2, time_s=t)      # per update

Per update: waveform indicators; one FFT of the whole block, shared by the running-speed estimate, the
narrow-band spectrum (lines 1/T apart, :mod:`.narrowband`: the overall velocity RMS with its ISO 20816-3
zone and the acceleration and velocity band values, orders following the speed used) and the envelope;
envelope and squared-envelope spectra; bearing findings and each defect's line prominence; the Welch
acceleration and velocity spectra (Hann) when spectra are kept for display. The block is calibrated acceleration in m/s^2
(the caller divides volts by the sensor's sensitivity).

The speed used is decided by :func:`.running_speed.resolve` (tach pulses, a given ``rpm``, the configured
speed or the estimate; the rules are written there).

An analyzer keeps no state between blocks except cached set-ups, so blocks may be analysed in any order;
a searched demodulation band that a point keeps is passed in by the caller (the pipeline keeps it with
the point's baselines). It is not safe to share one analyzer between threads.
"""

from __future__ import annotations

import logging
import math
from typing import TYPE_CHECKING

import numpy as np

from ..errors import InputError
from ..settings.quantities import SPECTRA, SPECTRUM_UNITS
from . import bands as band_mod
from . import diagnosis, ordertrack, running_speed, severity, tachphase
from .diagnosis.lines import lines_read
from .envelope import BlockSpectrum, EnvelopeKernel, EnvelopeOutput
from .findings import assess
from .indicators import waveform
from .narrowband import NarrowbandKernel, NarrowSpectrum, electrical_mask
from .plan import AnalysisPlan, build_plan
from .result import PointResult, Spectrum
from .running_speed import SpeedReading
from .spectrum import WelchKernel
from .speed import N_HARMONICS, estimate_speed
from .velocity import velocity_line_rms

if TYPE_CHECKING:  # the settings models (pydantic) are not imported by the analysis itself
    from ..settings.models import Machine, Point

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
        with np.errstate(invalid="ignore", over="ignore"):  # (inf - inf: NaN, said below in words)
            total = float(np.add.reduce(x))
        if not math.isfinite(total):  # a NaN or inf anywhere makes the sum non-finite
            bad = int(np.count_nonzero(~np.isfinite(x)))
            if bad:  # (a sum of finite samples can overflow too: such a block is analysed as before)
                raise InputError(f"block holds {bad} non-finite samples (NaN or inf)")
        return x

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

    def _display_spectra(self, x0: np.ndarray, env: EnvelopeOutput) -> dict[str, Spectrum | None]:
        """The Welch acceleration and velocity spectra and the envelope spectrum, each in its unit."""
        p = self.plan
        accel_psd = self._welch.psd(x0)
        if p.ac_power_gain is not None:
            accel_psd *= p.ac_power_gain
        freqs = p.freqs_hz[: p.n_keep]
        accel_rms = self._welch.line_rms(accel_psd[: p.n_keep])
        lines = {"acceleration": (freqs, accel_rms), "velocity": (freqs, velocity_line_rms(p, accel_rms)),
                 "envelope": (env.freqs_hz, env.envelope_rms)}
        return {name: Spectrum(*lines[name], SPECTRUM_UNITS[name]) for name in SPECTRA}

    def _diagnose(self, x0: np.ndarray, narrow, shaft_hz: float, source: str, overall_mm_s: float):
        """Shaft, drive, flow and electrical findings of the window (:mod:`.diagnosis`)."""
        def lines(n: NarrowSpectrum) -> diagnosis.VelocityLines:
            return diagnosis.VelocityLines(n.accel_ms, n.df_hz, n.electrical)

        memo: dict[str, tuple] = {}

        def halves(top_hz: float):
            """The halves' lines up to those a line at ``top_hz`` reads (the same values as all of them); their
            transforms once per window (a rule per shaft may ask)."""
            if "spectra" not in memo:
                half = x0.size // 2
                memo["spectra"] = tuple(self._envelope.block_spectrum(part - part.mean())
                                        for part in (x0[:half], x0[half: 2 * half]))
            need = lines_read(top_hz, memo["spectra"][0].df_hz)
            if "lines" not in memo or memo["lines"][0].n < need:
                memo["lines"] = tuple(self._narrow.lines_upto(bs, need) for bs in memo["spectra"])
            return memo["lines"]

        ctx = diagnosis.Context(self.plan.machine, self.plan.point, lines(narrow), shaft_hz, source, overall_mm_s,
                                halves)
        return diagnosis.diagnose(ctx)

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
        used = running_speed.resolve(p.speed, SpeedReading(rpm, rpm_source, tach_pulses_s), x.size / p.fs_hz,
                                     lambda lo, hi: self._estimate(bs, lo, hi), p.point.id)
        rpm_used, source, angle, from_tach = used.rpm, used.source, used.angle, used.from_tach
        tach_angle = angle if from_tach else None  # 1x and 2x phase locked to the pulses (tachphase.py)
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
        shaft_orders: dict[str, float] = {}
        if running:
            diagnosed, shaft_orders = self._diagnose(x0, narrow_orders, shaft_hz, source, overall)
            findings = findings + diagnosed

        spectra = self._display_spectra(x0, env) if keep_spectra else dict.fromkeys(SPECTRA)
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
            shaft_orders_mm_s=shaft_orders,
            order_phase=tachphase.order_phasors(x0, p.fs_hz, tach_angle) if tach_angle is not None else {},
            **spectra,
        )
