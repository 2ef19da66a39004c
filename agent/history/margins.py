"""Threshold margins: how much room each value's levels had over a replay.

For each value with levels (a band or the overall velocity of a point):

- the **baseline** learned on the healthy machine, and when learning ended;
- the **healthy spread**: the highest value in the healthy part after learning, and its ratio to the
  baseline (how far normal variation reached; the learning updates themselves when nothing is left);
- the **first crossing** of each level: the first update at or above the effective level (the raise
  itself may come later, after the on-delay), and the first raise;
- the **warn range** for a lead time: the levels that would have been raised at least ``lead_s`` before
  the end of the replay without any crossing in the healthy part. Its floor is the healthy maximum; its
  top is the highest level that ``on_delay_updates`` consecutive updates reached, all of them after
  learning and no later than ``end - lead_s``. An empty range says: no level gives that warning
  without a false one.

The healthy part ends at ``healthy_until_s`` (``--healthy-until``), else just before the first update
with a value at or above its warning level or anything raised (the whole replay when nothing was).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

from ..alarms.records import MachineUpdate
from ..replay import ReplayLog, _clean, iso_date
from ..settings.models import Machine


@dataclass(frozen=True)
class Reading:
    t_s: float  # elapsed from the start
    value: float
    state: str
    warning: float | None
    alarm: float | None
    baseline: float | None


@dataclass
class LevelLog(ReplayLog):
    """A :class:`ReplayLog` that also keeps every value's reading and effective levels per update."""

    series: dict[tuple[str, str], list[Reading]] = field(default_factory=dict)
    units: dict[tuple[str, str], str] = field(default_factory=dict)
    first_raise_s: float | None = None  # the first update with a value at or above its warning level, or raised
    findings_seen: dict[tuple[str, str], float] = field(default_factory=dict)  # (point, name) -> first time

    def add(self, elapsed_s: float, update: MachineUpdate) -> None:
        super().add(elapsed_s, update)
        for pid, pu in update.points.items():
            for name, vs in pu.values.items():
                self.series.setdefault((pid, name), []).append(
                    Reading(elapsed_s, vs.value, vs.state, vs.warning_level, vs.alarm_level, vs.baseline))
                self.units[(pid, name)] = vs.unit
            for name, fs in pu.findings.items():
                if fs.present:
                    self.findings_seen.setdefault((pid, name), elapsed_s)
            if pu.result is not None:
                for f in pu.result.findings:
                    self.findings_seen.setdefault((pid, f.name), elapsed_s)
        crossed = any(v.state in ("warning", "alarm") or (v.warning_level is not None and v.value >= v.warning_level)
                      for pu in update.points.values() for v in pu.values.values())
        raised = any(f.state in ("warning", "alarm") for pu in update.points.values() for f in pu.findings.values())
        if (crossed or raised) and self.first_raise_s is None:
            self.first_raise_s = elapsed_s


@dataclass(frozen=True)
class Margin:
    point: str
    value: str
    unit: str
    baseline: float | None
    learned_s: float | None
    healthy_until_s: float
    healthy_max: float | None
    warning: float | None  # effective levels at the end
    alarm: float | None
    crossed_s: dict[str, float | None]  # level -> first update at or above it
    raised_s: dict[str, float | None]  # level -> first update in that state (after the on-delay)
    lead_s: float
    warn_range: tuple[float, float] | None

    @property
    def spread(self) -> float | None:
        if self.healthy_max is None or not self.baseline:
            return None
        return self.healthy_max / self.baseline


def _on_delay(machine: Machine, name: str) -> int:
    if name == "overall":
        return machine.overall.levels.on_delay_updates
    band = next((b for b in machine.bands if b.name == name), None)
    return band.levels.on_delay_updates if band is not None else 1


def _first(readings: list[Reading], test: Any) -> float | None:
    return next((r.t_s for r in readings if test(r)), None)


def _range_top(judged: list[Reading], until_s: float, k: int) -> float | None:
    """The highest level that ``k`` consecutive judged updates reached, ending no later than ``until_s``."""
    top = None
    for j in range(k - 1, len(judged)):
        if judged[j].t_s > until_s + 1e-9:
            break
        low = min(r.value for r in judged[j - k + 1:j + 1])
        top = low if top is None else max(top, low)
    return top


