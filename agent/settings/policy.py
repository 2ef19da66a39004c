"""How a machine alarms and what drives it: the alarm policy (learning, chatter, the finding rules that
raise a point's state) and the belt or gear stage between driver and driven shaft. Part of the machine
model (rotorwatch.settings.models re-exports every name here)."""

from __future__ import annotations

import math
from typing import Literal

from pydantic import Field, model_validator

from .base import Model, NonNegFloat, PositiveFloat

#: Names of the findings the analysis reports (``Finding.name``) that ``alarms.findings`` may key: the
#: bearing defects, then the shaft, drive, flow, electrical and gear findings (rotorwatch.analysis.diagnosis).
BEARING_FINDING_NAMES = ("BPFO", "BPFI", "BSF", "FTF")
DIAGNOSIS_FINDING_NAMES = ("unbalance", "misalignment", "looseness", "belt", "blade_pass", "flow", "2xLF",
                           "pole_pass", "gear_mesh")
FINDING_NAMES = BEARING_FINDING_NAMES + DIAGNOSIS_FINDING_NAMES


class FindingRule(Model):
    """How a finding that persists raises its point's state (``[machines.alarms.findings.<NAME>]``).

    The finding raises the point to ``raises`` once it has been reported in ``present_updates`` of the
    last ``window_updates`` updates (default: the same number, i.e. that many in a row), and clears
    after ``absent_updates`` updates in a row without it (default: ``present_updates``): hysteresis in
    time, so one update that misses the finding does not clear it. ``min_zone`` (shaft, drive, flow,
    electrical and gear findings): only a finding whose severity (``severity_mm_s``) reaches that ISO
    20816-3 zone of the machine counts. ``enabled = false`` turns off a rule that is on by default.
    """

    raises: Literal["warning", "alarm"] = "warning"
    present_updates: int = Field(6, ge=1, le=1000)
    window_updates: int | None = Field(None, ge=1, le=1000)
    absent_updates: int | None = Field(None, ge=1, le=1000)
    min_zone: Literal["B", "C", "D"] | None = None
    enabled: bool = True

    @model_validator(mode="after")
    def _window(self) -> FindingRule:
        if self.window_updates is not None and self.window_updates < self.present_updates:
            raise ValueError(
                f"window_updates ({self.window_updates}) must be at least present_updates ({self.present_updates})"
            )
        return self

    @property
    def window(self) -> int:
        return self.window_updates if self.window_updates is not None else self.present_updates

    @property
    def absent(self) -> int:
        return self.absent_updates if self.absent_updates is not None else self.present_updates


#: Findings that raise their point's state unless the machine turns them off: the shaft, drive and
#: electrical patterns that are named only from the zone A/B boundary up and never named in the shipped
#: scenarios that do not simulate them (tests/e2e/test_finding_confusion.py). They raise a warning once
#: their severity reaches zone C (ISO 20816-3: unsatisfactory for long-term operation) in 6 of 8 updates.
#: Off by default, where false findings are likely: the bearing defects (a lone line in noise), blade pass
#: (normal content of every fan and pump; its band's learned baseline is the better judge), flow (a pattern
#: whose cause needs the operating point) and pole pass (small sidebands without a significance level).
DEFAULT_FINDING_RULES = {
    name: FindingRule(present_updates=6, window_updates=8, min_zone="C")
    for name in ("unbalance", "misalignment", "looseness", "belt", "gear_mesh", "2xLF")
}


class ProjectionSettings(Model):
    """Time to a level (``[machines.alarms.projection]``): each value with levels has its trend over the last
    ``window_hours`` fitted by a robust straight line (Theil-Sen, rotorwatch.alarms.projection) and projected
    to its warning and alarm levels, with an interval at ``confidence``; a value whose rise is not
    significant at that confidence reads "not rising". ``min_points``: updates in the window before a fit;
    ``max_points``: the window is thinned to at most this many (a fit costs their square).
    """

    enabled: bool = True
    window_hours: PositiveFloat = Field(24.0, le=24.0 * 365)
    min_points: int = Field(12, ge=4, le=10000)
    max_points: int = Field(120, ge=8, le=1000)
    confidence: float = Field(0.95, ge=0.5, lt=1.0)

    @model_validator(mode="after")
    def _points(self) -> ProjectionSettings:
        if self.max_points < self.min_points:
            raise ValueError(f"max_points ({self.max_points}) must be at least min_points ({self.min_points})")
        return self


