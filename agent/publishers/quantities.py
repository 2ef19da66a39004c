"""The one place where the publishers look up a band quantity's unit and metric suffix.

MQTT payloads carry the unit the analysis reports band values in; Prometheus names carry the base
SI unit and scale the value to it. Everything in ``publishers/`` asks here (deploy/mqtt-topics.md and
deploy/metrics.md are the contract for what comes out).
"""

from __future__ import annotations

from ..settings.models import Machine

MM_S = 1e-3  # mm/s -> m/s

#: Unit of each band quantity, as the analysis reports band values (agent/analysis/result.py).
QUANTITY_UNITS = {"velocity": "mm/s", "acceleration": "m/s^2", "envelope": "m/s^2"}

#: Unit suffix of each band quantity in base SI units, and the factor from the analysis unit.
QUANTITY_METRIC_UNIT = {
    "velocity": ("meters_per_second", MM_S),
    "acceleration": ("meters_per_second_squared", 1.0),
    "envelope": ("meters_per_second_squared", 1.0),
}

#: The metric unit suffixes band values come in, and their help text.
METRIC_UNIT_HELP = {"meters_per_second": "m/s RMS", "meters_per_second_squared": "m/s^2 RMS"}


def band_quantities(machine: Machine | None) -> dict[str, str]:
    """Value name -> quantity for a machine's values (``overall`` is a velocity)."""
    out = {"overall": "velocity"}
    if machine is not None:
        out.update({b.name: b.quantity for b in machine.bands})
    return out


def payload_unit(quantity: str | None) -> str:
    """The unit string an MQTT payload gives beside a band value ("" when unknown)."""
    return QUANTITY_UNITS.get(quantity or "", "")


def metric_unit(quantity: str) -> tuple[str, float]:
    """(metric name suffix, factor from the analysis unit) for a band quantity."""
    return QUANTITY_METRIC_UNIT[quantity]