def margin_of(log: LevelLog, key: tuple[str, str], healthy_until_s: float, lead_s: float) -> Margin | None:
    readings = [r for r in log.series.get(key, []) if math.isfinite(r.value) and r.state != "suppressed"]
    if not readings or all(r.warning is None and r.alarm is None for r in readings):
        return None
    learned_s = _first(readings, lambda r: r.state != "learning" and r.baseline is not None)
    baseline = next((r.baseline for r in reversed(readings) if r.baseline is not None), None)
    judged = [r for r in readings if learned_s is not None and r.t_s >= learned_s]
    healthy = [r for r in judged if r.t_s <= healthy_until_s] or [r for r in readings if r.t_s <= healthy_until_s]
    hmax = max((r.value for r in healthy), default=None)
    crossed = {"warning": _first(readings, lambda r: r.warning is not None and r.value >= r.warning),
               "alarm": _first(readings, lambda r: r.alarm is not None and r.value >= r.alarm)}
    raised = {"warning": _first(readings, lambda r: r.state in ("warning", "alarm")),
              "alarm": _first(readings, lambda r: r.state == "alarm")}
    end_s = log.samples[-1].elapsed_s
    top = _range_top(judged, end_s - lead_s, _on_delay(log.machine, key[1]))
    warn_range = (hmax, top) if hmax is not None and top is not None and top > hmax else None
    last = readings[-1]
    return Margin(key[0], key[1], log.units.get(key, ""), baseline, learned_s, healthy_until_s, hmax,
                  last.warning, last.alarm, crossed, raised, lead_s, warn_range)


def margins(log: LevelLog, healthy_until_s: float | None, lead_s: float) -> tuple[list[Margin], float, str]:
    """Every value's margins, the healthy part's end (elapsed seconds) and how it was chosen."""
    if healthy_until_s is not None:
        until, how = healthy_until_s, "--healthy-until"
    elif log.first_raise_s is not None:
        before = [s.elapsed_s for s in log.samples if s.elapsed_s < log.first_raise_s]
        until, how = (before[-1] if before else -1.0), "the update before the first crossing"
    else:
        until, how = log.samples[-1].elapsed_s, "nothing was raised: the whole replay"
    keys = [(p.id, name) for p in log.machine.points for name in ["overall"] + [b.name for b in log.machine.bands_for(p.id)]]
    out = [m for m in (margin_of(log, k, until, lead_s) for k in keys) if m is not None]
    return out, until, how


def _g(x: float | None) -> str:
    return "-" if x is None or not math.isfinite(x) else f"{x:.3g}"


def _date(log: LevelLog, t_s: float | None) -> str:
    return "-" if t_s is None else iso_date(log.start_unix_s + t_s)[:16].replace("T", " ")


def margin_record(log: LevelLog, m: Margin) -> dict[str, Any]:
    """One value's margins as a JSON-ready dict (``type: margin``)."""
    def when(t: float | None) -> str | None:
        return None if t is None else iso_date(log.start_unix_s + t)

    ratio = [x / m.baseline for x in m.warn_range] if m.warn_range and m.baseline else None
    return _clean({
        "type": "margin", "machine": log.machine.id, "point": m.point, "value": m.value, "unit": m.unit,
        "baseline": m.baseline, "learned_at": when(m.learned_s), "healthy_until": when(m.healthy_until_s),
        "healthy_max": m.healthy_max, "healthy_spread": m.spread, "warning_level": m.warning, "alarm_level": m.alarm,
        "first_crossed": {k: when(v) for k, v in m.crossed_s.items()},
        "first_raised": {k: when(v) for k, v in m.raised_s.items()},
        "lead_s": m.lead_s, "warn_range": list(m.warn_range) if m.warn_range else None, "warn_range_ratio": ratio,
    })


def margins_table(log: LevelLog, rows: list[Margin], until_s: float, how: str, lead_s: float) -> str:
    """The margins for people: one line per value."""
    lines = [f"Threshold margins (healthy part until {_date(log, until_s)}: {how}; "
             f"warn range: levels raised at least {lead_s / 3600:g} h before the end, none in the healthy part)"]
    head = (f"  {'point':<6} {'value':<14} {'unit':<6} {'baseline':>9} {'healthy max':>17} {'warning':>8} "
            f"{'first crossed':>16} {'alarm':>8} {'first crossed':>16}  warn range")
    lines.append(head)
    for m in rows:
        spread = f"{_g(m.healthy_max)} (x{m.spread:.2f})" if m.spread is not None else _g(m.healthy_max)
        if m.warn_range:
            lo, hi = m.warn_range
            rng = f"{lo:.3g} - {hi:.3g}" + (f" (x{lo / m.baseline:.2f} - x{hi / m.baseline:.2f})" if m.baseline else "")
        else:
            rng = "none"
        lines.append(f"  {m.point:<6} {m.value:<14} {m.unit:<6} {_g(m.baseline):>9} {spread:>17} {_g(m.warning):>8} "
                     f"{_date(log, m.crossed_s['warning']):>16} {_g(m.alarm):>8} {_date(log, m.crossed_s['alarm']):>16}  {rng}")
    if not rows:
        lines.append("  no value has levels")
    return "\n".join(lines)
