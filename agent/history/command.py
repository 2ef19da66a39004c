"""``rotorwatch replay --history PATH``: the options, opening the history, and the report after it.

    rotorwatch replay --config config/university-rig.toml --history exports/ --time-pattern '%Y.%m.%d.%H.%M.%S'
    rotorwatch replay --config C --history rig.npz --learning-updates 6 --lead 2h --plot trend.png
    rotorwatch replay --config C --history description.toml --expect "outer-race on de reaches alarm before 2004-02-19 06:00"

The machine configuration (``--config``, with ``--set`` overrides as on ``rotorwatch run``) says which
point each channel feeds and at which rate the data must be (see :mod:`rotorwatch.history.feed`). After
the replay come the threshold margins (:mod:`.margins`) and, with ``--plot``, a picture (:mod:`.plot`).
"""

from __future__ import annotations

import argparse
from dataclasses import dataclass
from typing import IO, Any

from ..errors import InputError
from ..replay import ReplayLog
from .feed import HistoryFrames
from .margins import LevelLog, margin_record, margins, margins_table
from .readers import History, open_history
from .spec import spec_from_args
from .timestamps import parse_date, parse_duration


def add_arguments(p: argparse.ArgumentParser, sources: Any) -> None:
    sources.add_argument("--history", metavar="PATH",
                         help="a machine's history: a folder of recordings (WAV, .npz, delimited text), a zip or tar "
                              "of one, one .npz of snapshots, the daemon's snapshot folder, or a .toml description")
    h = p.add_argument_group("history (--history)")
    h.add_argument("--time-pattern", metavar="PATTERN",
                   help="the time in each file's name, strftime style, e.g. '%%Y.%%m.%%d.%%H.%%M.%%S' (default: a JSON "
                        "sidecar per file with time, or --start and --cadence)")
    h.add_argument("--cadence", metavar="DURATION", help="with --start: element k at start + k x cadence, e.g. '10 min'")
    h.add_argument("--delimiter", metavar="TEXT", help="text files: the column separator (default: white space)")
    h.add_argument("--header-lines", type=int, metavar="N", help="text files: lines to skip at the top")
    h.add_argument("--sample-rate", type=float, metavar="HZ", help="text files: the sample rate")
    h.add_argument("--columns", metavar="MAP", help="column or channel of each point, e.g. 'de-h=0,nde-h=2' (from 0)")
    h.add_argument("--data-rate", action="store_true",
                   help="analyze at the data's rate when it differs from acquisition.sample_rate_hz (default: refuse)")
    h.add_argument("--healthy-until", metavar="DATE",
                   help="margins: the end of the healthy part (default: the update before the first raise)")
    h.add_argument("--lead", default="24 h", metavar="DURATION",
                   help="margins: how long before the end a warning must come (default 24 h)")
    h.add_argument("--plot", metavar="FILE.png", help="draw the trend of values with their levels and states")
    h.add_argument("--plot-values", metavar="LIST",
                   help="values to draw, e.g. 'de:outer-race,de:overall' (default: those raised, else the first point's)")


@dataclass
class HistoryInput:
    history: History
    frames: HistoryFrames  # a replaypool.FrameSource
    fs_hz: float
    start_unix_s: float
    total: int
    source: str
    cadence: str


def open_input(args: argparse.Namespace, config: Any, machine: Any, start_given: bool) -> HistoryInput:
    """Open ``--history`` for ``machine``; decodes the first element to learn the rate."""
    args.start_given = start_given
    spec = spec_from_args(args)
    history = open_history(spec, machine, machine.analysis.window_s)
    try:
        rate_hz = config.acquisition.sample_rate_hz
        frames = HistoryFrames(history, rate_hz)
    except BaseException:
        history.close()
        raise
    times = [e.time_s for e in history.elements]
    gaps = [b - a for a, b in zip(times, times[1:])]
    cadence = (f"at their own times (median step {sorted(gaps)[len(gaps) // 2] / 3600:.3g} h, longest gap "
               f"{max(gaps) / 3600:.3g} h)") if gaps else "(one element)"
    fs = frames.fs_hz
    rate_note = "" if abs(fs - rate_hz) < 1e-6 * rate_hz else f" at the data's rate {fs:g} Hz (configured {rate_hz:g} Hz)"
    return HistoryInput(history, frames, fs, history.start_unix_s, len(history.elements),
                        f"history {history.source}{rate_note}", cadence)


