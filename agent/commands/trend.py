"""``rotorwatch trend``: print stored trend values from a state directory.

Reads ``<state-dir>/trends.sqlite`` read-only (the daemon may keep writing). Filters combine:
``--machine``, ``--point`` (``-`` for machine-level values such as ``speed``), ``--value`` (a band name,
``overall``, ``rms_m_s2``, ``crest_factor``, ``kurtosis``, ``peak_m_s2`` or ``speed``), a time range
``--since ISO`` or ``--days N`` and ``--until ISO``, and ``--limit N`` (the newest N rows). Times are
UTC: input without an offset is read as UTC, output is ``YYYY-MM-DDTHH:MM:SSZ``. ``--series`` lists
what is stored instead of rows. ``--format csv`` writes a header and one row per value.
"""

from __future__ import annotations

import argparse
import csv
import sys
from datetime import UTC, datetime
from pathlib import Path

from ..errors import RotorwatchError
from ..settings.service import StorageSettings
from ..storage import TRENDS_FILE
from ..storage.trends import DAY_S, TrendRow, TrendStore


def add_parser(p: argparse.ArgumentParser) -> None:
    p.add_argument("--state-dir", metavar="D", default=StorageSettings().state_dir,
                   help="the daemon's storage.state_dir (default %(default)s)")
    p.add_argument("--machine", metavar="M", help="machine id")
    p.add_argument("--point", metavar="P", help="point id ('-' for machine-level values)")
    p.add_argument("--value", metavar="V", help="value name (band name, overall, speed, kurtosis, ...)")
    when = p.add_mutually_exclusive_group()
    when.add_argument("--since", metavar="ISO", help="from this UTC time (e.g. 2026-05-01 or 2026-05-01T06:00Z)")
    when.add_argument("--days", metavar="N", type=float, help="the last N days")
    p.add_argument("--until", metavar="ISO", help="up to this UTC time")
    p.add_argument("--limit", metavar="N", type=int, help="only the newest N rows")
    p.add_argument("--format", choices=("text", "csv"), default="text",
                   help="text: a table for people (default); csv: a header and one row per value")
    p.add_argument("--series", action="store_true", help="list the stored series instead of values")


def parse_time_utc(text: str, option: str) -> float:
    """POSIX seconds of an ISO 8601 time; naive times are UTC. One-line error otherwise."""
    raw = text.strip()
    try:
        dt = datetime.fromisoformat(raw[:-1] + "+00:00" if raw.endswith(("Z", "z")) else raw)
    except ValueError:
        raise RotorwatchError(f"{option} {text!r}: not an ISO 8601 time (e.g. 2026-05-01 or "
                              "2026-05-01T06:00:00Z)") from None
    if dt.tzinfo is None:
        dt = dt.replace(tzinfo=UTC)
    return dt.timestamp()


def format_time_utc(t_s: float | None) -> str:
    if t_s is None:
        return "-"
    return datetime.fromtimestamp(t_s, tz=UTC).strftime("%Y-%m-%dT%H:%M:%SZ")


def _value_text(v: float | None) -> str:
    return "-" if v is None else f"{v:.6g}"


def render_table(headers: list[str], rows: list[list[str]], right: set[int]) -> str:
    widths = [max(len(h), *(len(r[i]) for r in rows)) if rows else len(h) for i, h in enumerate(headers)]

    def line(cells: list[str]) -> str:
        return "  ".join(c.rjust(w) if i in right else c.ljust(w) for i, (c, w) in enumerate(zip(cells, widths))).rstrip()

    return "\n".join([line(headers), line(["-" * w for w in widths]), *(line(r) for r in rows)])


def run(args: argparse.Namespace) -> int:
    if args.days is not None and not args.days > 0:
        raise RotorwatchError(f"--days {args.days:g}: must be above 0")
    if args.limit is not None and args.limit < 1:
        raise RotorwatchError(f"--limit {args.limit}: must be at least 1")
    since_s = parse_time_utc(args.since, "--since") if args.since else None
    if args.days is not None:
        since_s = datetime.now(UTC).timestamp() - args.days * DAY_S
    until_s = parse_time_utc(args.until, "--until") if args.until else None
    point = "" if args.point == "-" else args.point
    with TrendStore(Path(args.state_dir) / TRENDS_FILE, read_only=True) as store:
        if args.series:
            return _print_series(store, args)
        rows = store.query(machine=args.machine, point=point, value=args.value, since_s=since_s,
                           until_s=until_s, limit=args.limit)
    if not rows:
        print("rotorwatch: no trend values match (see --series for what is stored)", file=sys.stderr)
        return 0
    _print_rows(rows, args.format)
    return 0


def _print_rows(rows: list[TrendRow], fmt: str) -> None:
    if fmt == "csv":
        w = csv.writer(sys.stdout, lineterminator="\n")
        w.writerow(["time_utc", "time_s", "machine", "point", "value_name", "value", "unit", "state"])
        for r in rows:
            w.writerow([format_time_utc(r.time_s), f"{r.time_s:.3f}", r.machine, r.point, r.name,
                        "" if r.value is None else repr(r.value), r.unit, r.state])
        return
    body = [[format_time_utc(r.time_s), r.machine, r.point or "-", r.name, _value_text(r.value), r.unit, r.state]
            for r in rows]
    print(render_table(["time (UTC)", "machine", "point", "value", "reading", "unit", "state"], body, right={4}))


def _print_series(store: TrendStore, args: argparse.Namespace) -> int:
    found = [s for s in store.series()
             if (args.machine is None or s.machine == args.machine)
             and (args.point is None or s.point == ("" if args.point == "-" else args.point))
             and (args.value is None or s.name == args.value)]
    if args.format == "csv":
        w = csv.writer(sys.stdout, lineterminator="\n")
        w.writerow(["machine", "point", "value_name", "unit", "rows", "first_utc", "last_utc"])
        for s in found:
            w.writerow([s.machine, s.point, s.name, s.unit, s.rows, format_time_utc(s.first_s), format_time_utc(s.last_s)])
        return 0
    body = [[s.machine, s.point or "-", s.name, s.unit, str(s.rows), format_time_utc(s.first_s), format_time_utc(s.last_s)]
            for s in found]
    print(render_table(["machine", "point", "value", "unit", "rows", "first (UTC)", "last (UTC)"], body, right={4}))
    return 0
