"""``rotorwatch replay``: a scenario or a recording through the alarm logic, with a timeline and checks.

    rotorwatch replay --scenario config/scenarios/demo-outer-race.toml
    rotorwatch replay --config config/university-rig.toml --input rec.npz --learning-updates 5
    rotorwatch replay --scenario S --expect "machine never alarm" --format jsonl
    rotorwatch replay --config config/university-rig.toml --history exports/ --time-pattern '%Y.%m.%d.%H.%M.%S'
    rotorwatch replay --config C --history rig.npz --learning-updates 6 --lead 2h --plot trend.png
    rotorwatch replay --config C --history site.toml --expect "outer-race on de reaches alarm before 2004-02-19 06:00"
    rotorwatch replay --config C --history snapshots/ --set machines.rig.bands.outer-race.levels.relative_alarm=4

With only ``--scenario`` the machine configuration is the one the scenario names; ``--config`` replaces
it (same machine id). Expectations come from the scenario's ``expect`` list and every ``--expect``; the
command exits 1 when one fails. Baselines go to a fresh temporary directory unless ``--state-dir`` is
given, so a replay never mixes with a live daemon's baselines. ``--history`` replays a machine's recorded
life (a folder or archive of timestamped recordings, one ``.npz`` of snapshots, the daemon's snapshot
folder) at its own dates, then prints the threshold margins (:mod:`rotorwatch.history.command`).
Updates are drawn or decoded and analyzed in ``--workers`` processes and judged in order: the result is
the same for any number (:mod:`rotorwatch.replaypool`).
"""

from __future__ import annotations

import argparse
import dataclasses
import json
import os
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

from ..errors import ConfigError, ExpectationFailed, InputError
from ..expectations import evaluate, parse
from ..heap import hold_freed_memory
from ..history import command as history_cmd
from ..history.timestamps import parse_date
from ..replay import (
    UNITS,
    ReplayLog,
    ScenarioFrames,
    event_record,
    iso_date,
    open_recording,
    recording_frames,
    timeline,
    update_record,
)
from ..settings.models import AlarmPolicy

DEFAULT_START = "2025-01-01T00:00:00Z"


