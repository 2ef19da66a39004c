"""The replay timeline's time-to-level section: what each value's trend projected when it was first raised,
set against when its alarm actually came (:mod:`rotorwatch.alarms.projection`)."""

from __future__ import annotations

from collections.abc import Callable, Iterable

from .alarms.projection import DAY_S, Projection
from .alarms.records import AlarmEvent
from .settings.models import Machine


def first_alarms(events: Iterable[tuple[float, AlarmEvent]]) -> dict[tuple[str, str], float]:
    """(point, value) -> elapsed seconds of the value's first transition into alarm."""
    out: dict[tuple[str, str], float] = {}
    for t, e in events:
        if e.point_id is not None and e.new_state == "alarm" and e.old_state != "alarm":
            out.setdefault((e.point_id, e.value_name), t)
    return out


def projection_lines(machine: Machine, start_unix_s: float, first_raised: dict[tuple[str, str], tuple[float, Projection]],
                     events: list[tuple[float, AlarmEvent]], when: Callable[[float, float], str], max_lines: int) -> list[str]:
    """One line per value that was raised (``first_raised``: (point, value) -> (elapsed s, its projection
    then)): the alarm time its trend projected at its first warning (with the interval), and the alarm as
    it came (``events``: (elapsed s, event) of the replay)."""
    if not first_raised:
        return []
    pol = machine.alarms.projection
    lines = [f"Time to alarm projected at each value's first warning (Theil-Sen over the last {pol.window_hours:g} h, "
             f"{100 * pol.confidence:g} % interval)"]
    alarms = first_alarms(events)
    t0 = start_unix_s
    for (pid, name), (t, p) in sorted(first_raised.items(), key=lambda kv: kv[1][0])[:max_lines]:
        e = p.eta("alarm")
        if e is None:
            what = "no alarm level"
        elif e.status == "rising":
            lo, mid, hi = ((x - t0) / DAY_S for x in (e.earliest_s, e.time_s, e.latest_s))  # type: ignore[operator]
            what = f"alarm projected day {mid:6.2f} ({lo:.2f}-{hi:.2f})"
        elif e.status == "reached":
            what = "alarm level reached by the trend"
        else:
            what = f"alarm {e.status.replace('_', ' ')}" if p.status != "too_few" else f"too few updates ({p.points})"
        came = alarms.get((pid, name))
        actual = f"alarm came day {came / DAY_S:6.2f}" if came is not None else "no alarm"
        lines.append(f"  {when(t, t0)}  {pid:<6} {name:<16} {what}; {actual}")
    lines.append("")
    return lines
