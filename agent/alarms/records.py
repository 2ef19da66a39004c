"""Records that come out of the alarm logic: per-update states and transition events.

This is the contract between the alarm logic (``rotorwatch.alarms``), replay, and the daemon's
publishers (MQTT, Prometheus, status page, evidence). Times are POSIX seconds.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from ..analysis.result import PointResult
from .projection import Projection

# Point and machine states, most severe first where a machine state is aggregated from its points.
# A sensor fault never reads as normal and never raises a machine alarm.
STATES = ("alarm", "warning", "sensor_fault", "no_data", "learning", "normal", "stopped")
VALUE_STATES = ("normal", "warning", "alarm")


@dataclass(frozen=True)
class SensorHealth:
    """What the sensor checks concluded about one block: ``ok`` or a fault with a reason."""

    ok: bool
    fault: str | None = None  # disconnected | clipping | flatline | bias_shift | overflow | stalled | dropout | invalid
    reason: str = ""
    rms_v: float = 0.0
    mean_v: float = 0.0
    clipped_fraction: float = 0.0


@dataclass(frozen=True)
class ValueStatus:
    """The alarm status of one trended value (a band, or ``overall`` velocity) on one point."""

    name: str
    value: float
    unit: str
    state: str  # learning | normal | warning | alarm | suppressed
    warning_level: float | None  # effective levels now (absolute or from the baseline, lower wins)
    alarm_level: float | None
    baseline: float | None  # learned baseline median, once learned
    latched: bool = False  # an alarm held by latching after its value cleared (acknowledge to clear)
    reason: str = ""  # why the value is in its state, for people
    drop_warning_level: float | None = None  # effective drop levels (a falling value), when set
    drop_alarm_level: float | None = None
    raises: int = 0  # times the value was raised (to warning, or to alarm) since the monitor started
    chatter: int = 0  # raises that came within AlarmPolicy.chatter_window_updates of the value's last lowering
    # the time to its warning and alarm levels from its recent trend (rotorwatch.alarms.projection); None for
    # a value without levels, a suppressed value, or with alarms.projection.enabled = false
    projection: Projection | None = None


@dataclass(frozen=True)
class FindingStatus:
    """The alarm status of one kind of finding (keyed by its name, e.g. ``BPFO``) on one point, for the
    findings that ``AlarmPolicy.findings`` lets raise the point's state."""

    name: str
    state: str  # normal | warning | alarm | suppressed
    present: bool  # reported by this update's analysis
    seen: int  # updates with the finding among the last ``window`` updates
    window: int
    strength: float | None  # of this update's finding (the strongest of that name), when present
    bearing: str | None
    reason: str = ""
    raises: int = 0
    chatter: int = 0


@dataclass(frozen=True)
class AlarmEvent:
    """A state transition of a value, a point or a machine."""

    time_s: float
    machine_id: str
    point_id: str | None  # None for a machine-level transition
    value_name: str  # band name, "overall", "finding:<NAME>" (e.g. "finding:BPFO"), "point" or "machine"
    old_state: str
    new_state: str
    value: float | None
    unit: str
    level: float | None  # the level crossed, when a level was crossed
    level_kind: str | None  # "warning" or "alarm"; "absolute" or "baseline" origin is in reason
    reason: str


@dataclass(frozen=True)
class PointUpdate:
    point_id: str
    state: str
    reason: str
    result: PointResult | None
    health: SensorHealth
    values: dict[str, ValueStatus] = field(default_factory=dict)
    findings: dict[str, FindingStatus] = field(default_factory=dict)  # only findings that can raise the state


@dataclass(frozen=True)
class MachineUpdate:
    machine_id: str
    time_s: float
    rpm: float | None
    rpm_source: str
    state: str
    reason: str
    points: dict[str, PointUpdate]
    events: list[AlarmEvent] = field(default_factory=list)