def default_workers() -> int:
    """The CPUs this process may run on (the default number of replay workers)."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):
        return max(1, os.cpu_count() or 1)


def add_parser(p: argparse.ArgumentParser) -> None:
    p.formatter_class = argparse.RawDescriptionHelpFormatter  # the examples below, line by line
    p.epilog = "examples:\n" + "\n".join(line for line in (__doc__ or "").splitlines() if line.startswith("    rotorwatch "))
    src = p.add_mutually_exclusive_group(required=True)
    src.add_argument("--scenario", metavar="FILE", help="scenario TOML file (config/scenarios/...)")
    src.add_argument("--input", metavar="FILE", help="recording to replay: .wav or .npz (needs --config)")
    p.add_argument("--config", metavar="FILE", help="machine configuration (default with --scenario: the scenario's)")
    p.add_argument("--set", action="append", default=[], metavar="KEY=VALUE", dest="overrides",
                   help="override a value of --config as 'run --set' does, e.g. to try other levels (repeatable)")
    p.add_argument("--machine", metavar="ID", help="machine id, when the configuration has several")
    p.add_argument("--unit", choices=UNITS, default=None,
                   help="what the recording's samples are, when the file does not say (integer WAV: volts, "
                        "full scale = input_range_v)")
    p.add_argument("--rpm", type=float, metavar="R/MIN", help="recording: the speed, as a tach or drive would report it")
    p.add_argument("--expect", action="append", default=[], metavar="TEXT",
                   help='an expectation, e.g. "de-outer-race on de-h reaches alarm between day 10 and day 20" (repeatable)')
    p.add_argument("--format", choices=("text", "jsonl"), default="text",
                   help="text: a timeline for people (default); jsonl: one JSON object per line, every update and event")
    p.add_argument("--state-dir", metavar="DIR", help="where baselines go (default: a fresh temporary directory)")
    p.add_argument("--start", default=DEFAULT_START, metavar="DATE",
                   help=f"date and time (UTC) the replay starts at, ISO 8601 (default {DEFAULT_START})")
    p.add_argument("--workers", type=int, default=default_workers(), metavar="N",
                   help="scenario, history: processes that draw or decode the updates and analyze them, judged in "
                        "order here; the results are the same for any N (default: the CPUs, %(default)s here; 1: none)")
    p.add_argument("--learning-updates", type=int, metavar="N",
                   help="learn baselines from the first N updates instead of the configured learning period")
    history_cmd.add_arguments(p, src)


def _pick_machine(config, machine_id: str | None, source: str):
    ids = [m.id for m in config.machines]
    if machine_id is None:
        if len(ids) > 1:
            raise ConfigError([f"{source}: has {len(ids)} machines; choose one with --machine: {', '.join(ids)}"])
        return config.machines[0]
    if machine_id not in ids:
        raise ConfigError([f"{source}: --machine = {machine_id!r}: unknown machine, known: {', '.join(ids)}"])
    return config.machine(machine_id)


def _open_scenario(args):
    from rotorwatch.simulators.render import ScenarioRenderer
    from rotorwatch.simulators.scenario import cross_check, load_scenario

    from ..settings.loading import load_config

    scenario = load_scenario(args.scenario)
    if args.config:
        config = load_config(args.config, args.overrides)
        machine = _pick_machine(config, args.machine or scenario.machine.id, args.config)
        problems = cross_check(scenario.spec, machine, config, str(scenario.path))
        if problems:
            raise ConfigError(problems)
        scenario = dataclasses.replace(scenario, config=config, config_path=Path(args.config), machine=machine)
    elif args.machine and args.machine != scenario.machine.id:
        raise ConfigError([f"{args.scenario}: --machine = {args.machine!r}: the scenario replays machine {scenario.machine.id!r}"])
    return scenario, ScenarioRenderer(scenario)


def _expectations(args, machine, scenario, start_unix_s: float) -> list:
    out = []
    if scenario is not None:
        for i, text in enumerate(scenario.spec.scenario.expect):
            out.append(parse(text, machine, where=f"{scenario.path}: scenario.expect[{i}]", start_unix_s=start_unix_s))
    for i, text in enumerate(args.expect):
        out.append(parse(text, machine, where=f"--expect[{i}]", start_unix_s=start_unix_s))
    return out


def _emit(obj: dict, out) -> None:
    out.write(json.dumps(obj, allow_nan=False, separators=(",", ":")) + "\n")


@dataclasses.dataclass
class _Input:
    """What a replay reads: the machine and its config, and the frames of a scenario or a recording."""

    config: Any
    machine: Any
    fs_hz: float
    window_s: float
    frames: Any  # a replaypool.FrameSource (scenario, history), or a generator of replay frames (recording)
    total: int
    source: str
    cadence: str
    scenario: Any = None
    history: Any = None  # a history_cmd.HistoryInput for --history
    start_unix_s: float | None = None  # the history's first time


def _open_history(args: argparse.Namespace) -> _Input:
    from ..settings.loading import load_config

    if not args.config:
        raise InputError("--history needs --config (the machine configuration the history belongs to)")
    config = load_config(args.config, args.overrides)
    machine = _pick_machine(config, args.machine, args.config)
    hist = history_cmd.open_input(args, config, machine, start_given=args.start != DEFAULT_START)
    return _Input(config, machine, hist.fs_hz, machine.analysis.window_s, hist.frames, hist.total,
                  f"{hist.source}, config {args.config}", hist.cadence, None, hist, hist.start_unix_s)


def _open_input(args: argparse.Namespace) -> _Input:
    from ..settings.loading import load_config

    history_cmd.check_options(args)
    if args.overrides and not args.config:
        raise InputError("--set needs --config (the configuration it overrides)")
    if args.history:
        return _open_history(args)
    scenario = renderer = None
    frames: Any
    if args.scenario:
        scenario, renderer = _open_scenario(args)
        config, machine = scenario.config, scenario.machine
        fs_hz = config.acquisition.sample_rate_hz
        window_s = machine.analysis.window_s
        frames = ScenarioFrames(renderer, fs_hz, window_s)
        total = len(frames.elapsed_s)
        source = f"scenario {scenario.name!r} ({args.scenario}), config {scenario.config_path}"
        cadence = f"every {scenario.spec.scenario.cadence_s / 3600:g} h"
    else:
        if not args.config:
            raise InputError("--input needs --config (the machine configuration the recording belongs to)")
        config = load_config(args.config, args.overrides)
        machine = _pick_machine(config, args.machine, args.config)
        window_s = machine.analysis.window_s
        rec = open_recording(args.input, machine, args.unit, window_s)
        fs_hz = rec.fs_hz
        frames = recording_frames(rec, args.rpm)
        total = rec.n_frames // rec.window_frames
        source = f"recording {args.input} (samples in {rec.unit}: {rec.unit_from}), config {args.config}"
        cadence = f"consecutive {window_s:g} s windows"
        if rec.unmapped:
            print(f"rotorwatch: {args.input}: no channel for point(s) {', '.join(rec.unmapped)}: they read no_data", file=sys.stderr)
        if rec.dropped_frames:
            print(f"rotorwatch: {args.input}: the last {rec.dropped_frames} frames (less than one window) are not replayed", file=sys.stderr)
    return _Input(config, machine, fs_hz, window_s, frames, total, source, cadence, scenario)


def _write_text(out: Any, args: argparse.Namespace, inp: _Input, log: ReplayLog, wall_s: float,
                verdicts: list[Any], failed: list[Any]) -> None:
    """The human report: what was replayed, the timeline and the expectations."""
    from ..analysis.severity import boundaries

    machine, n = inp.machine, len(log.samples)
    last = log.samples[-1].elapsed_s
    out.write(f"rotorwatch replay: {inp.source}\n")
    out.write(
        f"machine {machine.id} ({machine.name or 'unnamed'}), points {', '.join(p.id for p in machine.points)}; "
        f"{n} updates {inp.cadence} over {last / 86400:.2f} days from {iso_date(log.start_unix_s)}; "
        f"{inp.window_s:g} s windows at {inp.fs_hz:g} Hz\n"
    )
    out.write(f"replay took {wall_s:.1f} s ({1000 * wall_s / n:.0f} ms per update)\n\n")
    try:
        limits = boundaries(machine.iso_group, machine.support)
    except ValueError:
        limits = None
    out.write(timeline(log, limits) + "\n")
    if inp.history is not None:
        history_cmd.report(args, log, out, _emit)
    if verdicts:
        out.write("\nExpectations\n")
        for v in verdicts:
            out.write(f"  {'PASS' if v.passed else 'FAIL'}  {v.expectation.text}  ({v.detail})\n")
        out.write(f"  {len(verdicts) - len(failed)} of {len(verdicts)} passed\n")


def run(args: argparse.Namespace) -> int:
    from ..pipeline import MachinePipeline
    from ..replaypool import replay_updates

    out = sys.stdout
    start = parse_date(args.start, "--start")
    if args.learning_updates is not None and args.learning_updates < 1:
        raise InputError(f"--learning-updates = {args.learning_updates}: must be at least 1")
    if args.workers < 1:
        raise InputError(f"--workers = {args.workers}: must be at least 1")
    hold_freed_memory()  # a batch run: reuse freed arrays instead of paging them in again (heap.py)
    inp = _open_input(args)
    config, machine, fs_hz, frames, total = inp.config, inp.machine, inp.fs_hz, inp.frames, inp.total
    scenario = inp.scenario
    start = inp.start_unix_s if inp.start_unix_s is not None else start
    expectations = _expectations(args, machine, scenario, start)
    policy = AlarmPolicy(learning_hours=0.0, min_learning_updates=args.learning_updates) if args.learning_updates else None

    tmp = None
    if args.state_dir:
        state_dir = Path(args.state_dir)
    else:
        tmp = tempfile.TemporaryDirectory(prefix="rotorwatch-replay-")
        state_dir = Path(tmp.name)
    updates = None
    try:
        pipeline = MachinePipeline(config, machine, state_dir=state_dir, policy=policy)
        log = history_cmd.new_log(machine, start) if inp.history else ReplayLog(machine, start)
        progress = sys.stderr.isatty() and args.format == "text"
        t_wall = time.perf_counter()
        updates = replay_updates(pipeline, frames, fs_hz, start, args.workers)
        for i, (frame, update) in enumerate(updates):
            log.add(frame.elapsed_s, update)
            if args.format == "jsonl":
                _emit(update_record(update, frame.elapsed_s), out)
                for e in update.events:
                    _emit(event_record(e, frame.elapsed_s), out)
            if progress and i % 10 == 0:
                print(f"\rreplay: update {i + 1} of {total}", end="", file=sys.stderr, flush=True)
        wall_s = time.perf_counter() - t_wall
        if progress:
            print("\r" + " " * 40 + "\r", end="", file=sys.stderr, flush=True)
        pipeline.close()
    finally:
        if updates is not None:
            updates.close()  # stops the analysis workers early on an error
        if hasattr(frames, "close"):
            frames.close()  # a recording's reader
        if inp.history is not None:
            inp.history.history.close()
        if tmp is not None:
            tmp.cleanup()
    n = len(log.samples)
    if n == 0:
        raise InputError(f"{args.scenario or args.input or args.history}: nothing to replay (no update)")

    verdicts = [evaluate(x, log.samples) for x in expectations]
    failed = [v for v in verdicts if not v.passed]
    if args.format == "jsonl":
        for v in verdicts:
            _emit({"type": "expectation", "text": v.expectation.text, "passed": v.passed, "detail": v.detail}, out)
        if inp.history is not None:
            history_cmd.report(args, log, out, _emit)
        _emit({
            "type": "summary", "machine": machine.id, "updates": n, "points": len(machine.points),
            "wall_s": round(wall_s, 3), "final_state": log.last.state if log.last else None,
            "expectations": len(verdicts), "failed": len(failed),
        }, out)
    else:
        _write_text(out, args, inp, log, wall_s, verdicts, failed)
    out.flush()
    if failed:
        names = "; ".join(repr(v.expectation.text) for v in failed[:3])
        more = f" and {len(failed) - 3} more" if len(failed) > 3 else ""
        raise ExpectationFailed(f"{len(failed)} of {len(verdicts)} expectation(s) failed: {names}{more}")
    return 0