class AlarmPolicy(Model):
    """How baselines are learned, how chatter is counted, and which findings raise a point's state.

    ``chatter_window_updates``: a value (or finding) raised again within this many updates of its last
    lowering counts one chatter (a value that keeps going in and out of a level; its levels, hysteresis
    or delays want a look). ``findings``: per finding name (``BPFO`` ... ``gear_mesh``, :data:`FINDING_NAMES`),
    a :class:`FindingRule`, over the rules on by default (:data:`DEFAULT_FINDING_RULES`); a finding with no
    rule in force is reported but raises nothing.
    """

    learning_hours: NonNegFloat = Field(24.0, description="learning period on the healthy machine")
    min_learning_updates: int = Field(20, ge=1, le=100000)
    chatter_window_updates: int = Field(10, ge=1, le=100000)
    findings: dict[str, FindingRule] = {}
    projection: ProjectionSettings = ProjectionSettings()

    @model_validator(mode="after")
    def _finding_names(self) -> AlarmPolicy:
        unknown = [k for k in self.findings if k not in FINDING_NAMES]
        if unknown:
            raise ValueError(f"findings: unknown finding {unknown[0]!r}, known: {', '.join(FINDING_NAMES)}")
        zoned = [k for k, r in self.findings.items() if r.min_zone is not None and k in BEARING_FINDING_NAMES]
        if zoned:
            raise ValueError(f"findings.{zoned[0]}.min_zone: a bearing finding has no velocity severity to zone")
        return self

    @property
    def finding_rules(self) -> dict[str, FindingRule]:
        """The rules in force: the defaults (:data:`DEFAULT_FINDING_RULES`) with the configured ones over
        them, less those turned off."""
        rules = {**DEFAULT_FINDING_RULES, **self.findings}
        return {k: r for k, r in rules.items() if r.enabled}


class Drive(Model):
    """A belt or gear stage between the driver (the motor) and the driven shaft (``[machines.drive]``).

    ``speed_of`` says which shaft the machine's ``speed`` measures. Belt: the sheaves' pitch diameters
    (``driver_sheave_mm``, ``driven_sheave_mm``) give the driven speed, and the belt pass frequency comes
    from the belt's pitch length (``belt_length_mm``) or is given directly as a multiple of the driver's
    speed (``belt_pass_order``). Gear: the tooth counts (``driver_teeth``, ``driven_teeth``) give the
    driven speed and the gear mesh frequency (driver teeth x driver speed).
    """

    kind: Literal["belt", "gear"]
    speed_of: Literal["driver", "driven"] = "driver"
    driver_sheave_mm: PositiveFloat | None = None
    driven_sheave_mm: PositiveFloat | None = None
    belt_length_mm: PositiveFloat | None = None
    belt_pass_order: PositiveFloat | None = None
    driver_teeth: int | None = Field(None, ge=5, le=1000)
    driven_teeth: int | None = Field(None, ge=5, le=1000)

    @model_validator(mode="after")
    def _keys_of_kind(self) -> Drive:
        belt = (self.driver_sheave_mm, self.driven_sheave_mm, self.belt_length_mm, self.belt_pass_order)
        gear = (self.driver_teeth, self.driven_teeth)
        if self.kind == "belt":
            if any(v is not None for v in gear):
                raise ValueError("a belt drive takes no driver_teeth / driven_teeth")
            if self.driver_sheave_mm is None or self.driven_sheave_mm is None:
                raise ValueError("a belt drive needs driver_sheave_mm and driven_sheave_mm")
            if (self.belt_length_mm is None) == (self.belt_pass_order is None):
                raise ValueError("a belt drive needs one of belt_length_mm or belt_pass_order")
            if self.belt_length_mm is not None and self.belt_length_mm <= math.pi * self.driver_sheave_mm:
                raise ValueError(f"belt_length_mm ({self.belt_length_mm:g}) must exceed the driver sheave's "
                                 f"circumference ({math.pi * self.driver_sheave_mm:.0f} mm)")
        else:
            if any(v is not None for v in belt):
                raise ValueError("a gear drive takes no sheave or belt keys")
            if self.driver_teeth is None or self.driven_teeth is None:
                raise ValueError("a gear drive needs driver_teeth and driven_teeth")
        return self

    @property
    def ratio(self) -> float:
        """Driven speed / driver speed."""
        if self.kind == "belt":
            return self.driver_sheave_mm / self.driven_sheave_mm  # type: ignore[operator]
        return self.driver_teeth / self.driven_teeth  # type: ignore[operator]
