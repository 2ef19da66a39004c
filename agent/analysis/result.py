"""Records that come out of the per-point analysis (the contract between analysis, alarms and publishers).

Units are in the field names. Band values are in their band's unit: velocity mm/s RMS, acceleration
m/s^2 RMS, envelope m/s^2 RMS of the envelope spectrum.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np


@dataclass(frozen=True)
class Spectrum:
    """A one-sided amplitude spectrum: ``amplitude`` is the RMS of each line (Hann-corrected)."""

    freqs_hz: np.ndarray
    amplitude: np.ndarray
    unit: str  # "m/s^2", "mm/s"


@dataclass(frozen=True)
class Finding:
    """A bearing defect the envelope spectrum points to."""

    name: str  # BPFO, BPFI, BSF or FTF
    bearing: str
    frequency_hz: float  # expected (kinematic) frequency at the speed used
    found_hz: float  # where the peak was found within the slip tolerance
    strength: float  # decision measure: peak over local floor, combined over harmonics (see analysis docs)
    harmonics_found: int
    series: str = ""  # the line series matched: the name, or "2xBSF" when elements strike at twice BSF
    sidebands_found: int = 0  # sidebands (1x shaft for race defects, FTF for elements) that stand out


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
    defect_prominence: dict[str, float] = field(default_factory=dict)
