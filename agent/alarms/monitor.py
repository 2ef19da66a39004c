"""The alarm logic of one machine: from per-point analysis results to point and machine states.

:class:`MachineMonitor` takes, at each update, the analysis result and the sensor health of every point
and returns a :class:`~rotorwatch.alarms.records.MachineUpdate`: the state of each value, point and the
machine, and an :class:`~rotorwatch.alarms.records.AlarmEvent` for every transition.

A point's state, the first that applies:

- ``no_data``: no result this update (no block, a block too short to analyse);
- ``sensor_fault``: the sensor checks failed. The point's values are suppressed: no alarm, no learning;
  a sensor fault never reads as normal and never raises a machine alarm;
- ``stopped``: the speed is below ``Speed.stopped_rpm``: no alarms, no learning. (While stopped, a
  signal at the noise floor is expected, so a ``disconnected`` verdict reads as stopped, with a note);
- otherwise the worst of its values: ``alarm`` > ``warning`` > ``learning`` > ``normal``, where a value
  reads ``learning`` until its baseline is learned (absolute levels already apply while learning).

The machine's state is the worst of its points in :data:`~rotorwatch.alarms.records.STATES` order
(``alarm``, ``warning``, ``sensor_fault``, ``no_data``, ``learning``, ``normal``, ``stopped``).
Not thread-safe: one owner calls :meth:`update` and :meth:`acknowledge`.
"""

from __future__ import annotations

import logging
import math
import statistics
import time
from dataclasses import dataclass
from pathlib import Path

from .baseline import OVERALL, BaselineStore
from .levels import EffectiveLevels, LevelTracker, Transition, effective_levels, fmt
from .records import STATES, AlarmEvent, MachineUpdate, PointUpdate, SensorHealth, ValueStatus
from ..analysis.result import PointResult
from ..errors import ConfigError
from ..settings.models import AlarmPolicy, Levels, Machine

log = logging.getLogger(__name__)

UNITS = {"velocity": "mm/s", "acceleration": "m/s^2", "envelope": "m/s^2"}
VALUE_RANK = {"normal": 0, "learning": 1, "warning": 2, "alarm": 3}
VALUE_DERIVED = ("alarm", "warning", "learning", "normal")
NAN = float("nan")


def worst(states: list[str]) -> str:
    """The most severe of point states, by :data:`STATES` order."""
    return min(states, key=STATES.index)


@dataclass
class _Slot:
    """One trended value of one point."""

    name: str
    unit: str
    levels: Levels
    tracker: LevelTracker
    shown: str  # last state shown outside suppression: learning | normal | warning | alarm
    value: float = NAN
    eff: EffectiveLevels = EffectiveLevels(None, None)


