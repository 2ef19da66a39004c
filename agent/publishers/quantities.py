"""Where the publishers look up a band quantity's unit and metric suffix.

MQTT payloads carry the unit the analysis reports band values in; Prometheus names carry the base
SI unit and scale the value to it. Everything in ``publishers/`` asks here, and this module reads
the one quantity table, :mod:`rotorwatch.settings.quantities` (deploy/mqtt-topics.md and
deploy/metrics.md are the contract for what comes out).
"""

from __future__ import annotations

from ..settings.models import Machine
from ..settings.quantities import QUANTITIES, quantity

MM_S = quantity("velocity").metric_factor  # mm/s -> m/s

#: The metric unit suffixes band values come in, and their help text (from the one quantity table).
METRIC_UNIT_HELP = {q.metric_suffix: f"{q.metric_unit} RMS" for q in QUANTITIES.values()}


def band_quantities(machine: Machine | None) -> dict[str, str]:
    """Value name -> quantity for a machine's values (``overall`` is a velocity)."""
    out = {"overall": "velocity"}
    if machine is not None:
        out.update({b.name: b.quantity for b in machine.bands})
    return out


def payload_unit(quantity_name: str | None) -> str:
    """The unit string an MQTT payload gives beside a band value ("" when unknown)."""
    row = QUANTITIES.get(quantity_name or "")
    return row.unit if row is not None else ""


def metric_unit(quantity_name: str) -> tuple[str, float]:
    """(metric name suffix, factor from the analysis unit) for a band quantity."""
    row = quantity(quantity_name)
    return row.metric_suffix, row.metric_factor
