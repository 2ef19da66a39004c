"""Records that come out of the per-point analysis (the contract between analysis, alarms and publishers).

Units are in the field names. Band values are in their band's unit: velocity mm/s RMS, acceleration
m/s^2 RMS, envelope m/s^2 RMS of the envelope spectrum.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np


def _finite(x: float) -> float | None:
    return float(x) if math.isfinite(x) else None


@dataclass(frozen=True)
class Spectrum:
    """A one-sided amplitude spectrum: ``amplitude`` is the RMS of each line (Hann-corrected)."""

    freqs_hz: np.ndarray
    amplitude: np.ndarray
    unit: str  # "m/s^2", "mm/s"


@dataclass(frozen=True)
class EvidenceLine:
    """One spectral line a finding rests on: what was expected where, and what was measured there."""

    label: str  # as an analyst writes it: "1x", "2x", "0.5x", "BPFO", "belt pass", "2xLF", "mesh - 1x in"
    expected_hz: float
    measured_hz: float  # where the line was found (NaN when nothing stood out there)
    amplitude: float  # RMS of the line in ``unit``
    unit: str  # "mm/s" (velocity), "m/s^2" (acceleration or envelope), "ratio" (peak / floor)
    ratio: float = float("nan")  # how far it stands over its local floor (amplitude ratio)

    def as_json(self, number: Callable[[float], float | None]) -> dict[str, Any]:
        return {"label": self.label, "expected_hz": number(self.expected_hz), "measured_hz": number(self.measured_hz),
                "amplitude": number(self.amplitude), "unit": self.unit, "ratio": number(self.ratio)}


@dataclass(frozen=True)
class Finding:
    """A fault the spectrum points to, with its evidence: bearing defects from the envelope spectrum
    (:mod:`rotorwatch.analysis.findings`), shaft, drive, flow and electrical faults from the velocity and
    acceleration spectrum (:mod:`rotorwatch.analysis.diagnosis`). One record, one way to be shown."""

    name: str  # BPFO, BPFI, BSF, FTF; unbalance, misalignment, looseness, belt, blade_pass, flow, 2xLF, ...
    bearing: str
    expected_hz: float  # kinematic frequency at the speed used (for BSF found as 2xBSF: 2 x BSF)
    measured_hz: float  # where the line was found within the slip tolerance
    prominence_db: float  # 20 lg of how far the defect's lines stand over the local floor (signal to noise)
    harmonics_found: int  # the fundamental and the harmonics that stand >= 3.5 x over their floor
    series: str = ""  # the line series matched: the name, or "2xBSF" when elements strike at twice BSF
    sidebands_found: int = 0  # sidebands (1x shaft for race defects, FTF for elements) >= 3.5 x their floor
    # RMS of the defect's lines in the envelope spectrum above the local floor, m/s^2 (of the envelope):
    # grows with the defect; comparable between updates of one point and one demodulation band
    severity_m_s2: float = float("nan")
    # the fault's family: bearing | shaft | drive | flow | electrical | gear
    kind: str = "bearing"
    # velocity RMS (mm/s) of the lines the finding rests on (shaft, drive, flow, electrical and gear findings)
    severity_mm_s: float = float("nan")
    evidence: tuple[EvidenceLine, ...] = ()
    confidence: str = ""  # low | medium | high: how many of the rule's corroborating signs were seen
    rule: str = ""  # the rule that fired, in a few words, with where it comes from
    sentence: str = ""  # plain language for the page, MQTT and the log

    def as_json(self, number: Callable[[float], float | None] | None = None) -> dict[str, Any]:
        """The finding as every JSON output writes it (the CLI, MQTT, the status page, snapshots);
        ``number`` rounds the floats (default: as they are, NaN and infinities as None)."""
        num = number if number is not None else _finite
        return {
            "name": self.name,
            "bearing": self.bearing,
            "series": self.series or self.name,
            "expected_hz": num(self.expected_hz),
            "measured_hz": num(self.measured_hz),
            "prominence_db": num(self.prominence_db),
            "severity_m_s2": num(self.severity_m_s2),
            "harmonics_found": int(self.harmonics_found),
            "sidebands_found": int(self.sidebands_found),
            "kind": self.kind,
            "severity_mm_s": num(self.severity_mm_s),
            "confidence": self.confidence,
            "rule": self.rule,
            "sentence": self.sentence,
            "evidence": [e.as_json(num) for e in self.evidence],
        }

    # Names of the first release, kept for readers of this record (not in any published JSON).
    @property
    def frequency_hz(self) -> float:
        """Deprecated name of :attr:`expected_hz`."""
        return self.expected_hz

    @property
    def found_hz(self) -> float:
        """Deprecated name of :attr:`measured_hz`."""
        return self.measured_hz

    @property
    def prominence(self) -> float:
        """The prominence as a plain ratio (10 ** (prominence_db / 20))."""
        return 10.0 ** (self.prominence_db / 20.0)

    @property
    def strength(self) -> float:
        """Deprecated name of :attr:`prominence` (a ratio, no unit)."""
        return self.prominence


@dataclass(frozen=True)
class BandReview:
    """A searched demodulation band set against the band a point keeps (see :mod:`rotorwatch.analysis.envelope`)."""

    kept_hz: tuple[float, float]
    kept_score: float  # the search criterion's score of the kept band on this block
    best_hz: tuple[float, float]  # the band the search would choose on this block
    best_score: float
    criterion: str  # cyclic | kurtosis
    clearly_better: bool  # the search's band lies elsewhere and scores clearly higher


@dataclass(frozen=True)
class Waveform:
    peak_m_s2: float
    rms_m_s2: float
    crest_factor: float
    kurtosis: float  # Pearson (Gaussian = 3)
    mean_m_s2: float  # DC content (sensor bias / cable faults)


@dataclass(frozen=True)
class PointResult:
    machine_id: str
    point_id: str
    time_s: float  # POSIX seconds (replay: scenario start + elapsed)
    fs_hz: float
    n_samples: int
    rpm: float
    rpm_source: str  # fixed | estimated | tach | mqtt | nominal
    overall_velocity_mm_s: float
    iso_zone: str  # A, B, C or D (ISO 20816-3, group and support of the machine)
    bands: dict[str, float]
    waveform: Waveform
    envelope_band_hz: tuple[float, float]
    findings: list[Finding] = field(default_factory=list)
    acceleration: Spectrum | None = None  # kept only when asked (evidence, status page)
    velocity: Spectrum | None = None
    envelope: Spectrum | None = None
    envelope_kurtosis: float | None = None  # spectral kurtosis of the demodulation band (when chosen by it)
    # peak / local floor of each defect's fundamental in the squared-envelope spectrum, "BPFO:<bearing>"
    # (the highest line in its window that can be evidence for it: not one claimed by another finding)
    defect_prominence: dict[str, float] = field(default_factory=dict)
    # where the demodulation band came from: fixed (configured), searched (this update), kept (chosen
    # when the point's baseline learning began, persisted with the baselines)
    envelope_band_source: str = "fixed"
    envelope_band_review: BandReview | None = None  # set on updates where a kept band was reviewed
    # speed change over the window, % of its mean (tach pulses, or the estimate in each half of the
    # window); None when the speed is fixed or comes from outside without pulses
    speed_change_pct: float | None = None
    # order bands and envelope resampled to shaft angle: from tach pulses, or along the speed ramp
    # estimated in the two halves of the window
    order_tracked: bool = False
    # the speed changed more than speed.max_change_pct and no tach fixed the shaft angle: order lines and
    # bearing findings rest on an estimated ramp (tracked along it when the halves showed it) or are
    # smeared; less certain than usual
    speed_unsteady: bool = False
    # velocity RMS (mm/s) of 1x, 2x and 3x of each shaft ("1x", or "driver 1x" / "driven 1x" ... with a drive),
    # read by the shaft findings (rotorwatch.analysis.diagnosis)
    shaft_orders_mm_s: dict[str, float] = field(default_factory=dict)
    # with a tach: 1x and 2x as (velocity RMS mm/s, phase in degrees at the pulse), rotorwatch.analysis.tachphase
    order_phase: dict[str, tuple[float, float]] = field(default_factory=dict)
