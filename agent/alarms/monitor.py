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
- otherwise the worst of its values and of its persisting findings: ``alarm`` > ``warning`` >
  ``learning`` > ``normal``, where a value reads ``learning`` until its baseline is learned (absolute
  levels already apply while learning).

A value is followed upwards (rise levels) and, when drop levels are set, downwards too; its state is
the worse of the two. A finding with a rule in force (``AlarmPolicy.finding_rules``: the rules on by
default for the shaft, drive and electrical findings, and those named in ``AlarmPolicy.findings``, keyed by
the finding's name, e.g. ``BPFO``) raises the point once it has been reported in ``present_updates`` of
the last ``window_updates`` updates (with a ``min_zone``, only at that severity), with the finding as the
reason (its sentence), and clears after ``absent_updates`` updates in a row without it. Findings without a
rule are reported by the analysis and raise nothing.

Chatter, per value and per finding: every raise (to warning, or to alarm) is counted, and a raise that
comes within ``AlarmPolicy.chatter_window_updates`` updates of the last lowering counts one chatter.
A chattering alarm is one that "repeatedly transitions between the alarm state and the normal state in
a short period of time" (ANSI/ISA-18.2-2016 definitions, from memory); the window in updates is our
own measure of "short".

The machine's state is the worst of its points in :data:`~rotorwatch.alarms.records.STATES` order
(``alarm``, ``warning``, ``sensor_fault``, ``no_data``, ``learning``, ``normal``, ``stopped``).
Not thread-safe: one owner calls :meth:`update` and :meth:`acknowledge`.
"""

from __future__ import annotations

import logging
import math
import time
from collections import deque
from pathlib import Path

from ..analysis import severity
from ..analysis.result import Finding, PointResult
from ..analysis.running_speed import machine_speed
from ..errors import ConfigError
from ..settings.models import AlarmPolicy, FindingRule, Machine
from ..settings.quantities import OVERALL_QUANTITY, quantity
from .baseline import OVERALL, BaselineStore
from .levels import LevelTracker, Transition, effective_drop_levels, effective_levels, fmt
from .projection import TrendWindow, project
from .records import STATES, AlarmEvent, FindingStatus, MachineUpdate, PointUpdate, SensorHealth, ValueStatus
from .slots import Counts, FindingSlot, ValueSlot

log = logging.getLogger(__name__)

VALUE_RANK = {"normal": 0, "learning": 1, "warning": 2, "alarm": 3}
VALUE_DERIVED = ("alarm", "warning", "learning", "normal")
NAN = float("nan")


def worst(states: list[str]) -> str:
    """The most severe of point states, by :data:`STATES` order."""
    return min(states, key=STATES.index)


FINDING_PREFIX = "finding:"


class MachineMonitor:
    """Alarm states of one machine's points and values, with baselines kept in ``state_dir``."""

    def __init__(
        self,
        machine: Machine,
        state_dir: str | Path | None,
        policy: AlarmPolicy | None = None,
        *,
        off_delay_updates: int | None = None,
        checkpoint_s: float = 3600.0,
    ):
        """``policy`` replaces the machine's baseline learning settings (learning period and updates);
        chatter counting and finding rules always come from ``machine.alarms``. ``off_delay_updates``
        replaces every value's configured ``off_delay_updates`` when given."""
        if any(b.name == OVERALL for b in machine.bands):
            raise ConfigError([f"machine {machine.id!r}: band name {OVERALL!r} is reserved for the overall velocity"])
        self.machine = machine
        self.baselines = BaselineStore(machine, state_dir, policy, checkpoint_s=checkpoint_s)
        self.stopped_rpm = machine.speed.stopped_rpm
        self.chatter_window = machine.alarms.chatter_window_updates
        try:
            self.zone_limits_mm_s: tuple[float, float, float] | None = severity.boundaries(machine.iso_group, machine.support)
        except ValueError:
            self.zone_limits_mm_s = None
        self.n_updates = 0
        self.slots: dict[str, dict[str, ValueSlot]] = {}
        self.finding_slots: dict[str, dict[str, FindingSlot]] = {}
        for p in machine.points:
            values = [(OVERALL, OVERALL_QUANTITY.unit, machine.overall.levels)]
            values += [(b.name, quantity(b.quantity).unit, b.levels) for b in machine.bands_for(p.id)]
            self.slots[p.id] = {
                name: ValueSlot(
                    name, unit, levels,
                    LevelTracker(name, unit, levels, off_delay_updates=off_delay_updates),
                    LevelTracker(name, unit, levels, direction="drop", off_delay_updates=off_delay_updates)
                    if levels.has_drops else None,
                    "normal" if self.baselines.is_learned(p.id, name) else "learning",
                )
                for name, unit, levels in values
            }
            self.finding_slots[p.id] = {
                name: FindingSlot(name, rule, deque(maxlen=rule.window))
                for name, rule in machine.alarms.finding_rules.items()
            }
        self.projection = machine.alarms.projection
        if self.projection.enabled:
            for slots in self.slots.values():
                for slot in slots.values():
                    slot.window = TrendWindow(self.projection)
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
        self.n_updates += 1
        rpm, rpm_source = machine_speed(rpm, rpm_source, ((r.rpm, r.rpm_source) for r in results.values() if r is not None))
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
                found = self._suppress_findings(pid, reason)
            elif not h.ok and not (stopped and h.fault == "disconnected"):
                state, reason = "sensor_fault", f"sensor {h.fault}: {h.reason}"
                values = self._suppress(pid, result, "sensor fault: alarms and learning suppressed")
                found = self._suppress_findings(pid, "sensor fault: findings not trusted")
            elif stopped:
                reason = f"machine stopped: {rpm:.0f} r/min is below {self.stopped_rpm:g} r/min"
                if not h.ok:
                    reason += f" (sensor reads at the noise floor: {h.reason})"
                state = "stopped"
                values = self._suppress(pid, result, "machine stopped: alarms and learning suppressed")
                found = self._suppress_findings(pid, "machine stopped")
            else:
                assert result is not None
                values = {}
                for slot in slots.values():
                    status, event = self._evaluate(pid, slot, result, time_s)
                    values[slot.name] = status
                    if event is not None:
                        events.append(event)
                found = {}
                for fs in self.finding_slots[pid].values():
                    fstatus, event = self._evaluate_finding(pid, fs, result, time_s)
                    found[fs.name] = fstatus
                    if event is not None:
                        events.append(event)
                state, reason = self._point_state(pid)
            old = self.point_states[pid]
            if state != old:
                events.append(AlarmEvent(time_s, self.machine.id, pid, "point", old, state, None, "", None, None, reason))
            self.point_states[pid], self.point_reasons[pid] = state, reason
            points[pid] = PointUpdate(pid, state, reason, result, h, values, found)
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
            for t in slot.trackers:
                t.reset_counts()
            x = self._value_of(result, slot.name) if result is not None else NAN
            base = self.baselines.baseline(pid, slot.name)
            out[slot.name] = self._status(slot, x, "suppressed", base.median if base else None, reason)
        return out

    @staticmethod
    def _status(slot: ValueSlot, x: float, state: str, baseline: float | None, reason: str) -> ValueStatus:
        eff, drop = slot.eff, slot.drop_eff
        return ValueStatus(
            slot.name, x, slot.unit, state,
            eff.warning.value if eff.warning else None, eff.alarm.value if eff.alarm else None,
            baseline, slot.latched, reason,
            drop.warning.value if drop.warning else None, drop.alarm.value if drop.alarm else None,
            slot.counts.raises, slot.counts.chatter,
            slot.projection if state != "suppressed" else None,
        )

    def _suppress_findings(self, pid: str, reason: str) -> dict[str, FindingStatus]:
        out = {}
        for fs in self.finding_slots[pid].values():
            fs.history.clear()
            fs.absent_run = 0
            fs.last = None
            out[fs.name] = self._finding_status(fs, "suppressed", reason)
        return out

    def _count(self, counts: Counts, old: str, new: str) -> None:
        """Count a raise (and a chatter, when soon after the last lowering) or note a lowering."""
        rank = {"learning": 0, "normal": 0, "warning": 1, "alarm": 2}
        if rank[new] > rank[old]:
            counts.raises += 1
            if counts.lowered_at is not None and self.n_updates - counts.lowered_at <= self.chatter_window:
                counts.chatter += 1
        elif rank[new] < rank[old]:
            counts.lowered_at = self.n_updates

    @staticmethod
    def _value_of(result: PointResult, name: str) -> float:
        x = result.overall_velocity_mm_s if name == OVERALL else result.bands.get(name, NAN)
        try:
            return float(x)
        except (TypeError, ValueError):
            return NAN

    def _evaluate(self, pid: str, slot: ValueSlot, result: PointResult, time_s: float) -> tuple[ValueStatus, AlarmEvent | None]:
        x = self._value_of(result, slot.name)
        if not math.isfinite(x):
            for t in slot.trackers:
                t.reset_counts()
            base = self.baselines.baseline(pid, slot.name)
            return ValueStatus(
                slot.name, x, slot.unit, "suppressed", None, None, base.median if base else None,
                slot.latched, "value not available from the analysis",
                raises=slot.counts.raises, chatter=slot.counts.chatter,
            ), None
        self.baselines.add(pid, slot.name, x, time_s)
        base = self.baselines.baseline(pid, slot.name)
        zones = self.zone_limits_mm_s if slot.name == OVERALL else None
        slot.value = x
        slot.eff = effective_levels(slot.levels, base, zones)
        transitions = [slot.tracker.update(x, slot.eff)]
        if slot.drop is not None:
            slot.drop_eff = effective_drop_levels(slot.levels, base, zones)
            transitions.append(slot.drop.update(x, slot.drop_eff))
        slot.projection = self._project(slot, x, time_s)
        shown = self._shown(slot, base is not None)
        reason = self._describe(pid, slot, shown, x)
        event = None
        if shown != slot.shown:
            # the transition that explains the change: into the new state, or out of the old one
            tr = next((t for t in transitions if t is not None and t.new_state == shown), None) or next(
                (t for t in transitions if t is not None and t.old_state == slot.shown), None)
            event = self._value_event(time_s, pid, slot, shown, x, tr, reason)
            self._count(slot.counts, slot.shown, shown)
            slot.shown = shown
        return self._status(slot, x, shown, base.median if base else None, reason), event

    def _project(self, slot: ValueSlot, x: float, time_s: float):
        """The value's trend window updated and projected to its levels now (None without levels)."""
        if slot.window is None:
            return None
        slot.window.add(time_s, x)
        levels = {"warning": slot.eff.warning.value if slot.eff.warning else None,
                  "alarm": slot.eff.alarm.value if slot.eff.alarm else None}
        if levels["warning"] is None and levels["alarm"] is None:
            return None
        return project(slot.window, self.projection, time_s, levels)

    def seed_trend(self, point_id: str, name: str, samples: list[tuple[float, float]]) -> int:
        """Fill a value's trend window from stored (time, value) rows, oldest first (the daemon's trend
        store at start, so a restart does not forget the trend); returns how many were taken."""
        slot = self.slots.get(point_id, {}).get(name)
        if slot is None or slot.window is None:
            return 0
        before = len(slot.window.samples)
        for t, v in samples:
            slot.window.add(t, v)
        return len(slot.window.samples) - before

    @staticmethod
    def _shown(slot: ValueSlot, learned: bool) -> str:
        if slot.state != "normal":
            return slot.state
        return "normal" if learned else "learning"

    def _describe(self, pid: str, slot: ValueSlot, shown: str, x: float) -> str:
        head = f"{slot.name} {fmt(x)} {slot.unit}"
        if shown in ("warning", "alarm"):
            top = slot.top
            lv = slot.levels_of(top).for_kind(shown)
            held = " (latched: acknowledge to clear)" if slot.latched else ""
            what = "drop level" if top is slot.drop else "level"
            if lv is None:
                return f"{head}: {shown}{held}"
            return f"{head}: {shown} ({what} {fmt(lv.value)} {slot.unit}, {lv.note}){held}"
        if shown == "learning":
            n, hours = self.baselines.progress(pid, slot.name)
            pol = self.baselines.policy
            return (
                f"{head}: learning baseline ({n} of at least {pol.min_learning_updates} updates, "
                f"{hours:.1f} of {pol.learning_hours:g} h)"
            )
        lv = slot.eff.warning or slot.eff.alarm
        dv = slot.drop_eff.warning or slot.drop_eff.alarm
        parts = []
        if lv is not None:
            parts.append(f"below {lv.kind} {fmt(lv.value)} {slot.unit}")
        if dv is not None:
            parts.append(f"above drop {dv.kind} {fmt(dv.value)} {slot.unit}")
        if not parts:
            return f"{head}: normal (no levels set)"
        return f"{head}: normal ({', '.join(parts)})"

    # --------------------------------------------------------------------------------------- findings
    def _severe_enough(self, f: Finding, rule: FindingRule) -> bool:
        """A rule with ``min_zone`` counts a finding only when its severity reaches that zone."""
        if rule.min_zone is None:
            return True
        b = severity.boundaries(self.machine.iso_group, self.machine.support)
        return bool(f.severity_mm_s >= b["BCD".index(rule.min_zone)])

    @staticmethod
    def _finding_text(f: Finding) -> str:
        if f.kind != "bearing":
            return (f"{f.sentence} (severity {f.severity_mm_s:.2f} mm/s, confidence {f.confidence or '-'}, "
                    f"{f.prominence_db:.1f} dB over the local floor)")
        series = f" ({f.series})" if f.series and f.series != f.name else ""
        return (
            f"{f.name}{series} of bearing {f.bearing} at {f.measured_hz:.1f} Hz (expected {f.expected_hz:.1f} Hz), "
            f"severity {f.severity_m_s2:.3g} m/s^2, {f.prominence_db:.1f} dB over the local floor, "
            f"{f.harmonics_found} harmonic{'s' if f.harmonics_found != 1 else ''}"
        )

    def _finding_status(self, fs: FindingSlot, state: str, reason: str) -> FindingStatus:
        f = fs.last
        return FindingStatus(
            fs.name, state, f is not None, sum(fs.history), fs.rule.window,
            float(f.strength) if f is not None else None,
            f.bearing if f is not None else (fs.last_seen.bearing if fs.last_seen is not None else None),
            reason, fs.counts.raises, fs.counts.chatter,
        )

    def _evaluate_finding(self, pid: str, fs: FindingSlot, result: PointResult,
                          time_s: float) -> tuple[FindingStatus, AlarmEvent | None]:
        same = [f for f in result.findings if f.name == fs.name and self._severe_enough(f, fs.rule)]
        f = max(same, key=lambda x: x.strength) if same else None
        fs.last = f
        if f is not None:
            fs.last_seen = f
        fs.history.append(f is not None)
        fs.absent_run = 0 if f is not None else fs.absent_run + 1
        seen, rule = sum(fs.history), fs.rule
        old = fs.state
        if fs.state == "normal" and seen >= rule.present_updates:
            fs.state = rule.raises
        elif fs.state != "normal" and fs.absent_run >= rule.absent:
            fs.state = "normal"
        label = f"{FINDING_PREFIX}{fs.name}"
        if fs.state != "normal":
            if f is not None:
                fs.reason = f"{label} {self._finding_text(f)}, in {seen} of the last {len(fs.history)} updates"
            else:
                fs.reason = (
                    f"{label} not in this update ({fs.absent_run} in a row; clears after {rule.absent}), "
                    f"last: {self._finding_text(fs.last_seen) if fs.last_seen is not None else '-'}"
                )
        elif old != "normal":
            fs.reason = f"{label} not reported for {fs.absent_run} updates in a row: cleared"
        else:
            fs.reason = (f"{label} in {seen} of the last {len(fs.history)} updates "
                         f"(raises {rule.raises} at {rule.present_updates} of {rule.window})")
        event = None
        if fs.state != old:
            self._count(fs.counts, old, fs.state)
            event = AlarmEvent(
                time_s, self.machine.id, pid, label, old, fs.state,
                float(f.strength) if f is not None else None, "", None,
                fs.state if fs.state != "normal" else old, fs.reason,
            )
        return self._finding_status(fs, fs.state, fs.reason), event

    def _value_event(
        self, time_s: float, pid: str, slot: ValueSlot, shown: str, x: float, tr: Transition | None, reason: str,
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
        findings = list(self.finding_slots[pid].values())
        top = max([s.shown for s in slots] + [f.state for f in findings], key=VALUE_RANK.__getitem__)
        chosen = [s for s in slots if s.shown == top]
        if top in ("warning", "alarm"):
            parts = [self._describe(pid, s, top, s.value) for s in chosen]
            parts += [f.reason for f in findings if f.state == top]
            return top, "; ".join(parts)
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
                trs = [tr for tr in (tk.acknowledge() for tk in slot.trackers) if tr is not None]
                if not trs:
                    continue
                shown = self._shown(slot, self.baselines.is_learned(pid, slot.name))
                events.append(AlarmEvent(t, self.machine.id, pid, slot.name, slot.shown, shown, trs[0].value, slot.unit, None, None, trs[0].reason))
                self._count(slot.counts, slot.shown, shown)
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
