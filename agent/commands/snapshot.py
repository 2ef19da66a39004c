"""``rotorwatch snapshot list|show ID|plot ID --out PNG``: look at evidence snapshots.

``list`` prints the snapshots in ``<state-dir>/snapshots`` oldest first (``--machine`` and ``--reason``
filter);
``show ID`` prints one snapshot's sidecar as a summary (``--format json``: the sidecar itself);
``plot ID --out PNG [--point P]`` draws the point's spectra with band regions and defect-frequency
markers (needs the ``plot`` extra: ``pip install 'rotorwatch[plot]'``). Times are UTC.
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

from ..settings.service import StorageSettings
from ..storage import SNAPSHOTS_DIR
from ..storage.snapshots import SnapshotStore


def add_parser(p: argparse.ArgumentParser) -> None:
    common = argparse.ArgumentParser(add_help=False)
    common.add_argument("--state-dir", metavar="D", default=StorageSettings().state_dir,
                        help="the daemon's storage.state_dir (default %(default)s)")
    sub = p.add_subparsers(dest="action", metavar="ACTION")
    sub.required = True
    ls = sub.add_parser("list", parents=[common], help="list snapshots, oldest first")
    ls.add_argument("--machine", metavar="M", help="only this machine")
    ls.add_argument("--reason", choices=("transition", "schedule", "command"), help="only snapshots taken for this reason")
    ls.add_argument("--format", choices=("text", "json"), default="text",
                    help="text: a table for people (default); json: one JSON document")
    show = sub.add_parser("show", parents=[common], help="summarise one snapshot")
    show.add_argument("id", metavar="ID")
    show.add_argument("--format", choices=("text", "json"), default="text",
                      help="text: a summary for people (default); json: the sidecar itself")
    plot = sub.add_parser("plot", parents=[common], help="plot one snapshot point to a PNG")
    plot.add_argument("id", metavar="ID")
    plot.add_argument("--out", metavar="PNG", required=True, help="output file")
    plot.add_argument("--point", metavar="P", help="point id (default: the first with spectra)")
    plot.add_argument("--all-bearings", action="store_true",
                      help="mark every bearing's defect frequencies, not only the point's own bearing's")


def _store(args: argparse.Namespace) -> SnapshotStore:
    return SnapshotStore(Path(args.state_dir) / SNAPSHOTS_DIR)


def run(args: argparse.Namespace) -> int:
    store = _store(args)
    if args.action == "list":
        return _list(store, args)
    if args.action == "show":
        return _show(store, args)
    from ..storage.snapshot_plot import plot_snapshot

    out = plot_snapshot(store, args.id, args.out, point_id=args.point, all_bearings=args.all_bearings)
    print(out)
    return 0


def _list(store: SnapshotStore, args: argparse.Namespace) -> int:
    infos = [i for i in store.list(args.machine) if args.reason is None or i.reason == args.reason]
    if args.format == "json":
        print(json.dumps([{"id": i.id, "machine": i.machine_id, "time_s": i.time_s, "reason": i.reason,
                           "detail": i.detail, "points": list(i.points), "size_bytes": i.size_bytes}
                          for i in infos], indent=1))
        return 0
    if not infos:
        print(f"rotorwatch: no snapshots in {store.root}", file=sys.stderr)
        return 0
    from .trend import format_time_utc, render_table

    rows = [[i.id, i.machine_id, format_time_utc(i.time_s), i.reason, ",".join(i.points),
             f"{i.size_bytes / 1024:.0f} KiB", i.detail] for i in infos]
    print(render_table(["id", "machine", "time (UTC)", "reason", "points", "size", "detail"], rows, right={5}))
    total = sum(i.size_bytes for i in infos)
    print(f"{len(infos)} snapshot{'s' if len(infos) != 1 else ''}, {total / 1024 / 1024:.1f} MiB")
    return 0


def _fmt(v: object) -> str:
    if v is None:
        return "-"
    if isinstance(v, float):
        return f"{v:.4g}"
    return str(v)


def _show(store: SnapshotStore, args: argparse.Namespace) -> int:
    doc = store.load(args.id)
    if args.format == "json":
        print(json.dumps(doc, indent=1))
        return 0
    speed = doc.get("speed") or {}
    lines = [
        f"snapshot   {doc['id']}",
        f"machine    {doc.get('machine')}   state {doc.get('machine_state')}"
        + (f" ({doc['machine_reason']})" if doc.get("machine_reason") else ""),
        f"time       {doc.get('time_utc')}",
        f"reason     {doc.get('reason')}" + (f": {doc['detail']}" if doc.get("detail") else ""),
        f"speed      {_fmt(speed.get('rpm'))} rpm ({speed.get('source')}), shaft {_fmt(speed.get('shaft_hz'))} Hz",
        f"config     {doc.get('config_hash') or '-'}",
    ]
    for ev in doc.get("events", []):
        lines.append(f"event      {ev.get('point_id') or 'machine'}/{ev.get('value_name')} "
                     f"{ev.get('old_state')} -> {ev.get('new_state')}: {ev.get('reason')}")
    for pid, e in doc.get("points", {}).items():
        lines.append("")
        lines.append(f"point {pid}: {e.get('state')}" + (f" ({e['reason']})" if e.get("reason") else "")
                     + (f", overall {_fmt(e.get('overall_velocity_mm_s'))} mm/s zone {e.get('iso_zone')}"
                        if e.get("overall_velocity_mm_s") is not None else ""))
        files = [f for f in (e.get("waveform_file"), e.get("spectra_file")) if f]
        lines.append(f"  files: {', '.join(files) or 'none'}")
        for name, v in e.get("values", {}).items():
            lines.append(f"  {name:<16} {_fmt(v.get('value')):>9} {v.get('unit', ''):<6} {v.get('state', ''):<10}"
                         f" warning {_fmt(v.get('warning_level'))}  alarm {_fmt(v.get('alarm_level'))}"
                         f"  baseline {_fmt(v.get('baseline'))}")
        for f in e.get("findings", []):
            if "measured_hz" in f:
                lines.append(f"  finding {f.get('name')} ({f.get('bearing')}) at {_fmt(f.get('measured_hz'))} Hz "
                             f"(expected {_fmt(f.get('expected_hz'))}), severity {_fmt(f.get('severity_m_s2'))} m/s^2, "
                             f"prominence {_fmt(f.get('prominence_db'))} dB, {f.get('harmonics_found')} harmonics")
            else:  # snapshots written before the findings' fields were renamed
                lines.append(f"  finding {f.get('name')} ({f.get('bearing')}) at {_fmt(f.get('found_hz'))} Hz, "
                             f"strength {_fmt(f.get('strength'))}, {f.get('harmonics_found')} harmonics")
    markers = [m for m in doc.get("markers", []) if m.get("harmonic", 1) == 1]
    if markers:
        lines.append("")
        lines.append("markers    " + ", ".join(f"{m['name']}{'/' + m['bearing'] if m.get('bearing') else ''} "
                                              f"{m['frequency_hz']:.2f} Hz" for m in markers))
    print("\n".join(lines))
    return 0
