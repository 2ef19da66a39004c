"""What the alarm monitor keeps per trended value and per finding of a point (:mod:`.monitor`)."""

from __future__ import annotations

from collections import deque
from dataclasses import dataclass, field

from ..analysis.result import Finding
from ..settings.models import FindingRule, Levels
from .levels import SEVERITY, EffectiveLevels, LevelTracker
from .projection import Projection, TrendWindow

NAN = float("nan")


@dataclass
class Counts:
    """Raises and chatter of one value or finding."""

    raises: int = 0
    chatter: int = 0
    lowered_at: int | None = None  # the monitor's update number at the last lowering


@dataclass
class ValueSlot:
    """One trended value of one point."""

    name: str
    unit: str
    levels: Levels
    tracker: LevelTracker  # rises
    drop: LevelTracker | None  # drops, when drop levels are set
    shown: str  # last state shown outside suppression: learning | normal | warning | alarm
    value: float = NAN
    eff: EffectiveLevels = EffectiveLevels(None, None)
    drop_eff: EffectiveLevels = EffectiveLevels(None, None)
    counts: Counts = field(default_factory=Counts)
    window: TrendWindow | None = None  # the recent trend, for the time to its levels (projection.py)
    projection: Projection | None = None  # of the last update that judged the value

    @property
    def trackers(self) -> list[LevelTracker]:
        return [self.tracker] if self.drop is None else [self.tracker, self.drop]

    @property
    def top(self) -> LevelTracker:
        """The tracker in the more severe state (rises first on a tie)."""
        return max(self.trackers, key=lambda t: SEVERITY[t.state])

    @property
    def state(self) -> str:
        return self.top.state

    @property
    def latched(self) -> bool:
        return any(t.latched for t in self.trackers)

    def levels_of(self, tracker: LevelTracker) -> EffectiveLevels:
        return self.drop_eff if tracker is self.drop else self.eff


@dataclass
class FindingSlot:
    """One finding name on one point, when its rule lets it raise the point's state."""

    name: str
    rule: FindingRule
    history: deque = field(default_factory=deque)  # present or not, the last rule.window updates
    state: str = "normal"  # normal | warning | alarm
    absent_run: int = 0
    last: Finding | None = None  # the last update's finding of this name, when present
    last_seen: Finding | None = None  # the most recent finding of this name
    reason: str = ""
    counts: Counts = field(default_factory=Counts)