class MachineMonitor:
    """Alarm states of one machine's points and values, with baselines kept in ``state_dir``."""

    def __init__(
        self,
        machine: Machine,
        state_dir: str | Path | None,
        policy: AlarmPolicy | None = None,
        *,
        off_delay_updates: int = 1,
        checkpoint_s: float = 600.0,
    ):
        if any(b.name == OVERALL for b in machine.bands):
            raise ConfigError([f"machine {machine.id!r}: band name {OVERALL!r} is reserved for the overall velocity"])
        self.machine = machine
        self.baselines = BaselineStore(machine, state_dir, policy, checkpoint_s=checkpoint_s)
        self.stopped_rpm = machine.speed.stopped_rpm
        self.slots: dict[str, dict[str, _Slot]] = {}
        for p in machine.points:
            values = [(OVERALL, "mm/s", machine.overall.levels)]
            values += [(b.name, UNITS[b.quantity], b.levels) for b in machine.bands_for(p.id)]
            self.slots[p.id] = {
                name: _Slot(
                    name, unit, levels,
                    LevelTracker(name, unit, levels, off_delay_updates=off_delay_updates),
                    "normal" if self.baselines.is_learned(p.id, name) else "learning",
                )
                for name, unit, levels in values
            }
        self.point_states = {p.id: "no_data" for p in machine.points}
        self.point_reasons = {p.id: "no update yet" for p in machine.points}
        self.state = "no_data"
        self.reason = "no update yet"
        self.last_time_s: float | None = None

    # ----------------------------------------------------------------------------------------- update
    def update(
        self,
        time_s: float,
        results: dict[str, PointResult | None],
        health: dict[str, SensorHealth],
        rpm: float | None = None,
        rpm_source: str = "",
        notes: dict[str, str] | None = None,
    ) -> MachineUpdate:
        """One update: every point's result (None: no data) and sensor health -> states and events.

        ``rpm`` is the running speed; when None, the median speed of the results is used. ``notes``
        may say why a point has no result.
        """
        notes = notes or {}
        if rpm is None:
            speeds = [r.rpm for r in results.values() if r is not None and math.isfinite(r.rpm)]
            rpm = statistics.median(speeds) if speeds else None
            if not rpm_source:
                rpm_source = next((r.rpm_source for r in results.values() if r is not None), "")
        stopped = rpm is not None and rpm < self.stopped_rpm
        events: list[AlarmEvent] = []
        points: dict[str, PointUpdate] = {}
        for p in self.machine.points:
            pid = p.id
            result = results.get(pid)
            h = health.get(pid) or SensorHealth(ok=True)
            slots = self.slots[pid]
            if result is None and h.ok:
                state, reason = "no_data", notes.get(pid) or "no samples this update"
                values = self._suppress(pid, None, reason)
            elif not h.ok and not (stopped and h.fault == "disconnected"):
                state, reason = "sensor_fault", f"sensor {h.fault}: {h.reason}"
                values = self._suppress(pid, result, "sensor fault: alarms and learning suppressed")
            elif stopped:
                reason = f"machine stopped: {rpm:.0f} r/min is below {self.stopped_rpm:g} r/min"
                if not h.ok:
                    reason += f" (sensor reads at the noise floor: {h.reason})"
                state = "stopped"
                values = self._suppress(pid, result, "machine stopped: alarms and learning suppressed")
            else:
                assert result is not None
                values = {}
                for slot in slots.values():
                    status, event = self._evaluate(pid, slot, result, time_s)
                    values[slot.name] = status
                    if event is not None:
                        events.append(event)
                state, reason = self._point_state(pid)
            old = self.point_states[pid]
            if state != old:
                events.append(AlarmEvent(time_s, self.machine.id, pid, "point", old, state, None, "", None, None, reason))
            self.point_states[pid], self.point_reasons[pid] = state, reason
            points[pid] = PointUpdate(pid, state, reason, result, h, values)
        events.extend(self._machine_state(time_s))
        self.last_time_s = time_s
        self.baselines.checkpoint(time_s)
        for e in events:
            log.info(
                "state change machine=%s point=%s value=%s %s -> %s: %s",
                e.machine_id, e.point_id or "-", e.value_name, e.old_state, e.new_state, e.reason,
            )
        return MachineUpdate(self.machine.id, time_s, rpm, rpm_source, self.state, self.reason, points, events)

    def _suppress(self, pid: str, result: PointResult | None, reason: str) -> dict[str, ValueStatus]:
        out = {}
        for slot in self.slots[pid].values():
            slot.tracker.reset_counts()
            x = self._value_of(result, slot.name) if result is not None else NAN
            base = self.baselines.baseline(pid, slot.name)
            out[slot.name] = ValueStatus(
                slot.name, x, slot.unit, "suppressed",
                slot.eff.warning.value if slot.eff.warning else None,
                slot.eff.alarm.value if slot.eff.alarm else None,
                base.median if base else None, slot.tracker.latched, reason,
            )
        return out

    @staticmethod
    def _value_of(result: PointResult, name: str) -> float:
        x = result.overall_velocity_mm_s if name == OVERALL else result.bands.get(name, NAN)
        try:
            return float(x)
        except (TypeError, ValueError):
            return NAN

    def _evaluate(self, pid: str, slot: _Slot, result: PointResult, time_s: float) -> tuple[ValueStatus, AlarmEvent | None]:
        x = self._value_of(result, slot.name)
        if not math.isfinite(x):
            slot.tracker.reset_counts()
            base = self.baselines.baseline(pid, slot.name)
            return ValueStatus(
                slot.name, x, slot.unit, "suppressed", None, None, base.median if base else None,
                slot.tracker.latched, "value not available from the analysis",
            ), None
        self.baselines.add(pid, slot.name, x, time_s)
        base = self.baselines.baseline(pid, slot.name)
        eff = effective_levels(slot.levels, base)
        slot.value, slot.eff = x, eff
        tr = slot.tracker.update(x, eff)
        shown = self._shown(slot, base is not None)
        reason = self._describe(pid, slot, shown, x)
        event = None
        if shown != slot.shown:
            event = self._value_event(time_s, pid, slot, shown, x, tr, reason)
            slot.shown = shown
        status = ValueStatus(
            slot.name, x, slot.unit, shown,
            eff.warning.value if eff.warning else None, eff.alarm.value if eff.alarm else None,
            base.median if base else None, slot.tracker.latched, reason,
        )
        return status, event

    @staticmethod
    def _shown(slot: _Slot, learned: bool) -> str:
        if slot.tracker.state != "normal":
            return slot.tracker.state
        return "normal" if learned else "learning"

    def _describe(self, pid: str, slot: _Slot, shown: str, x: float) -> str:
        head = f"{slot.name} {fmt(x)} {slot.unit}"
        if shown in ("warning", "alarm"):
            lv = slot.eff.for_kind(shown)
            held = " (latched: acknowledge to clear)" if slot.tracker.latched else ""
            if lv is None:
                return f"{head}: {shown}{held}"
            return f"{head}: {shown} (level {fmt(lv.value)} {slot.unit}, {lv.note}){held}"
        if shown == "learning":
            n, hours = self.baselines.progress(pid, slot.name)
            pol = self.baselines.policy
            return (
                f"{head}: learning baseline ({n} of at least {pol.min_learning_updates} updates, "
                f"{hours:.1f} of {pol.learning_hours:g} h)"
            )
        lv = slot.eff.warning or slot.eff.alarm
        if lv is None:
            return f"{head}: normal (no levels set)"
        return f"{head}: normal (below {lv.kind} {fmt(lv.value)} {slot.unit})"

    def _value_event(
        self, time_s: float, pid: str, slot: _Slot, shown: str, x: float, tr: Transition | None, reason: str,
    ) -> AlarmEvent:
        if tr is not None:
            return AlarmEvent(
                time_s, self.machine.id, pid, slot.name, slot.shown, shown, x, slot.unit, tr.level, tr.level_kind, tr.reason,
            )
        if shown == "normal" and slot.shown == "learning":
            base = self.baselines.baseline(pid, slot.name)
            n, hours = self.baselines.progress(pid, slot.name)
            levels = ", ".join(
                f"{lv.kind} {fmt(lv.value)} {slot.unit}" for lv in (slot.eff.warning, slot.eff.alarm) if lv is not None
            ) or "no levels set"
            why = (
                f"{slot.name} baseline learned: median {fmt(base.median)} {slot.unit}, MAD {fmt(base.mad)} "
                f"from {n} updates over {hours:.1f} h; {levels}"
            ) if base else reason
            return AlarmEvent(time_s, self.machine.id, pid, slot.name, slot.shown, shown, x, slot.unit, None, None, why)
        return AlarmEvent(time_s, self.machine.id, pid, slot.name, slot.shown, shown, x, slot.unit, None, None, reason)

    # ---------------------------------------------------------------------------------- aggregation
    def _point_state(self, pid: str) -> tuple[str, str]:
        slots = list(self.slots[pid].values())
        top = max((s.shown for s in slots), key=VALUE_RANK.__getitem__)
        chosen = [s for s in slots if s.shown == top]
        if top in ("warning", "alarm"):
            return top, "; ".join(self._describe(pid, s, top, s.value) for s in chosen)
        if top == "learning":
            return top, self._describe(pid, chosen[0], "learning", chosen[0].value)
        return top, f"all {len(slots)} values below their levels"

    def _machine_state(self, time_s: float) -> list[AlarmEvent]:
        state = worst(list(self.point_states.values()))
        parts = [f"{pid}: {self.point_reasons[pid]}" for pid, s in self.point_states.items() if s == state]
        reason = "; ".join(parts)
        events = []
        if state != self.state:
            events.append(AlarmEvent(time_s, self.machine.id, None, "machine", self.state, state, None, "", None, None, reason))
        self.state, self.reason = state, reason
        return events

    # -------------------------------------------------------------------------------------- operator
    def acknowledge(self, point_id: str | None = None, value: str | None = None, time_s: float | None = None) -> list[AlarmEvent]:
        """Acknowledge alarms (all, one point's, or one value's). A latched alarm whose value has cleared
        drops now; the returned events include any point and machine transitions this causes.

        Raises ``KeyError`` with the unknown point id or value name."""
        if point_id is not None and point_id not in self.slots:
            raise KeyError(point_id)
        if value is not None and not any(
            value in slots for pid, slots in self.slots.items() if point_id is None or pid == point_id
        ):
            raise KeyError(value)
        t = time_s if time_s is not None else (self.last_time_s if self.last_time_s is not None else time.time())
        events = []
        for pid, slots in self.slots.items():
            if point_id is not None and pid != point_id:
                continue
            for slot in slots.values():
                if value is not None and slot.name != value:
                    continue
                tr = slot.tracker.acknowledge()
                if tr is None:
                    continue
                shown = self._shown(slot, self.baselines.is_learned(pid, slot.name))
                events.append(AlarmEvent(t, self.machine.id, pid, slot.name, slot.shown, shown, tr.value, slot.unit, None, None, tr.reason))
                slot.shown = shown
            if self.point_states[pid] in VALUE_DERIVED:
                state, reason = self._point_state(pid)
                if state != self.point_states[pid]:
                    events.append(AlarmEvent(t, self.machine.id, pid, "point", self.point_states[pid], state, None, "", None, None, reason))
                self.point_states[pid], self.point_reasons[pid] = state, reason
        events.extend(self._machine_state(t))
        for e in events:
            log.info("acknowledged machine=%s point=%s value=%s %s -> %s", e.machine_id, e.point_id or "-", e.value_name, e.old_state, e.new_state)
        return events

    def relearn(self, point_id: str | None = None, value: str | None = None) -> list[str]:
        """Forget baselines (all, a point's, or one value's) and learn them again from the next update."""
        return self.baselines.relearn(point_id, value)

    def close(self) -> None:
        """Save the baselines' learning progress."""
        self.baselines.save()
