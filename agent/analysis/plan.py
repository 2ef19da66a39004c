"""The analysis plan of one measurement point: every setting turned into samples, bins and masks once.

A plan is built when a :class:`~rotorwatch.analysis.point.PointAnalyzer` is created (per machine, point
and sampling rate) and never changes afterwards; each update only reads it. It holds

- the Welch spectrum set-up: segment length ``n_per_seg`` from the asked lines and span
  (``fs / n_per_seg <= fmax_hz / lines``, rounded up to a power of two), overlap, Hann window;
- the velocity integration weights (1/(2 pi f))^2 with the low cut-off, and the overall band (the overall
  and the acceleration and velocity bands read the window's narrow-band spectrum, :mod:`.narrowband`;
  the Welch spectrum is what is published for display, its lines made fine enough for the slowest 1x);
- each configured band, with its bins when its edges are fixed in Hz;
- the envelope set-up (fixed demodulation band or band search, span, lines: the configured count, capped
  so that two half-overlapping envelope segments fit one update window);
- the bearing defects to look for, with their tolerance and harmonic count;
- the speed settings (source, nominal, search range, stop threshold).

Everything is checked against the actual sampling rate here: a band, span or demodulation band that does
not fit below Nyquist raises :class:`~rotorwatch.errors.InputError` naming the limit (the caller knows
which file or device it came from and adds that).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING, cast

import numpy as np

from .. import kinematics
from ..errors import InputError
from ..settings.quantities import quantity
from .diagnosis import top_hz as diagnosis_top_hz
from .spectrum import hann

if TYPE_CHECKING:  # the settings models (pydantic) are not imported by the analysis itself
    from ..settings.models import Analysis, Band, FeatureBand, Machine, Point

# Rolling-element defects the findings look for; BSF is searched both at BSF and at 2 x BSF.
DEFECT_NAMES = ("bpfo", "bpfi", "bsf", "ftf")
DEFAULT_DEFECT_TOLERANCE_PCT = 3.0  # covers 1-2 % slip plus speed uncertainty (common practice)
DEFAULT_DEFECT_HARMONICS = 3
# A spectral line of a Hann-windowed tone spreads over +/- 2 bins; a band whose edges fall inside a
# tone's main lobe still collects its whole energy when widened by 1.5 bins on each side.
HANN_LOBE_MARGIN_BINS = 1.5
# Amplitude correction for an AC-coupled input is capped (x10, +20 dB) to keep noise near 0 Hz bounded.
AC_CORRECTION_MAX = 10.0
# The envelope analysis tapers this fraction of the block at each end and drops it afterwards.
EDGE_TAPER_FRACTION = 0.02
MIN_ENVELOPE_LINES = 100
# The envelope band search stays below 0.45 x the sample rate, where a converter's anti-alias filter
# starts to roll the signal off (the pass band of the usual sigma-delta converters ends near 0.45 fs:
# common practice, from memory; analysers show spectra only to fs / 2.56 for the same reason). A band in
# the roll-off reads the filter and the converter's own noise more than the machine, and its level moves
# between updates: on the healthy demo fan at 51.2 kHz the search chose 22.9-24.0 kHz, whose power varied
# 2.7 % from update to update against under 1 % in any band below 21 kHz.
SEARCH_TOP_FRACTION = 0.45
# The published (Welch) spectrum puts the slowest expected 1x at line 5 or above, so that its Hann lobe
# (lines 3-7) clears the integration cut-off (2 lines) and the 2x's lobe (lines 8-12): our choice, a slow
# machine needs lines fine enough for its 1x. The segment grows for it, never beyond the window.
MIN_1X_LINE = 5


@dataclass(frozen=True)
class BandPlan:
    """A configured band as the analysis reads it."""

    band: Band
    quantity: str  # acceleration | velocity | envelope
    fixed_edges_hz: tuple[tuple[float, float], ...] | None  # edges known at set-up (Hz bands)


@dataclass(frozen=True)
class DefectPlan:
    """A bearing defect the findings look for."""

    bearing_id: str
    name: str  # bpfo | bpfi | bsf | ftf
    order: float  # multiple of shaft speed
    tolerance: float  # fraction (0.03 = +/- 3 %)
    harmonics: int


@dataclass(frozen=True)
class EnvelopePlan:
    band_hz: tuple[float, float] | None  # fixed demodulation band, or None: spectral kurtosis
    auto_min_hz: float
    auto_max_hz: float  # top of the search range (0.45 x the rate unless configured, below Nyquist)
    fmax_hz: float  # envelope-spectrum span
    lines: int  # lines used: the configured count, fewer when the update window cannot hold them
    lines_asked: int
    df_hz: float  # resolution of the envelope spectrum, fmax_hz / lines
    overlap_frac: float
    min_bandwidth_hz: float  # narrowest demodulation band the search considers

    @property
    def segment_s(self) -> float:
        return 1.0 / self.df_hz


@dataclass(frozen=True)
class SpeedPlan:
    mode: str  # fixed | estimated | tach | mqtt
    nominal_rpm: float
    min_rpm: float | None
    max_rpm: float | None
    stopped_rpm: float
    pulses_per_rev: int = 1
    max_change_pct: float = 2.0  # a window whose speed changes more is unsteady (see ordertrack.py)


@dataclass(frozen=True, eq=False)
class AnalysisPlan:
    machine: Machine
    point: Point
    fs_hz: float
    fmax_hz: float
    lines: int
    n_per_seg: int
    n_overlap: int
    df_hz: float
    freqs_hz: np.ndarray  # rfft bin frequencies of one segment, 0 .. Nyquist
    n_keep: int  # bins 0 .. fmax_hz kept in the published spectra
    window: np.ndarray
    ac_power_gain: np.ndarray | None  # PSD correction for an AC-coupled input, or None
    velocity_weight: np.ndarray  # (1000 / (2 pi f))^2 above the cut-off, else 0: (m/s^2)^2/Hz -> (mm/s)^2/Hz
    velocity_cutoff_hz: float  # of the Welch spectrum: the integration cut-off, at least two of its lines
    integration_cutoff_hz: float  # below this velocity is not integrated (the narrow-band spectrum's cut-off)
    overall_band_hz: tuple[float, float]
    narrow_top_hz: float  # highest frequency the narrow-band spectrum must hold (overall, bands)
    iso_group: int
    support: str
    bands: tuple[BandPlan, ...]
    envelope: EnvelopePlan
    defects: tuple[DefectPlan, ...]
    speed: SpeedPlan

    @property
    def min_samples(self) -> int:
        """Fewest samples one update needs: one spectrum segment and one envelope segment."""
        usable = 1.0 - 2.0 * EDGE_TAPER_FRACTION
        return max(self.n_per_seg, int(math.ceil(self.envelope.segment_s * self.fs_hz / usable)) + 2)


def _too_fast(what: str, hz: float, fs_hz: float) -> InputError:
    return InputError(
        f"sample rate {fs_hz:g} Hz is too low: {what} reaches {hz:g} Hz, which needs a rate above "
        f"{2 * hz:g} Hz (Nyquist {fs_hz / 2:g} Hz)"
    )


def _segment_length(fs_hz: float, fmax_hz: float, lines: int) -> int:
    """Power-of-two segment length whose resolution is at least ``fmax_hz / lines``."""
    need = int(math.ceil(lines * fs_hz / fmax_hz - 1e-9))
    return 1 << max(need - 1, 1).bit_length()


def defect_plans(machine: Machine, point: Point) -> tuple[DefectPlan, ...]:
    """Defects of every bearing of the machine, the point's own bearing first.

    A fault travels through the housings: a sensor on one bearing also sees its neighbour's defects, and
    naming them by the wrong bearing's kinematics is worse than naming them right. The point's own
    bearing comes first so that it wins ties (identical bearings at both ends).

    Tolerance and harmonic count come from an envelope band configured on the same feature and
    bearing, when there is one; otherwise the defaults above.
    """
    bearings = sorted(machine.bearings, key=lambda b: b.id != point.bearing)
    out = []
    for b in bearings:
        mult = kinematics.bearing_multiples(b).as_dict()
        for name in DEFECT_NAMES:
            tol_pct, harmonics = DEFAULT_DEFECT_TOLERANCE_PCT, DEFAULT_DEFECT_HARMONICS
            for any_band in machine.bands_for(point.id):
                if any_band.kind != "feature":  # (by its tag: the analysis does not import the band models)
                    continue
                band = cast("FeatureBand", any_band)
                if band.feature == name and band.bearing == b.id and quantity(band.quantity).demodulated:
                    tol_pct, harmonics = band.tolerance_pct, max(band.harmonics, 2)
                    break
            out.append(DefectPlan(b.id, name, mult[name], tol_pct / 100.0, harmonics))
    return tuple(out)


def _speed(machine: Machine) -> SpeedPlan:
    s = machine.speed
    return SpeedPlan(s.mode, s.nominal_rpm, s.min_rpm, s.max_rpm, s.stopped_rpm, s.pulses_per_rev, s.max_change_pct)


def highest_rpm(speed: SpeedPlan) -> float:
    """The highest speed the plan must cover (spans are sized for it)."""
    if speed.mode == "estimated" and speed.max_rpm is not None:
        return speed.max_rpm
    if speed.mode == "fixed":
        return speed.nominal_rpm * 1.05
    return speed.nominal_rpm * 1.25  # tachometer / published speed: allow for a faster reading


def _envelope_span_hz(machine: Machine, point: Point, defects: tuple[DefectPlan, ...], shaft_hz: float) -> float:
    """Default envelope span: the highest defect harmonic (2 x BSF for elements) plus two shaft orders
    of sidebands, and any envelope feature band, rounded up to 50 Hz."""
    top = 10.0 * shaft_hz
    for d in defects:
        order = 2 * d.order if d.name == "bsf" else d.order
        top = max(top, (d.harmonics * order * (1 + d.tolerance) + 2) * shaft_hz)
    for band in machine.bands_for(point.id):
        if not quantity(band.quantity).demodulated:
            continue
        for _, hi in kinematics.band_edges_hz(machine, band, shaft_hz):
            top = max(top, hi * 1.02)
    return 50.0 * math.ceil(top / 50.0)


def _ac_power_gain(corner_hz: float | None, freqs: np.ndarray) -> np.ndarray | None:
    """Power gain that undoes a first-order AC coupling at ``corner_hz`` (capped; None without one)."""
    if corner_hz is None:
        return None
    with np.errstate(divide="ignore"):
        gain = 1.0 + (corner_hz / freqs) ** 2  # |H|^-2 of a first-order high-pass
    ac_gain = np.minimum(gain, AC_CORRECTION_MAX**2)
    ac_gain[0] = 0.0
    return ac_gain


def _band_plans(machine: Machine, point: Point, speed: SpeedPlan, fs_hz: float) -> tuple[list[BandPlan], float, float]:
    """The point's bands, the velocity integration cut-off and the top of the narrow-band spectrum.

    Velocity integration cut-off: the overall band's low edge, lowered for velocity bands that reach
    below it (at the slowest expected speed); the caller keeps it above two bins (DC and its leakage).
    """
    nyquist = fs_hz / 2.0
    slow_hz = (speed.min_rpm or speed.nominal_rpm) / 60.0
    fast_hz = highest_rpm(speed) / 60.0
    cutoff: float = machine.overall.low_hz  # type: ignore[assignment]  # validation fills it in
    narrow_top = machine.overall.high_hz
    bands = []
    for band in machine.bands_for(point.id):
        edges_fast = kinematics.band_edges_hz(machine, band, fast_hz)
        top = max(hi for _, hi in edges_fast)
        q = quantity(band.quantity)
        if not q.demodulated:
            narrow_top = max(narrow_top, top * 1.01)
        if not q.demodulated and top >= nyquist:
            raise _too_fast(f"band {band.name!r}", top, fs_hz)
        if q.integrated:
            low = min(lo for lo, _ in kinematics.band_edges_hz(machine, band, slow_hz))
            cutoff = min(cutoff, 0.8 * low)
        fixed = None if band.follows_speed else tuple(edges_fast)
        bands.append(BandPlan(band, band.quantity, fixed))
    return bands, cutoff, narrow_top


def _envelope_plan(an: Analysis, fs_hz: float, df: float, env_fmax: float) -> EnvelopePlan:
    """The envelope spectrum's plan: its band (or the search's range), span and lines."""
    nyquist = fs_hz / 2.0
    env_cfg = an.envelope
    if env_cfg.band_hz is not None and env_cfg.band_hz[1] >= nyquist:
        raise _too_fast("analysis.envelope.band_hz", env_cfg.band_hz[1], fs_hz)
    auto_max = min(0.98 * nyquist, env_cfg.auto_max_hz or SEARCH_TOP_FRACTION * fs_hz)
    min_bw = max(env_fmax, 20.0 * df)
    if env_cfg.band_hz is None and env_cfg.auto_min_hz + min_bw > auto_max:
        raise InputError(
            f"sample rate {fs_hz:g} Hz is too low for the envelope band search: "
            f"it starts at auto_min_hz = {env_cfg.auto_min_hz:g} Hz and needs at least {min_bw:g} Hz of "
            f"bandwidth below {auto_max:g} Hz (auto_max_hz, default {SEARCH_TOP_FRACTION:g} x the sample rate)"
        )
    # The envelope span follows the speed, so its resolution fmax/lines could ask for segments longer
    # than an update: the lines are capped so that two half-overlapping segments fit the window's
    # untapered part (the same averaging the spectrum gets at least).
    overlap = an.overlap_pct / 100.0
    usable_s = an.window_s * (1.0 - 2.0 * EDGE_TAPER_FRACTION)
    env_lines = min(env_cfg.lines, int(env_fmax * usable_s / (2.0 - overlap)))
    if env_lines < MIN_ENVELOPE_LINES:
        need_s = MIN_ENVELOPE_LINES / env_fmax * (2.0 - overlap) / (1.0 - 2.0 * EDGE_TAPER_FRACTION)
        raise InputError(
            f"a window of {an.window_s:.3g} s (analysis.window_s) is too short for an envelope spectrum of "
            f"{MIN_ENVELOPE_LINES} lines to {env_fmax:g} Hz: it needs at least {need_s:.3g} s"
        )
    return EnvelopePlan(
        band_hz=tuple(env_cfg.band_hz) if env_cfg.band_hz is not None else None,  # type: ignore[arg-type]
        auto_min_hz=env_cfg.auto_min_hz,
        auto_max_hz=auto_max,
        fmax_hz=float(env_fmax),
        lines=env_lines,
        lines_asked=env_cfg.lines,
        df_hz=float(env_fmax) / env_lines,
        overlap_frac=an.overlap_pct / 100.0,
        min_bandwidth_hz=min_bw,
    )


def build_plan(machine: Machine, point: Point, fs_hz: float) -> AnalysisPlan:
    """Turn the settings of ``point`` on ``machine`` into an :class:`AnalysisPlan` at ``fs_hz``."""
    if not (fs_hz > 0 and math.isfinite(fs_hz)):
        raise InputError(f"sample rate {fs_hz!r}: must be a positive number of Hz")
    nyquist = fs_hz / 2.0
    an = machine.analysis
    fmax = an.fmax_hz if an.fmax_hz is not None else fs_hz / 2.56
    if fmax > nyquist:
        raise _too_fast("analysis.fmax_hz", fmax, fs_hz)
    n_per_seg = _segment_length(fs_hz, fmax, an.lines)
    slowest_1x_hz = machine.speed.lowest_rpm / 60.0
    window_n = int(an.window_s * fs_hz)
    while fs_hz / n_per_seg > slowest_1x_hz / MIN_1X_LINE and 2 * n_per_seg <= window_n:
        n_per_seg *= 2
    n_overlap = min(int(round(n_per_seg * an.overlap_pct / 100.0)), n_per_seg - 1)
    freqs = np.fft.rfftfreq(n_per_seg, 1.0 / fs_hz)
    df = fs_hz / n_per_seg
    n_keep = int(np.searchsorted(freqs, fmax, side="right"))

    window = hann(n_per_seg)

    ac_gain = _ac_power_gain(point.sensor.ac_coupling_corner_hz, freqs)

    ov = machine.overall
    if ov.low_hz is None:  # a validated Machine has it, configured or chosen from the speed
        raise ValueError("overall.low_hz is unset: plan from a validated Machine")
    if ov.high_hz >= nyquist:
        raise _too_fast("overall.high_hz", ov.high_hz, fs_hz)
    speed = _speed(machine)
    fast_hz = highest_rpm(speed) / 60.0
    bands, cutoff, narrow_top = _band_plans(machine, point, speed, fs_hz)
    narrow_top = max(narrow_top, diagnosis_top_hz(machine, fast_hz))  # shaft, drive, flow, electrical findings
    integration_cutoff = cutoff
    cutoff = max(cutoff, 2.0 * df)
    with np.errstate(divide="ignore"):
        vel_w = (1000.0 / (2.0 * np.pi * freqs)) ** 2
    vel_w[freqs < cutoff] = 0.0

    defects = defect_plans(machine, point)
    env_fmax = (an.envelope.fmax_hz if an.envelope.fmax_hz is not None
                else _envelope_span_hz(machine, point, defects, fast_hz))
    envelope = _envelope_plan(an, fs_hz, df, env_fmax)
    return AnalysisPlan(
        machine=machine,
        point=point,
        fs_hz=float(fs_hz),
        fmax_hz=float(fmax),
        lines=an.lines,
        n_per_seg=n_per_seg,
        n_overlap=n_overlap,
        df_hz=df,
        freqs_hz=freqs,
        n_keep=n_keep,
        window=window,
        ac_power_gain=ac_gain,
        velocity_weight=vel_w,
        velocity_cutoff_hz=float(cutoff),
        integration_cutoff_hz=float(integration_cutoff),
        overall_band_hz=(float(ov.low_hz), float(ov.high_hz)),
        narrow_top_hz=float(min(narrow_top, nyquist)),
        iso_group=machine.iso_group,
        support=machine.support,
        bands=tuple(bands),
        envelope=envelope,
        defects=defects,
        speed=speed,
    )
