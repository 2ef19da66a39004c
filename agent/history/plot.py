"""The replay's trend as a picture for a report: ``rotorwatch replay --history ... --plot FILE.png``.

One panel per chosen value, sharing the time axis (real dates): the value at each update (dots joined,
gaps in time left as they were), its effective warning and alarm levels as steps, the learning period
and the healthy part shaded, the updates in warning or alarm as coloured bands along the bottom, and
the first warning and first alarm marked with their dates. A log scale when the value spans more than
a factor of 20. The palette is the evidence plot's (:mod:`rotorwatch.storage.snapshot_plot`).
"""

from __future__ import annotations

import math
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from ..errors import InputError
from .margins import LevelLog, Margin, Reading

WARN = "#d98c1f"
ALARM = "#b3261e"
LEARN = "#b9b4a7"
HEALTHY = "#9fb8ad"


def _chosen(log: LevelLog, text: str | None, rows: list[Margin]) -> list[tuple[str, str]]:
    if text:
        out = []
        for part in text.split(","):
            pid, sep, name = part.strip().partition(":")
            if not sep or (pid, name) not in log.series:
                known = ", ".join(f"{p}:{n}" for p, n in log.series)
                raise InputError(f"--plot-values = {text!r}: {part.strip()!r} is not a replayed value (known: {known})")
            out.append((pid, name))
        return out
    raised = [(m.point, m.value) for m in rows if m.raised_s.get("warning") is not None]
    if raised:
        return raised[:6]
    first = log.machine.points[0].id
    return [(m.point, m.value) for m in rows if m.point == first][:6] or [k for k in log.series if k[0] == first][:4]


def _dates(log: LevelLog, ts: list[float]) -> list[datetime]:
    return [datetime.fromtimestamp(log.start_unix_s + t, tz=UTC) for t in ts]


def _state_bands(ax: Any, log: LevelLog, readings: list[Reading]) -> None:
    """Updates in warning or alarm as bands along the panel's foot, each as wide as its step."""
    import matplotlib.dates as mdates

    times = [r.t_s for r in readings]
    for i, r in enumerate(readings):
        if r.state not in ("warning", "alarm"):
            continue
        lo = times[i] - (times[i] - times[i - 1]) / 2 if i > 0 else times[i]
        hi = times[i] + (times[i + 1] - times[i]) / 2 if i + 1 < len(times) else times[i]
        a, b = (mdates.date2num(d) for d in _dates(log, [lo, hi]))
        ax.axvspan(a, b, ymin=0, ymax=0.05, color=WARN if r.state == "warning" else ALARM, lw=0, alpha=0.9)


def _firsts(ax: Any, log: LevelLog, margin: Margin) -> None:
    """A line and a dated note at the first warning and the first alarm (one note when they coincide)."""
    warn, alarm = margin.raised_s.get("warning"), margin.raised_s.get("alarm")
    marks = [("warning", warn, WARN), ("alarm", alarm, ALARM)]
    if warn is not None and warn == alarm:
        marks = [("warning and alarm", alarm, ALARM)]
    for k, (level, t, colour) in enumerate(marks):
        if t is None:
            continue
        d = _dates(log, [t])[0]
        ax.axvline(d, color=colour, lw=1, alpha=0.8, zorder=1)
        ax.annotate(f"first {level}\n{d:%Y-%m-%d %H:%M}", (d, 0.1), xycoords=("data", "axes fraction"),
                    xytext=(5, 26 * (len(marks) - 1 - k)), textcoords="offset points", fontsize=7, color=colour,
                    va="bottom", bbox={"boxstyle": "round,pad=0.2", "fc": "white", "ec": colour, "lw": 0.6, "alpha": 0.9})


