"""Where the defect lines a point searches for stand in each other's way, for ``rotorwatch check``.

Two kinds, both per bearing and point (tolerance and harmonic count are the point's, see
:func:`rotorwatch.analysis.plan.defect_plans`):

- two defects of one bearing whose searched lines (fundamentals and harmonics h = 1..H; BSF also as
  2 x BSF and its harmonics) lie within the search tolerance of each other: a line there sits in both
  windows and is read as the defect whose frequency it matches more closely (findings.py rule 8), so a
  fault of one can hide, or stand in for, the other. Example: on the demo fan's non-drive-end bearing
  BPFI (5.31643 x) and 2 x BSF (5.33038 x) are 0.26 % apart;
- with the machine's ``line_frequency_hz`` set, a defect fundamental within the electrical exclusion of
  2xLF or one of its harmonics (max(2 lines, 0.5 %), findings.py rule 5) at the configured speed: its
  line is not counted as evidence, so that defect cannot be named at this speed.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

from .findings import ELECTRICAL_TOLERANCE, EXPLAINED_LINES
from .labels import harmonic, twice_line_frequency
from .plan import DefectPlan, defect_plans

if TYPE_CHECKING:  # the settings models (pydantic) are not imported by the analysis itself
    from ..settings.models import Machine


@dataclass(frozen=True)
class Overlap:
    bearing: str
    first: str  # "BPFI"
    second: str  # "2x BSF", or "2xLF" for an electrical line
    first_order: float  # multiples of shaft speed (for 2xLF: Hz at the speed checked, in second_hz)
    second_order: float
    apart_pct: float
    tolerance_pct: float

    def text(self) -> str:
        if self.second.endswith("LF"):
            return (f"bearing {self.bearing}: {self.first} ({self.first_order:.2f} Hz at this speed) lies "
                    f"{self.apart_pct:.2f} % from {self.second} ({self.second_order:.2f} Hz), within the "
                    f"{self.tolerance_pct:.2g} % kept out of bearing evidence: its line cannot be told from the "
                    f"electrical one and is not counted")
        return (f"bearing {self.bearing}: {self.first} ({self.first_order:.5f}x) and {self.second} "
                f"({self.second_order:.5f}x) are {self.apart_pct:.2f} % apart, within the {self.tolerance_pct:.3g} % "
                f"search tolerance: a line there is read as the one it matches more closely")


def _searched(d: DefectPlan) -> list[tuple[str, float]]:
    """(label, order) of every line searched for a defect."""
    name = d.name.upper()
    out = [(harmonic(h, name), h * d.order) for h in range(1, d.harmonics + 1)]
    if d.name == "bsf":
        out += [(harmonic(2 * h, name), 2 * h * d.order) for h in range(1, d.harmonics + 1)]
    return list(dict(out).items())


def defect_overlaps(machine: Machine, rpm: float | None = None, df_hz: float = 0.0) -> list[Overlap]:
    """Overlapping searched lines of each bearing's defects, over all points (each pair once), and, when
    the machine has a line frequency, defect fundamentals on 2xLF lines at ``rpm`` (default: nominal)."""
    seen: dict[tuple, Overlap] = {}
    rpm = rpm if rpm is not None else machine.speed.nominal_rpm
    for point in machine.points:
        plans = defect_plans(machine, point)
        for i, a in enumerate(plans):
            for b in plans[i + 1:]:
                if a.bearing_id != b.bearing_id or a.name == b.name:
                    continue
                tol = max(a.tolerance, b.tolerance)
                for la, oa in _searched(a):
                    for lb, ob in _searched(b):
                        apart = abs(oa - ob) / max(oa, ob)
                        # a pair that is a multiple of a pair already listed (2x BPFI and 4x BSF after
                        # BPFI and 2x BSF) says nothing new
                        ratio = (a.bearing_id, a.name, b.name, round(oa / ob, 9))
                        if apart <= tol and ratio not in seen:
                            seen[ratio] = Overlap(a.bearing_id, la, lb, oa, ob, 100 * apart, 100 * tol)
        lf = machine.line_frequency_hz
        if lf and rpm > 0:
            twice = 2.0 * lf
            for d in plans:
                if d.bearing_id != (point.bearing or d.bearing_id):
                    continue
                f0 = d.order * rpm / 60.0
                k = max(round(f0 / twice), 1)
                guard = max(EXPLAINED_LINES * df_hz, ELECTRICAL_TOLERANCE * f0)
                if abs(f0 - k * twice) <= guard:
                    key = (d.bearing_id, d.name.upper(), twice_line_frequency(k))
                    seen[key] = Overlap(d.bearing_id, d.name.upper(), twice_line_frequency(k), f0, k * twice,
                                        100 * abs(f0 / (k * twice) - 1), 100 * guard / f0)
    return list(seen.values())
