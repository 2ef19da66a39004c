"""The ISO 20816-3 measurement band of the overall velocity, chosen by a machine's running speed.

Measurement band (ISO 10816-3 clause 4.2, carried into ISO 20816-3; from memory, unconfirmed): 10-1000 Hz
for machines running above 600 r/min, 2-1000 Hz for machines running from 120 to 600 r/min. ISO 2954:2012
(confirmed) sets 10-1000 Hz as the least an instrument measures and notes that some parts of ISO 10816 use
a lower cut-off of 2 Hz. :func:`overall_band_hz` chooses the band from the machine's lowest running speed;
below 120 r/min (outside ISO 20816-3's scope) it keeps 2 Hz, and ``rotorwatch check`` says the 1x falls
below the band.

It lives with the settings because it is the default of ``[machines.overall] low_hz``, filled in when a
configuration is validated; :mod:`rotorwatch.analysis.severity` (the zones) re-exports it.
"""

from __future__ import annotations

SLOW_MACHINE_RPM = 600.0  # at or below: a slow machine
SLOW_SCOPE_MIN_RPM = 120.0  # ISO 20816-3 covers machines from 120 r/min
LOW_EDGE_HZ = 10.0  # above 600 r/min
SLOW_LOW_EDGE_HZ = 2.0  # 120-600 r/min
HIGH_EDGE_HZ = 1000.0


def overall_band_hz(lowest_rpm: float) -> tuple[float, float]:
    """The ISO 20816-3 measurement band (Hz) for a machine whose lowest running speed is ``lowest_rpm``."""
    low = SLOW_LOW_EDGE_HZ if lowest_rpm <= SLOW_MACHINE_RPM else LOW_EDGE_HZ
    return low, HIGH_EDGE_HZ
