"""When to take an evidence snapshot: on state transitions and once a day.

:class:`SnapshotPolicy` looks at each :class:`~rotorwatch.alarms.records.MachineUpdate` and answers
``(reason, detail)`` or ``None``:

- ``transition``: an event of the update moves a value, point or machine into one of
  ``on_transition_to`` (``warning``, ``alarm``, ``sensor_fault``);
- ``schedule``: the daily slot ``daily_at_utc`` has passed and no scheduled snapshot of the machine
  was taken since (see :class:`DailySchedule`).

The rule for transitions: **every transition is evidence, only a repeat is not.** A transition is
kept unless the same subject (the same value, point or machine) entered the same state within
``min_interval_s`` of the snapshot that already holds that entry. So an escalation (warning, then
alarm), a second value crossing its level or another point going wrong is always kept, however soon it
comes, while a value that flaps across a level stores one snapshot per interval (the disk quota bounds
the rest).

Clock steps: a repeat is judged on the distance between the two times (a clock stepped back by more
than ``min_interval_s`` takes the transition again rather than staying silent until it catches up),
and a daily snapshot whose time is later than now (the clock went back) does not hold the schedule.
A clock stepped forward past the slot's grace skips that day's snapshot, as a box that was off would.

Time is the update's own (``update.time_s``, the time of the data): the wall clock for live input, the
scenario's or the recording's clock for simulated or replayed input. A simulation sped up 8640 times
runs a month in five minutes; measured on the wall clock, ten minutes between snapshots would have
dropped everything after the first transition, and a day-long slot would never come.

The policy remembers what it answered (it assumes the caller saves the snapshot) and, when given the
store, starts from the newest snapshots on disk, so a restart neither repeats nor skips the day's one,
nor a flapping value's. Requests from an operator (``command``) need no policy: save with
``reason="command"``.
"""

from __future__ import annotations

import math
from datetime import UTC, datetime, timedelta
from typing import Any

from ..alarms.records import MachineUpdate

DAY_S = 86400.0


class DailySchedule:
    """A time of day in UTC (``HH:MM``) that is due once per day.

    ``due(now_s, last_s)`` is true when the most recent slot at or before ``now_s`` is later than
    ``last_s`` (the previous snapshot) and no more than ``grace_s`` ago: a box that was off at the
    slot takes it when it comes back within the grace, a box started in the afternoon waits for
    the next day rather than taking one at once.
    """

    def __init__(self, at_utc: str, grace_s: float = 6 * 3600.0) -> None:
        try:
            hh, mm = (int(x) for x in at_utc.split(":"))
            if not (0 <= hh <= 23 and 0 <= mm <= 59):
                raise ValueError
        except ValueError:
            raise ValueError(f"daily time {at_utc!r}: must be HH:MM (00:00 to 23:59, UTC)") from None
        self.at_utc = at_utc
        self.offset_s = hh * 3600 + mm * 60
        self.grace_s = float(grace_s)

    def slot_at_or_before(self, now_s: float) -> float:
        """POSIX time of the latest slot that is not after ``now_s``."""
        day = datetime.fromtimestamp(now_s, tz=UTC).replace(hour=0, minute=0, second=0, microsecond=0)
        slot = day.timestamp() + self.offset_s
        return slot if slot <= now_s else (day - timedelta(days=1)).timestamp() + self.offset_s

    def due(self, now_s: float, last_s: float | None) -> bool:
        """A ``last_s`` later than ``now_s`` (the clock was stepped back) does not hold the schedule
        until the clock catches up: the day's slot is taken as if there were no previous snapshot."""
        slot = self.slot_at_or_before(now_s)
        if now_s - slot > self.grace_s:
            return False
        return last_s is None or last_s < slot or last_s > now_s


class SnapshotPolicy:
    """Decide per update whether to snapshot (``settings``: a
    :class:`~rotorwatch.settings.storage.SnapshotSettings`; ``store``: a
    :class:`~rotorwatch.storage.snapshots.SnapshotStore` to resume from, optional)."""

    def __init__(self, settings: Any, store: Any = None) -> None:
        self.states = tuple(settings.on_transition_to)
        self.min_interval_s = float(settings.min_interval_s)
        self.schedule = DailySchedule(settings.daily_at_utc) if settings.daily_at_utc else None
        self.every_update = bool(getattr(settings, "every_update", False))
        self._store = store
        self._last: dict[tuple[str, str], float | None] = {}
        self._entries: dict[str, dict[tuple[str | None, str, str], float]] = {}  # machine -> entry -> time

    def _last_time(self, machine_id: str, reason: str) -> float | None:
        key = (machine_id, reason)
        if key not in self._last:
            self._last[key] = self._store.last_time(machine_id, reason) if self._store is not None else None
        return self._last[key]

    def _entries_of(self, machine_id: str) -> dict[tuple[str | None, str, str], float]:
        """(point, value, state) -> time of the newest transition snapshot holding that entry."""
        if machine_id not in self._entries:
            seen: dict[tuple[str | None, str, str], float] = {}
            if self._store is not None:
                for info in self._store.list(machine_id):
                    if info.reason != "transition":
                        continue
                    try:
                        events = self._store.load(info.id).get("events", [])
                    except Exception:  # noqa: BLE001 - a damaged sidecar only loses its memory
                        continue
                    for e in events:
                        if e.get("new_state") in self.states:
                            key = (e.get("point_id"), str(e.get("value_name")), str(e.get("new_state")))
                            seen[key] = max(seen.get(key, info.time_s), info.time_s)
            self._entries[machine_id] = seen
        return self._entries[machine_id]

    def decide(self, update: MachineUpdate, now_s: float | None = None) -> tuple[str, str] | None:
        """``(reason, detail)`` when a snapshot of this update should be saved, else None.

        ``now_s`` defaults to the update's own time (see the module docstring)."""
        now = float(update.time_s) if now_s is None else float(now_s)
        mid = update.machine_id
        entering = [e for e in update.events if e.new_state in self.states and e.new_state != e.old_state]
        if entering:
            seen = self._entries_of(mid)
            new = [e for e in entering
                   # abs(): a clock stepped back does not silence a subject until the clock catches up
                   if abs(now - seen.get((e.point_id, e.value_name, e.new_state), -math.inf)) >= self.min_interval_s]
            if new:
                for e in entering:
                    seen[(e.point_id, e.value_name, e.new_state)] = now
                self._last[(mid, "transition")] = now
                detail = "; ".join(
                    f"{e.point_id or 'machine'}/{e.value_name} {e.old_state}->{e.new_state}" for e in entering)
                return "transition", detail
        if self.every_update:
            self._last[(mid, "schedule")] = now
            return "schedule", "every update"
        if self.schedule is not None and self.schedule.due(now, self._last_time(mid, "schedule")):
            self._last[(mid, "schedule")] = now
            return "schedule", f"daily at {self.schedule.at_utc} UTC"
        return None
