"""Level tracking of one trended value: normal -> warning -> alarm and back, without chatter.

A :class:`LevelTracker` follows one value (a band or the overall velocity) of one point. Each update it
compares the value with the *effective* levels and moves between ``normal``, ``warning`` and ``alarm``:

- **on-delay**: a level is raised only after ``on_delay_updates`` consecutive updates at or above it
  (a value equal to a level counts as above it);
- **hysteresis** (deadband): a raised level clears only when the value falls below
  ``level x (1 - clear_margin_pct/100)``; a value moving inside the deadband changes nothing;
- **latching** (optional): an alarm stays raised after the value clears, until it is acknowledged.

Basic alarm design (set point, deadband, on-delay) follows ANSI/ISA-18.2-2016 / IEC 62682:2014; debouncing
with a few consecutive exceedances and a 5-10 % clear margin is common practice for vibration values.

Effective levels combine absolute levels with levels relative to the learned baseline (see
:mod:`rotorwatch.alarms.baseline`), and the lower one wins:

- ``ratio`` form: ``level = r x median`` (narrow-band practice: 2x = +6 dB significant, Randall 2011);
- ``sigma`` form: ``level = median + k x 1.4826 x MAD``, the robust standard deviation of a normal
  population (MAD scale factor 1/Phi^-1(3/4) = 1.4826). The MAD is floored at ``MAD_FLOOR_FRACTION`` of the
  median so a perfectly flat baseline still leaves a band of normal variation (our own choice);
- ``zone_share`` form (overall velocity only): ``level = median + p/100 x B/C`` with B/C the ISO 20816-3
  boundary of the machine's group and support, the warning capped at ``1.25 x B/C`` and the alarm at
  ``1.25 x C/D``. This is the operational-limit form of ISO 10816-3 / ISO 20816-1 and -3 (an ALARM at the
  baseline plus 25 % of the zone B upper limit, normally not above 1.25 x the B/C boundary; a TRIP not
  above 1.25 x the C/D boundary). **From memory, unconfirmed** (shared references section 7; clause numbers
  unconfirmed); the zone boundaries themselves are also from memory (see ``rotorwatch.analysis.severity``).
  Using the TRIP cap for rotorwatch's advisory ``alarm`` level is our own choice.

Drops (a value that falls is a change too): the same forms measured downwards (``ratio``: a fraction of
the median; ``sigma``: k robust sigmas below it; ``zone_share``: a share of B/C below it, which is the
standard's "change of 25 % of the zone B upper value, up or down" criterion, from memory); absolute
drop levels combine with relative ones and the *higher* drop level wins (the first one met on the way
down). A :class:`LevelTracker` follows one direction; the monitor runs one for rises and, when drop
levels are set, one for drops.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from ..settings.models import Levels

MAD_TO_SIGMA = 1.4826  # 1 / Phi^-1(0.75): robust sigma of a normal population from its MAD
MAD_FLOOR_FRACTION = 0.02  # sigma form: MAD never taken below 2 % of the median (our own choice)
SEVERITY = {"normal": 0, "warning": 1, "alarm": 2}


def fmt(x: float | None) -> str:
    """A value for a human message: three significant digits."""
    if x is None:
        return "-"
    if not math.isfinite(x):
        return str(x)
    return f"{x:.3g}"


@dataclass(frozen=True)
class Baseline:
    """A learned baseline of one value: robust centre and spread of the healthy machine."""

    median: float
    mad: float
    n: int


@dataclass(frozen=True)
class Level:
    """One effective level: where it sits, which kind it is and where it came from."""

    value: float
    kind: str  # "warning" or "alarm"
    origin: str  # "absolute" or "baseline"
    note: str  # how it was derived, for messages: "2.5 x learned baseline 0.124"


@dataclass(frozen=True)
class EffectiveLevels:
    warning: Level | None
    alarm: Level | None

    def for_kind(self, kind: str) -> Level | None:
        return self.warning if kind == "warning" else self.alarm


#: ISO operational-limit caps of the ``zone_share`` form, as multiples of (B/C, C/D): the first level
#: (warning) at most 1.25 x B/C, the second (alarm) at most 1.25 x C/D. From memory, unconfirmed
#: (ISO 10816-3 / ISO 20816-1 operational limits; shared references section 7).
ZONE_SHARE_CAP = 1.25


def _relative(levels: Levels, factor: float | None, kind: str, baseline: Baseline | None,
              zone_limits_mm_s: tuple[float, float, float] | None, drop: bool = False) -> Level | None:
    if factor is None or baseline is None or not math.isfinite(baseline.median) or baseline.median <= 0:
        return None
    med = baseline.median
    sign = -1.0 if drop else 1.0
    word = "-" if drop else "+"
    if levels.relative_form == "ratio":
        return Level(factor * med, kind, "baseline", f"{factor:g} x learned baseline {fmt(med)}")
    if levels.relative_form == "zone_share":
        if zone_limits_mm_s is None:
            return None
        bc, cd = zone_limits_mm_s[1], zone_limits_mm_s[2]
        value = med + sign * factor / 100.0 * bc
        note = f"learned baseline {fmt(med)} {word} {factor:g} % of the B/C boundary {fmt(bc)}"
        if drop:
            return Level(value, kind, "baseline", note) if value > 0 else None
        cap_name, cap = ("B/C", ZONE_SHARE_CAP * bc) if kind == "warning" else ("C/D", ZONE_SHARE_CAP * cd)
        if value > cap:
            return Level(cap, kind, "baseline", f"{note}, capped at {ZONE_SHARE_CAP:g} x {cap_name} {fmt(cap)}")
        return Level(value, kind, "baseline", note)
    mad = max(baseline.mad, MAD_FLOOR_FRACTION * med)
    sigma = MAD_TO_SIGMA * mad
    value = med + sign * factor * sigma
    if value <= 0:
        return None
    return Level(value, kind, "baseline", f"learned baseline {fmt(med)} {word} {factor:g} x robust sigma {fmt(sigma)}")


def effective_levels(levels: Levels, baseline: Baseline | None,
                     zone_limits_mm_s: tuple[float, float, float] | None = None) -> EffectiveLevels:
    """The rise levels in force now: absolute and baseline-relative, the lower of each kind wins.

    Until a baseline is learned only the absolute levels apply. A warning level that would sit at or
    above the alarm level is dropped (the value goes straight to alarm). ``zone_limits_mm_s`` (A/B, B/C,
    C/D) is needed by the ``zone_share`` form; without it that form sets no level.
    """
    found: dict[str, Level | None] = {}
    for kind, absolute, factor in (
        ("warning", levels.warning, levels.relative_warning),
        ("alarm", levels.alarm, levels.relative_alarm),
    ):
        cands = []
        if absolute is not None:
            cands.append(Level(absolute, kind, "absolute", "absolute level"))
        rel = _relative(levels, factor, kind, baseline, zone_limits_mm_s)
        if rel is not None:
            cands.append(rel)
        found[kind] = min(cands, key=lambda lv: lv.value) if cands else None
    warning, alarm = found["warning"], found["alarm"]
    if warning is not None and alarm is not None and warning.value >= alarm.value:
        warning = None
    return EffectiveLevels(warning, alarm)


def effective_drop_levels(levels: Levels, baseline: Baseline | None,
                          zone_limits_mm_s: tuple[float, float, float] | None = None) -> EffectiveLevels:
    """The drop levels in force now: absolute and baseline-relative, the *higher* of each kind wins.

    A drop warning that would sit at or below the drop alarm is dropped (the value goes straight to
    alarm). A relative drop level at or below zero is not set.
    """
    found: dict[str, Level | None] = {}
    for kind, absolute, factor in (
        ("warning", levels.drop_warning, levels.relative_drop_warning),
        ("alarm", levels.drop_alarm, levels.relative_drop_alarm),
    ):
        cands = []
        if absolute is not None:
            cands.append(Level(absolute, kind, "absolute", "absolute drop level"))
        rel = _relative(levels, factor, kind, baseline, zone_limits_mm_s, drop=True)
        if rel is not None:
            cands.append(rel)
        found[kind] = max(cands, key=lambda lv: lv.value) if cands else None
    warning, alarm = found["warning"], found["alarm"]
    if warning is not None and alarm is not None and warning.value <= alarm.value:
        warning = None
    return EffectiveLevels(warning, alarm)


@dataclass(frozen=True)
class Transition:
    """A change of a tracker's state, with the level crossed and a reason a person can read."""

    old_state: str
    new_state: str
    value: float
    level: float | None
    level_kind: str | None
    reason: str