def new_log(machine: Any, start_unix_s: float) -> LevelLog:
    return LevelLog(machine, start_unix_s)


def _healthy_until(args: argparse.Namespace, log: LevelLog) -> float | None:
    text = getattr(args, "healthy_until", None)
    return None if not text else parse_date(text, "--healthy-until") - log.start_unix_s


def report(args: argparse.Namespace, log: ReplayLog, out: IO[str], emit: Any) -> None:
    """Margins (text or jsonl records) and the plot, after a replay (of a history: a :class:`LevelLog`)."""
    if not isinstance(log, LevelLog):
        return
    lead_s = parse_duration(args.lead, "--lead") if args.lead else 0.0
    rows, until, how = margins(log, _healthy_until(args, log), lead_s)
    if args.format == "jsonl":
        for m in rows:
            emit(margin_record(log, m), out)
    else:
        out.write("\n" + margins_table(log, rows, until, how, lead_s) + "\n")
    if getattr(args, "plot", None):
        from .plot import draw

        path = draw(log, args.plot, getattr(args, "plot_values", None), until, rows)
        if args.format != "jsonl":
            out.write(f"\nplot written to {path}\n")


def check_options(args: argparse.Namespace) -> None:
    """History-only options given without --history are a mistake worth one line."""
    if getattr(args, "history", None):
        return
    given = [o for o, k in (("--time-pattern", "time_pattern"), ("--cadence", "cadence"), ("--columns", "columns"),
                            ("--sample-rate", "sample_rate"), ("--delimiter", "delimiter"))
             if getattr(args, k, None) is not None]
    if given:
        raise InputError(f"{given[0]}: applies to --history only")


# ------------------------------------------------------------------------------ analyze one element
def add_element_arguments(p: argparse.ArgumentParser) -> None:
    """``rotorwatch analyze HISTORY --at DATE``: the same reader, one element."""
    h = p.add_argument_group("one element of a history (FILE is then a history, as for replay --history)")
    h.add_argument("--at", metavar="DATE", help="analyze the history's element at (or nearest to) this date (needs --config)")
    h.add_argument("--time-pattern", metavar="PATTERN", help="the time in each file's name, strftime style")
    h.add_argument("--start", metavar="DATE", help="with --cadence: the first element's time")
    h.add_argument("--cadence", metavar="DURATION", help="with --start: element k at start + k x cadence")
    h.add_argument("--delimiter", metavar="TEXT", help="text files: the column separator (default: white space)")
    h.add_argument("--header-lines", type=int, metavar="N", help="text files: lines to skip at the top")
    h.add_argument("--sample-rate", type=float, metavar="HZ", help="text files: the sample rate")
    h.add_argument("--columns", metavar="MAP", help="column or channel of each point, e.g. 'de-h=0,nde-h=2'")


def element_samples(args: argparse.Namespace, machine: Any, point: Any) -> tuple[Any, float, str]:
    """The element of ``args.file`` (a history) nearest ``args.at``: (m/s^2 samples of ``point``, rate, name)."""
    import numpy as np

    ns = argparse.Namespace(**vars(args))
    ns.history, ns.start_given = args.file, args.start is not None
    spec = spec_from_args(ns)
    spec.data_rate = True  # analyze takes the element at its own rate
    history = open_history(spec, machine, None)
    try:
        at = parse_date(args.at, "--at")
        i = min(range(len(history.elements)), key=lambda k: abs(history.elements[k].time_s - at))
        element = history.elements[i]
        decoded = history.decode(i)
    finally:
        history.close()
    block = decoded.blocks_v.get(point.id)
    if block is None or decoded.fs_hz is None:
        raise InputError(f"{element.name}: holds no samples for point {point.id!r}")
    return np.asarray(block, dtype=float) / point.sensor.volts_per_m_s2, decoded.fs_hz, element.name
