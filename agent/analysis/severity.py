"""ISO 20816-3 evaluation zones A-D of the overall velocity RMS.

Zone boundaries in mm/s RMS (10-1000 Hz) for housing vibration, ISO 10816-3:2009 Tables A.1 and A.2,
believed unchanged in ISO 20816-3:2022 Annex A. These values are from memory and unconfirmed against the
standard's text (see the project's reference sheet, section 1):

    group 1 (large, > 300 kW)    rigid     2.3 / 4.5 / 7.1
                                 flexible  3.5 / 7.1 / 11.0
    group 2 (medium, 15-300 kW)  rigid     1.4 / 2.8 / 4.5
                                 flexible  2.3 / 4.5 / 7.1

Zone A: newly commissioned machines; B: unrestricted long-term operation; C: unsatisfactory for long-term
continuous operation; D: severe enough to cause damage.

Boundary convention (the standard does not say; our choice, tested): a value equal to a boundary belongs
to the higher zone, so 4.5 mm/s on a group 2 rigid machine reads D.

The measurement band the zones apply to, chosen by running speed, is the default of ``overall.low_hz``:
:mod:`rotorwatch.settings.iso_band`.
"""

from __future__ import annotations

import bisect
import math

ZONES = ("A", "B", "C", "D")

BOUNDARIES_MM_S: dict[tuple[int, str], tuple[float, float, float]] = {
    (1, "rigid"): (2.3, 4.5, 7.1),
    (1, "flexible"): (3.5, 7.1, 11.0),
    (2, "rigid"): (1.4, 2.8, 4.5),
    (2, "flexible"): (2.3, 4.5, 7.1),
}


def boundaries(group: int, support: str) -> tuple[float, float, float]:
    """The A/B, B/C and C/D boundaries (mm/s RMS) of a machine group and support."""
    try:
        return BOUNDARIES_MM_S[(int(group), support)]
    except KeyError:
        known = ", ".join(f"group {g} {s}" for g, s in BOUNDARIES_MM_S)
        raise ValueError(f"no ISO 20816-3 zone table for group {group!r} {support!r}; known: {known}") from None


def zone(velocity_mm_s: float, group: int, support: str) -> str:
    """Zone letter of an overall velocity RMS; a value on a boundary belongs to the higher zone."""
    if not math.isfinite(velocity_mm_s) or velocity_mm_s < 0:
        raise ValueError(f"velocity {velocity_mm_s!r} mm/s: must be a finite value >= 0")
    return ZONES[bisect.bisect_right(boundaries(group, support), velocity_mm_s)]
