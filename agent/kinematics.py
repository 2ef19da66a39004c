"""Kinematic frequencies of a machine: shaft orders, blade pass and rolling-bearing defect rates.

Bearing formulas (outer race stationary, shaft frequency f_r, n elements of diameter d on pitch diameter
D, contact angle phi), after Randall & Antoni, "Rolling element bearing diagnostics - a tutorial",
MSSP 25(2) 2011, section 2:

    FTF  = f_r/2 * (1 - d/D cos phi)            cage
    BPFO = n f_r/2 * (1 - d/D cos phi)          outer-race defect
    BPFI = n f_r/2 * (1 + d/D cos phi)          inner-race defect
    BSF  = D/(2d) f_r * (1 - (d/D cos phi)^2)   element spin (a spalled element strikes at 2 x BSF)

Blade pass is blade count x shaft frequency (common practice).

Electrical lines: an induction motor on the mains vibrates at twice the line frequency, 2xLF (100 Hz on
50 Hz mains, 120 Hz on 60 Hz), and its harmonics (common practice; references.md section 8, from memory).
They are not shaft orders, however close to one they fall.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING

if TYPE_CHECKING:  # the settings models (pydantic) are not imported by the analysis itself
    from .settings.models import Band, Bearing, Machine


INCH_MM = 25.4
DEFECTS = ("bpfo", "bpfi", "bsf", "ftf")


@dataclass(frozen=True)
class DefectMultiples:
    """Defect frequencies as multiples of shaft speed (orders)."""

    bpfo: float
    bpfi: float
    bsf: float
    ftf: float

    def as_dict(self) -> dict[str, float]:
        return {"bpfo": self.bpfo, "bpfi": self.bpfi, "bsf": self.bsf, "ftf": self.ftf}


def multiples_from_geometry(n: int, d: float, pitch: float, contact_angle_deg: float = 0.0) -> DefectMultiples:
    """Defect multiples from geometry; ``d`` and ``pitch`` in the same unit."""
    if not (n >= 1 and d > 0 and pitch > d):
        raise ValueError(f"bearing geometry n={n}, d={d}, D={pitch}: need n >= 1 and 0 < d < D")
    r = d / pitch * math.cos(math.radians(contact_angle_deg))
    return DefectMultiples(
        bpfo=n / 2.0 * (1.0 - r),
        bpfi=n / 2.0 * (1.0 + r),
        bsf=pitch / (2.0 * d) * (1.0 - r * r),
        ftf=0.5 * (1.0 - r),
    )


def bearing_multiples(b: Bearing) -> DefectMultiples:
    if b.elements is not None:
        return multiples_from_geometry(b.elements, b.element_diameter, b.pitch_diameter, b.contact_angle_deg)  # type: ignore[arg-type]
    return DefectMultiples(bpfo=b.bpfo, bpfi=b.bpfi, bsf=b.bsf, ftf=b.ftf)  # type: ignore[arg-type]


class MachineKinematics:
    """What a band needs of its machine to place itself (:class:`rotorwatch.settings.bands.Kinematics`)."""

    def __init__(self, machine: Machine) -> None:
        self.machine = machine

    def feature_order(self, feature: str, bearing: str | None) -> float:
        """The order (multiple of shaft speed) a kinematic feature is centred on."""
        if feature == "shaft":
            return 1.0
        if feature == "blade_pass":
            return float(self.machine.blades)  # type: ignore[arg-type]
        mult = bearing_multiples(self.machine.bearing(bearing))  # type: ignore[arg-type]
        return float(mult.as_dict()[feature])


def band_edges_hz(machine: Machine, band: Band, shaft_hz: float) -> list[tuple[float, float]]:
    """Edges in Hz of each part of a band at shaft frequency ``shaft_hz`` (each kind computes its own:
    :meth:`rotorwatch.settings.bands.BandBase.edges_hz`).

    A band in Hz or orders has one part; a feature band has one part per harmonic, each spanning
    +/- ``tolerance_pct`` of its centre.
    """
    return band.edges_hz(shaft_hz, MachineKinematics(machine))


def electrical_lines(machine: Machine, top_hz: float) -> list[tuple[str, float]]:
    """2xLF and its harmonics up to ``top_hz`` as (label, Hz): ``2xLF``, ``4xLF``, ... (none without a line
    frequency)."""
    lf = machine.line_frequency_hz
    if lf is None:
        return []
    return [(f"{2 * h}xLF", 2 * h * lf) for h in range(1, int(top_hz / (2 * lf)) + 1)]


def frequency_table(machine: Machine, rpm: float) -> dict[str, float]:
    """Named kinematic frequencies in Hz at ``rpm``: 1x, 2x, blade pass, each bearing's defects (and 2xLF,
    an electrical line, when the machine has a line frequency)."""
    f = rpm / 60.0
    table = {"1x": f, "2x": 2 * f}
    if machine.blades:
        table["blade_pass"] = machine.blades * f
    if machine.line_frequency_hz is not None:
        table["2xLF"] = 2 * machine.line_frequency_hz
    for b in machine.bearings:
        for name, mult in bearing_multiples(b).as_dict().items():
            table[f"{name}:{b.id}"] = mult * f
    return table
