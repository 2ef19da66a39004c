"""The one place that decides the running speed an update uses, and where it came from.

Three steps, each a function here, called by whoever holds the facts:

1. :func:`outside_reading` (the daemon, per machine and update): what the tach channel or the MQTT speed
   topic says. A tach window without one pulse is a machine standing still (0 r/min); an MQTT machine
   with no fresh reading (none yet, or older than ``mqtt_max_age_s``) runs on its nominal speed (source
   ``nominal``). Replay and ``rotorwatch analyze --rpm`` give their reading directly.
2. :func:`resolve` (the point analyzer, per point and block): tach pulse times that give a shaft angle
   win (their mean speed, source ``tach``); else a given reading (reported with its source, or the speed
   mode: ``fixed`` for fixed and estimated machines); else ``fixed`` -> the configured rpm;
   ``estimated`` -> the harmonic-sum estimate within min_rpm..max_rpm when it is clear; else the nominal
   rpm (source ``nominal``).
3. :func:`machine_speed` (the alarm monitor, per machine and update): the outside reading when there is
   one, else the median of the speeds the points used.
"""

from __future__ import annotations

import logging
import math
import statistics
from collections.abc import Callable, Iterable
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from ..errors import InputError
from . import ordertrack
from .ordertrack import ShaftAngle
from .plan import SpeedPlan
from .speed import SpeedEstimate

if TYPE_CHECKING:  # the settings models (pydantic) are not imported by the analysis itself
    from ..settings.models import Speed

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class SpeedReading:
    """A speed known from outside the vibration for one update (all None: none)."""

    rpm: float | None = None
    source: str | None = None
    pulses_s: np.ndarray | None = None  # tach pulse times in seconds from the window's first sample


NO_READING = SpeedReading()


def outside_reading(speed: Speed, *, tach: tuple[float | None, np.ndarray] | None = None,
                    mqtt_listening: bool = False, mqtt_rpm: float | None = None) -> SpeedReading:
    """The reading of one update from what the machine's speed source gave: ``tach`` is (speed counted
    over the window or None without pulses, pulse times) when a tach window is at hand; ``mqtt_rpm`` the
    fresh MQTT reading (None: none, or stale) when the daemon listens to speed topics."""
    if speed.mode == "tach" and tach is not None:
        rpm, pulses_s = tach
        if rpm is None:
            return SpeedReading(0.0, "tach")  # no pulses over a whole window: standing still
        return SpeedReading(rpm, "tach", pulses_s)
    if speed.mode == "mqtt" and mqtt_listening:
        if mqtt_rpm is None:
            return SpeedReading(speed.nominal_rpm, "nominal")
        return SpeedReading(mqtt_rpm, "mqtt")
    return NO_READING


@dataclass(frozen=True)
class UsedSpeed:
    """The speed a point's analysis uses for one block."""

    rpm: float
    source: str
    angle: ShaftAngle | None  # the shaft angle the tach pulses give, when they do
    from_tach: bool


def resolve(sp: SpeedPlan, reading: SpeedReading, duration_s: float,
            estimate: Callable[[float, float], SpeedEstimate], point_id: str = "") -> UsedSpeed:
    """The speed of one block (rules: module docstring); ``estimate(min_rpm, max_rpm)`` runs the
    harmonic-sum estimate on the block, only when the rules need it."""
    rpm, source, angle, from_tach = reading.rpm, reading.source, None, False
    if reading.pulses_s is not None:
        angle = ordertrack.from_pulses(reading.pulses_s, sp.pulses_per_rev, duration_s)
        if angle is not None:
            rpm, source, from_tach = 60.0 * angle.mean_hz, source or "tach", True
    if rpm is not None:
        if not (np.isfinite(rpm) and rpm >= 0):
            raise InputError(f"rpm = {rpm!r}: must be a finite speed >= 0")
        return UsedSpeed(float(rpm), source or (sp.mode if sp.mode in ("tach", "mqtt") else "fixed"), angle, from_tach)
    if sp.mode == "fixed":
        return UsedSpeed(sp.nominal_rpm, "fixed", None, False)
    if sp.mode == "estimated":
        est = estimate(sp.min_rpm, sp.max_rpm)  # type: ignore[arg-type]
        if est.clear:
            return UsedSpeed(est.rpm, "estimated", None, False)
        log.debug("speed estimate not clear (harmonics=%d) point=%s", est.harmonics_clear, point_id)
    return UsedSpeed(sp.nominal_rpm, "nominal", None, False)


def machine_speed(rpm: float | None, rpm_source: str, used: Iterable[tuple[float, str]]) -> tuple[float | None, str]:
    """The machine's speed for an update: the outside reading, else the median of the (rpm, source) the
    points used (None when no point was analysed), with its source."""
    if rpm is not None:
        return rpm, rpm_source
    used = list(used)
    speeds = [r for r, _ in used if math.isfinite(r)]
    if not rpm_source:
        rpm_source = next((s for _, s in used), "")
    return (statistics.median(speeds) if speeds else None), rpm_source