class LevelTracker:
    """normal / warning / alarm state of one value in one direction, with on-delay, off-delay,
    hysteresis and optional latching.

    ``direction`` is ``"rise"`` (a level is met by a value at or above it; it clears below
    ``level x (1 - margin)``) or ``"drop"`` (met at or below it; clears above ``level x (1 + margin)``).
    ``off_delay_updates`` (default: the levels' ``off_delay_updates``) is the number of consecutive
    updates inside the clear level before a level clears.
    """

    def __init__(self, name: str, unit: str, levels: Levels, *, direction: str = "rise",
                 off_delay_updates: int | None = None):
        if direction not in ("rise", "drop"):
            raise ValueError(f"direction = {direction!r}: must be 'rise' or 'drop'")
        off = levels.off_delay_updates if off_delay_updates is None else off_delay_updates
        if off < 1:
            raise ValueError(f"off_delay_updates = {off}: must be at least 1")
        self.name = name
        self.unit = unit
        self.levels = levels
        self.direction = direction
        self.on_delay = levels.on_delay_updates
        self.off_delay = off
        self.margin = levels.clear_margin_pct / 100.0
        self.state = "normal"
        self.acknowledged = False
        self.held = False  # an alarm kept only by latching (the value no longer supports it)
        self._above = {"warning": 0, "alarm": 0}  # consecutive updates at or beyond each level
        self._below = {"warning": 0, "alarm": 0}  # consecutive updates inside each clear level
        self.last_value: float | None = None
        self.last_levels = EffectiveLevels(None, None)

    # ------------------------------------------------------------------------------------------ state
    def reset_counts(self) -> None:
        """Forget the consecutive counts (after a gap: a stop, a sensor fault, missing data)."""
        self._above = {"warning": 0, "alarm": 0}
        self._below = {"warning": 0, "alarm": 0}

    @property
    def latched(self) -> bool:
        return self.held

    @property
    def _drop(self) -> bool:
        return self.direction == "drop"

    def _clear_level(self, level: Level) -> float:
        return level.value * (1.0 + self.margin) if self._drop else level.value * (1.0 - self.margin)

    def _beyond(self, value: float, level: float) -> bool:
        """Is the value at or past ``level`` in this tracker's direction?"""
        return value <= level if self._drop else value >= level

    def _supported(self, value: float, eff: EffectiveLevels, current: str) -> str:
        """The state the value supports, given the current state (hysteresis, no delays)."""
        for kind in ("alarm", "warning"):
            lv = eff.for_kind(kind)
            if lv is None:
                continue
            if SEVERITY[current] >= SEVERITY[kind]:
                if self._beyond(value, self._clear_level(lv)):
                    return kind
            elif self._beyond(value, lv.value):
                return kind
        return "normal"

    # ----------------------------------------------------------------------------------------- update
    def update(self, value: float, eff: EffectiveLevels) -> Transition | None:
        """Take one value with the levels in force now; return the transition if the state changed."""
        self.last_value = value
        self.last_levels = eff
        for kind in ("warning", "alarm"):
            lv = eff.for_kind(kind)
            if lv is not None and self._beyond(value, lv.value):
                self._above[kind] += 1
            else:
                self._above[kind] = 0
            if lv is None or not self._beyond(value, self._clear_level(lv)):
                self._below[kind] += 1
            else:
                self._below[kind] = 0

        old = self.state
        # Raising: the most severe level whose on-delay has run out.
        for kind in ("alarm", "warning"):
            lv = eff.for_kind(kind)
            if lv is not None and SEVERITY[kind] > SEVERITY[self.state] and self._above[kind] >= self.on_delay:
                self.state = kind
                self.held = False
                self.acknowledged = False
                return self._raised(old, kind, value, lv)
        # Lowering: out of a level only inside its clear level, for the off-delay.
        if self.state == "normal":
            return None
        if self._below[self.state] < self.off_delay:
            self.held = False  # the value still supports the raised state
            return None
        target = self._supported(value, eff, self.state)
        if SEVERITY[target] >= SEVERITY[self.state]:
            return None
        if self.state == "alarm" and self.levels.latching and not self.acknowledged:
            self.held = True
            return None
        return self._lower(old, target, value, eff)

    def acknowledge(self) -> Transition | None:
        """Acknowledge a raised alarm. A held (latched) alarm whose value has cleared drops at once;
        an alarm still supported by the value stays, and clears by itself once acknowledged."""
        if self.state != "alarm":
            return None
        self.acknowledged = True
        if not self.held:
            return None
        self.held = False
        value = self.last_value if self.last_value is not None else float("nan")
        target = self._supported(value, self.last_levels, "alarm") if math.isfinite(value) else "normal"
        if SEVERITY[target] >= SEVERITY["alarm"]:
            return None
        old = self.state
        self.state = target
        self.reset_counts()
        return Transition(
            old, target, value, None, None,
            f"{self.name} latched alarm acknowledged; value now {fmt(value)} {self.unit}",
        )

    # --------------------------------------------------------------------------------------- messages
    def _raised(self, old: str, kind: str, value: float, lv: Level) -> Transition:
        delay = self._above[kind]
        where, what = ("below", f"drop {kind}") if self._drop else ("above", kind)
        reason = (
            f"{self.name} {fmt(value)} {self.unit} {where} {what} {fmt(lv.value)} {self.unit} "
            f"({lv.note}) for {delay} update{'s' if delay != 1 else ''}"
        )
        return Transition(old, kind, value, lv.value, kind, reason)

    def _lower(self, old: str, target: str, value: float, eff: EffectiveLevels) -> Transition:
        lv = eff.for_kind(old)
        self.state = target
        if target == "normal":
            self.acknowledged = False
        what = f"drop {old}" if self._drop else old
        if lv is None:
            reason = f"{self.name} {fmt(value)} {self.unit}: the {what} level no longer applies"
            return Transition(old, target, value, None, old, reason)
        clear = self._clear_level(lv)
        where, sign = ("above", "+") if self._drop else ("below", "-")
        delay = f" for {self.off_delay} updates" if self.off_delay > 1 else ""
        reason = (
            f"{self.name} {fmt(value)} {self.unit} {where} {what} clear level {fmt(clear)} {self.unit} "
            f"({what} {fmt(lv.value)} {self.unit} {sign} {self.margin * 100:g} %){delay}"
        )
        return Transition(old, target, value, lv.value, old, reason)
