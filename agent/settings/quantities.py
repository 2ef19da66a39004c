"""What a band's value measures: the one table of quantities, their spectra and their units.

A band reads one spectrum and its value is an RMS in that spectrum's unit; its levels are written in
the same unit. Every part of the agent that names a unit looks it up here: the analysis (which spectrum
a band reads, the unit of the published spectra), the alarm logic (the unit of each value), MQTT
payloads, the Prometheus endpoint (a metric name ends in the base SI unit, so a velocity in mm/s is
published in m/s) and the status page.

=============  ============  ==========  ==========================  =============  ==========
quantity       spectrum      unit        metric suffix               metric factor  metric unit
=============  ============  ==========  ==========================  =============  ==========
acceleration   acceleration  m/s^2       meters_per_second_squared   1              m/s^2
velocity       velocity      mm/s        meters_per_second           0.001          m/s
envelope       envelope      m/s^2       meters_per_second_squared   1              m/s^2
=============  ============  ==========  ==========================  =============  ==========

The overall velocity is a ``velocity`` value. Adding a quantity: one row in :data:`QUANTITIES` and its
name in :data:`QuantityName`, and the spectrum it reads in :mod:`rotorwatch.analysis.bands`.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

QuantityName = Literal["acceleration", "velocity", "envelope"]


@dataclass(frozen=True)
class Quantity:
    """One quantity a band (or the overall value) may read."""

    name: str
    #: the spectrum the value is read from and drawn on: a key of the analysis result's spectra
    spectrum: str
    #: unit of the values, levels and spectra (RMS), as the analysis, MQTT and the page write it
    unit: str
    #: Prometheus unit suffix of the metric names (base SI units)
    metric_suffix: str
    #: factor from ``unit`` to the metric's base unit
    metric_factor: float
    #: the metric's base unit as its help text writes it
    metric_unit: str
    #: True when the value is read from the envelope (demodulated) spectrum
    demodulated: bool = False
    #: True when the spectrum is integrated from acceleration (its low lines are cut below a cut-off)
    integrated: bool = False


QUANTITIES: dict[str, Quantity] = {
    q.name: q
    for q in (
        Quantity("acceleration", "acceleration", "m/s^2", "meters_per_second_squared", 1.0, "m/s^2"),
        Quantity("velocity", "velocity", "mm/s", "meters_per_second", 1e-3, "m/s", integrated=True),
        Quantity("envelope", "envelope", "m/s^2", "meters_per_second_squared", 1.0, "m/s^2", demodulated=True),
    )
}

#: The spectra the quantities read, each once (the analysis result's spectra, in this order).
SPECTRA: tuple[str, ...] = tuple(dict.fromkeys(q.spectrum for q in QUANTITIES.values()))

#: The unit of each spectrum (RMS per line), as the quantities that read it write it.
SPECTRUM_UNITS: dict[str, str] = {q.spectrum: q.unit for q in QUANTITIES.values()}

#: The overall value's quantity (the overall velocity RMS and its ISO 20816-3 zone).
OVERALL_QUANTITY = QUANTITIES["velocity"]


def quantity(name: str) -> Quantity:
    """The table row of ``name``; ``KeyError`` names the known quantities."""
    try:
        return QUANTITIES[name]
    except KeyError:
        raise KeyError(f"unknown quantity {name!r}; known: {', '.join(QUANTITIES)}") from None
