"""Rolling-bearing defect rates, computed by the simulator itself.

The simulator deliberately does not import :mod:`rotorwatch.kinematics`: the analysis reads its bands
from that module, and if the simulator used it too a wrong formula there would quietly confirm itself.
The formulas (outer race stationary, shaft frequency f_r, n rolling elements of diameter d on pitch
diameter D, contact angle phi), after Randall & Antoni, "Rolling element bearing diagnostics - a
tutorial", MSSP 25(2) 2011, section 2:

    FTF  = f_r/2 (1 - d/D cos phi)                 cage
    BPFO = n f_r/2 (1 - d/D cos phi)               a spall on the outer race is struck by every element
    BPFI = n f_r/2 (1 + d/D cos phi)               a spall on the inner race meets every element
    BSF  = D/(2 d) f_r (1 - (d/D cos phi)^2)       element spin; a spalled element strikes both races
                                                    once per spin, so its impacts come at 2 x BSF

Everything here is in orders (multiples of shaft frequency), so it holds at any speed.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from rotorwatch.settings.models import Bearing


@dataclass(frozen=True)
class DefectOrders:
    """Defect rates of one bearing in orders of shaft speed."""

    bpfo: float  # outer-race impacts per shaft revolution
    bpfi: float  # inner-race impacts per shaft revolution
    bsf: float  # element spin (one side); a spalled element strikes at 2 x bsf
    ftf: float  # cage revolutions per shaft revolution

    def impact_order(self, defect: str) -> float:
        """Impacts per shaft revolution of a spall on ``defect`` (outer_race, inner_race or ball)."""
        return {"outer_race": self.bpfo, "inner_race": self.bpfi, "ball": 2.0 * self.bsf}[defect]

    def load_zone_order(self, defect: str) -> float:
        """Passes of the spall through the (stationary) load zone per shaft revolution.

        An outer-race spall sits still in the load zone (0: no modulation), an inner-race spall turns
        with the shaft (1), a spalled element travels with the cage (FTF).
        """
        return {"outer_race": 0.0, "inner_race": 1.0, "ball": self.ftf}[defect]


def orders_from_geometry(elements: int, element_diameter: float, pitch_diameter: float,
                         contact_angle_deg: float = 0.0) -> DefectOrders:
    """Defect orders from bearing geometry (diameters in any one unit)."""
    if elements < 1 or not 0.0 < element_diameter < pitch_diameter:
        raise ValueError(
            f"bearing geometry n={elements}, d={element_diameter}, D={pitch_diameter}: need n >= 1 and 0 < d < D"
        )
    ratio = element_diameter / pitch_diameter * math.cos(math.radians(contact_angle_deg))
    return DefectOrders(
        bpfo=elements / 2.0 * (1.0 - ratio),
        bpfi=elements / 2.0 * (1.0 + ratio),
        bsf=pitch_diameter / (2.0 * element_diameter) * (1.0 - ratio * ratio),
        ftf=0.5 * (1.0 - ratio),
    )


def bearing_orders(bearing: Bearing) -> DefectOrders:
    """Defect orders of a configured bearing: from its geometry, or its multiples as given."""
    if bearing.elements is not None:
        return orders_from_geometry(
            bearing.elements,
            bearing.element_diameter,  # type: ignore[arg-type]
            bearing.pitch_diameter,  # type: ignore[arg-type]
            bearing.contact_angle_deg,
        )
    return DefectOrders(bpfo=bearing.bpfo, bpfi=bearing.bpfi, bsf=bearing.bsf, ftf=bearing.ftf)  # type: ignore[arg-type]