def _panel(ax: Any, log: LevelLog, key: tuple[str, str], margin: Margin | None, healthy_until_s: float) -> None:
    from ..storage.snapshot_plot import INK, PANEL

    readings = [r for r in log.series[key] if math.isfinite(r.value)]
    ax.set_facecolor(PANEL)
    if not readings:
        ax.text(0.5, 0.5, "no value", transform=ax.transAxes, ha="center")
        return
    x = _dates(log, [r.t_s for r in readings])
    ax.plot(x, [r.value for r in readings], "o-", color=INK, ms=3, lw=1.2, label=f"{key[1]} on {key[0]}", zorder=3)
    for level, colour in (("warning", WARN), ("alarm", ALARM)):
        ys = [getattr(r, level) if getattr(r, level) is not None else math.nan for r in readings]
        if any(math.isfinite(y) for y in ys):
            ax.step(x, ys, where="post", color=colour, lw=1.2, ls="--", label=f"{level} level", zorder=2)
    learned = margin.learned_s if margin is not None else None
    if learned is not None:
        ax.axvspan(x[0], _dates(log, [learned])[0], color=LEARN, alpha=0.35, lw=0, label="learning", zorder=0)
    if healthy_until_s >= readings[0].t_s:
        start = learned if learned is not None else readings[0].t_s
        if healthy_until_s > start:
            a, b = _dates(log, [start, healthy_until_s])
            ax.axvspan(a, b, color=HEALTHY, alpha=0.18, lw=0, label="healthy part", zorder=0)
    _state_bands(ax, log, readings)
    values = [r.value for r in readings if r.value > 0]
    if values and max(values) / min(values) > 20:
        from matplotlib.ticker import FuncFormatter

        ax.set_yscale("log")
        plain = FuncFormatter(lambda v, _: f"{v:g}")
        ax.yaxis.set_major_formatter(plain)
        ax.yaxis.set_minor_formatter(FuncFormatter(lambda v, _: f"{v:g}" if f"{v:.0e}"[0] in "235" else ""))
    if margin is not None:
        _firsts(ax, log, margin)
    ax.set_ylabel(f"{key[1]} ({log.units.get(key, '')})", fontsize=8)
    ax.grid(True, color="#ddd8cc", lw=0.5)
    from matplotlib.patches import Patch

    handles, _ = ax.get_legend_handles_labels()
    handles += [Patch(color=WARN, label="in warning"), Patch(color=ALARM, label="in alarm")]
    ax.legend(handles=handles, fontsize=7, loc="upper left", bbox_to_anchor=(1.01, 1.0), borderaxespad=0)


def draw(log: LevelLog, path: str | Path, values: str | None, healthy_until_s: float, rows: list[Margin]) -> Path:
    """Write the trend picture of the chosen values (see the module docstring); returns its path."""
    from ..storage.snapshot_plot import PAPER, _pyplot

    plt = _pyplot()
    import matplotlib.dates as mdates

    keys = _chosen(log, values, rows)
    by_key = {(m.point, m.value): m for m in rows}
    fig, axes = plt.subplots(len(keys), 1, sharex=True, figsize=(11, 1.2 + 2.4 * len(keys)), squeeze=False)
    fig.patch.set_facecolor(PAPER)
    for ax, key in zip(axes[:, 0], keys):
        _panel(ax, log, key, by_key.get(key), healthy_until_s)
    axes[-1, 0].xaxis.set_major_formatter(mdates.ConciseDateFormatter(axes[-1, 0].xaxis.get_major_locator()))
    m = log.machine
    first, last = (datetime.fromtimestamp(log.start_unix_s + s.elapsed_s, tz=UTC) for s in (log.samples[0], log.samples[-1]))
    fig.suptitle(f"{m.id} ({m.name or 'unnamed'}): {len(log.samples)} updates, {first:%Y-%m-%d %H:%M} to "
                 f"{last:%Y-%m-%d %H:%M} UTC", fontsize=10, x=0.01, ha="left")
    fig.tight_layout(rect=(0, 0, 1, 0.97))
    out = Path(path)
    try:
        fig.savefig(out, dpi=110, facecolor=PAPER)
    except OSError as e:
        raise InputError(f"{out}: cannot write the plot: {e.strerror or e}") from None
    finally:
        plt.close(fig)
    return out
