"""Replay: run a simulated scenario or a recording through the same pipeline the daemon runs.

A replay is a sequence of :class:`Frame` (one update: a volts block per point) fed to
:class:`~rotorwatch.pipeline.MachinePipeline` as fast as the CPU allows. Frames come from

- a scenario (:class:`ScenarioFrames`): at each snapshot time (``cadence_s``) the renderer draws
  ``analysis.window_s`` seconds at ``acquisition.sample_rate_hz``. Speed: the analysis finds it the way
  the daemon would (the configured speed, or estimated from the spectrum); only machines whose speed
  comes from outside the vibration channels (``tach``, ``mqtt``) get the scenario's true speed, the
  reading a tach or a drive would give;
- a recording (:func:`recording_frames`): a WAV file or a ``.npz`` archive cut into consecutive
  ``window_s`` windows (see :func:`open_recording` for the formats and units).

:class:`ReplayLog` keeps what the timeline and the expectations need from each update.
"""

from __future__ import annotations

import math
from collections.abc import Generator, Iterator
from dataclasses import dataclass, field
from datetime import UTC
from pathlib import Path

import numpy as np

from .alarms.projection import Projection
from .alarms.projection import as_json as projection_json
from .alarms.records import AlarmEvent, MachineUpdate
from .errors import InputError
from .expectations import Sample
from .recordings import UNITS  # noqa: F401  (re-exported for the replay command)
from .settings.models import Machine


@dataclass(frozen=True)
class Frame:
    """One update's input: elapsed seconds from the start, raw volts per point, outside speed."""

    elapsed_s: float
    blocks_v: dict[str, np.ndarray]
    rpm: float | None = None
    tach_pulses_s: np.ndarray | None = None  # a tach's pulse times from the window's start, if any


# ------------------------------------------------------------------------------------------ scenarios
def _tach_pulses(renderer, t_s: float, window_s: float) -> np.ndarray:
    """When the scenario's tach pulses fall in the window from ``t_s``: at each 1/N turn of the simulated
    shaft (N = pulses_per_rev), in seconds from the window's start (what the tach channel would give)."""
    n = renderer.machine.speed.pulses_per_rev
    first, last = renderer.speed.turns(np.array([t_s, t_s + window_s])) * n
    k = np.arange(math.ceil(first), math.floor(last) + 1)
    return np.asarray(renderer.speed.time_at_turns(k / n), dtype=float) - t_s


class ScenarioFrames:
    """Snapshots of a :class:`~rotorwatch.simulators.render.ScenarioRenderer` at its cadence, by index (a
    :class:`~rotorwatch.replaypool.FrameSource`). A snapshot is a pure function of the scenario and its
    time, so it is the same drawn in any process; a worker process builds its own renderer."""

    def __init__(self, renderer, fs_hz: float, window_s: float, times_s=None):
        self.scenario = renderer.scenario
        self._renderer = renderer
        self.fs_hz, self.window_s = float(fs_hz), float(window_s)
        self.elapsed_s = [float(t) for t in (renderer.times() if times_s is None else times_s)]

    def __getstate__(self) -> dict:
        return {**self.__dict__, "_renderer": None}  # rebuilt from the scenario where unpickled

    @property
    def renderer(self):
        if self._renderer is None:
            from rotorwatch.simulators.render import ScenarioRenderer

            self._renderer = ScenarioRenderer(self.scenario)
        return self._renderer

    def frame(self, i: int) -> tuple[Frame, None]:
        r, t = self.renderer, self.elapsed_s[i]
        speed = r.machine.speed.mode
        pulses = _tach_pulses(r, t, self.window_s) if speed == "tach" else None
        rpm = float(r.true_rpm(t)) if speed in ("tach", "mqtt") else None
        return Frame(t, r.snapshot(t, self.window_s, self.fs_hz), rpm, pulses), None

    def usable(self, meta: None) -> bool:
        return True

    def check(self, i: int, meta: None) -> None:
        return None


def scenario_frames(renderer, fs_hz: float, window_s: float, times_s=None) -> Generator[Frame, None, None]:
    """The frames of :class:`ScenarioFrames`, drawn here one after the other."""
    source = ScenarioFrames(renderer, fs_hz, window_s, times_s)
    for i in range(len(source.elapsed_s)):
        yield source.frame(i)[0]


# ----------------------------------------------------------------------------------------- recordings
@dataclass
class Recording:
    """An opened recording: its rate, length, unit, and a reader of consecutive windows in volts."""

    path: Path
    fs_hz: float
    n_frames: int
    kind: str  # "sound" or "npz"
    windows: Iterator[dict[str, np.ndarray]]
    window_frames: int
    dropped_frames: int
    unmapped: list[str] = field(default_factory=list)
    unit: str = "volts"
    unit_from: str = ""


def open_recording(path: str | Path, machine: Machine, unit: str | None, window_s: float) -> Recording:
    """Open a recording for replay (see :mod:`rotorwatch.recordings`), cut into ``window_s`` windows.

    Channel c feeds the point whose ``sensor.channel`` is c; a ``.npz`` may instead hold one 1-D array
    per point, named by the point id. The unit is the file's own (WAV metadata, sidecar, ``.npz``
    ``unit``; a ``.npz`` without one is g), else ``unit`` (``--unit``). Volts are the sensor output (an
    integer PCM file holds fractions of full scale, and full scale is the sensor's ``input_range_v``);
    g and m/s^2 (float files only) go through the sensor's sensitivity to volts, so the sensor checks
    and the calibration run as for a live input.
    """
    from .recordings import decide_unit, to_volts
    from .recordings import open_recording as open_file

    p = Path(path)
    rec = open_file(p, names=[pt.id for pt in machine.points])
    fs = rec.fs_hz
    try:
        n_win = _window_frames(p, fs, rec.n_frames, window_s)
        name, how = decide_unit(rec, unit)
        if rec.integer and name != "volts":
            raise InputError(
                f"{p}: integer {rec.sample_format} samples hold fractions of full scale; use --unit volts (full "
                f"scale = the sensor's input_range_v) or write the recording as a float WAV"
            )
        if rec.channel_names:
            mapped = {pid: i for i, pid in enumerate(rec.channel_names)}
            unmapped = [pt.id for pt in machine.points if pt.id not in mapped]
        else:
            mapped, unmapped = _channel_map(p, machine, rec.n_channels)
    except InputError:
        rec.close()
        raise

    def windows() -> Iterator[dict[str, np.ndarray]]:
        with rec:
            while True:
                data = rec.read(n_win)
                if data.shape[0] < n_win:
                    return
                out = {}
                for pid, ch in mapped.items():
                    sensor = machine.point(pid).sensor
                    x = data[:, ch].copy()
                    if rec.integer:
                        x *= sensor.input_range_v
                    out[pid] = to_volts(x, name, sensor.volts_per_m_s2)
                yield out

    return Recording(p, fs, rec.n_frames, rec.kind, windows(), n_win, rec.n_frames % n_win, unmapped, name, how)


def _window_frames(p: Path, fs_hz: float, n_frames: int, window_s: float) -> int:
    n = int(round(window_s * fs_hz))
    if n < 1 or n_frames < n:
        raise InputError(
            f"{p}: {n_frames} frames ({n_frames / fs_hz:.3g} s at {fs_hz:g} Hz) is shorter than one "
            f"analysis window (analysis.window_s = {window_s:g} s)"
        )
    return n


def _channel_map(p: Path, machine: Machine, n_channels: int) -> tuple[dict[str, int], list[str]]:
    mapped = {pt.id: pt.sensor.channel for pt in machine.points if pt.sensor.channel < n_channels}
    unmapped = [pt.id for pt in machine.points if pt.id not in mapped]
    if not mapped:
        chans = ", ".join(f"{pt.id}: {pt.sensor.channel}" for pt in machine.points)
        raise InputError(f"{p}: has {n_channels} channel(s), but the points of machine {machine.id!r} use channels {chans}")
    return mapped, unmapped


def recording_frames(rec: Recording, rpm: float | None = None) -> Generator[Frame, None, None]:
    step_s = rec.window_frames / rec.fs_hz
    for i, blocks in enumerate(rec.windows):
        yield Frame(i * step_s, blocks, rpm)


# ------------------------------------------------------------------------------------------ recording
#: Point states whose analysis findings count for the expectations (``finding X appears``, ``no finding X``).
TRUSTED_STATES = ("learning", "normal", "warning", "alarm")


@dataclass
class ReplayLog:
    """What a replay keeps of each update: states for the expectations, events for the timeline."""

    machine: Machine
    start_unix_s: float
    samples: list[Sample] = field(default_factory=list)
    events: list[tuple[float, AlarmEvent]] = field(default_factory=list)  # (elapsed_s, event)
    overall: dict[str, list[tuple[float, float, str | None]]] = field(default_factory=dict)  # point -> (t, mm/s, zone)
    peaks: dict[tuple[str, str], tuple[float, float]] = field(default_factory=dict)  # (point, value) -> (max, at t)
    # (point, value) -> (t, its projection) at the value's first update in warning or alarm (replay_projection.py)
    first_raised: dict[tuple[str, str], tuple[float, Projection]] = field(default_factory=dict)
    last: MachineUpdate | None = None

    def add(self, elapsed_s: float, update: MachineUpdate) -> None:
        values: dict[tuple[str, str], tuple[str, float, str]] = {}
        zones: dict[str, str | None] = {}
        points: dict[str, str] = {}
        for pid, pu in update.points.items():
            points[pid] = pu.state
            for name, vs in pu.values.items():
                values[(pid, name)] = (vs.state, vs.value, vs.unit)
                if vs.state in ("warning", "alarm") and vs.projection is not None:
                    self.first_raised.setdefault((pid, name), (elapsed_s, vs.projection))
                if math.isfinite(vs.value) and vs.state != "suppressed":
                    best = self.peaks.get((pid, name))
                    if best is None or vs.value > best[0]:
                        self.peaks[(pid, name)] = (vs.value, elapsed_s)
            for name, fs in pu.findings.items():
                strength = fs.strength if fs.strength is not None else float("nan")
                values[(pid, f"finding:{name}")] = (fs.state, strength, "")
            zone = None
            if pu.result is not None and pu.state not in ("sensor_fault", "stopped"):
                zone = pu.result.iso_zone
                self.overall.setdefault(pid, []).append((elapsed_s, pu.result.overall_velocity_mm_s, zone))
            zones[pid] = zone
        reported = {pid: frozenset(f.name for f in pu.result.findings)  # not trusted from a faulty sensor
                    for pid, pu in update.points.items() if pu.result is not None and pu.state in TRUSTED_STATES}
        self.samples.append(Sample(elapsed_s, update.state, points, values, zones, reported))
        self.events.extend((elapsed_s, e) for e in update.events)
        self.last = update


# ------------------------------------------------------------------------------------------- output
def _clean(x):
    """JSON-safe: non-finite floats become null, tuples lists, numpy scalars Python numbers."""
    if isinstance(x, dict):
        return {str(k): _clean(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [_clean(v) for v in x]
    if isinstance(x, (np.floating, float)):
        x = float(x)
        return x if math.isfinite(x) else None
    if isinstance(x, np.integer):
        return int(x)
    return x


def iso_date(unix_s: float) -> str:
    from datetime import datetime

    return datetime.fromtimestamp(unix_s, tz=UTC).strftime("%Y-%m-%dT%H:%M:%SZ")


def update_record(update: MachineUpdate, elapsed_s: float) -> dict:
    """One update as a JSON-ready dict (``type: update``)."""
    points = {}
    for pid, pu in update.points.items():
        r = pu.result
        h = pu.health
        points[pid] = {
            "state": pu.state,
            "reason": pu.reason,
            "overall_mm_s": r.overall_velocity_mm_s if r is not None else None,
            "iso_zone": r.iso_zone if r is not None else None,
            "rpm": r.rpm if r is not None else None,
            "health": {
                "ok": h.ok, "fault": h.fault, "reason": h.reason, "rms_v": h.rms_v, "mean_v": h.mean_v,
                "clipped_fraction": h.clipped_fraction,
            },
            "values": {
                name: {
                    "value": v.value, "unit": v.unit, "state": v.state, "warning_level": v.warning_level,
                    "alarm_level": v.alarm_level, "baseline": v.baseline, "latched": v.latched,
                    "drop_warning_level": v.drop_warning_level, "drop_alarm_level": v.drop_alarm_level,
                    "raises": v.raises, "chatter": v.chatter,
                    "projection": projection_json(v.projection, iso=iso_date),
                }
                for name, v in pu.values.items()
            },
            "findings": {
                name: {"state": f.state, "present": f.present, "seen": f.seen, "window": f.window,
                       "strength": f.strength, "bearing": f.bearing, "raises": f.raises, "chatter": f.chatter}
                for name, f in pu.findings.items()
            },
            # every finding the analysis reported this update (names, strongest first)
            "reported": [f.name for f in pu.result.findings] if pu.result is not None else [],
        }
    return _clean({
        "type": "update", "time_s": update.time_s, "date": iso_date(update.time_s), "elapsed_s": elapsed_s,
        "day": elapsed_s / 86400.0, "machine": update.machine_id, "state": update.state, "reason": update.reason,
        "rpm": update.rpm, "rpm_source": update.rpm_source, "points": points,
    })


def event_record(e: AlarmEvent, elapsed_s: float) -> dict:
    """One transition as a JSON-ready dict (``type: event``)."""
    return _clean({
        "type": "event", "time_s": e.time_s, "date": iso_date(e.time_s), "elapsed_s": elapsed_s,
        "day": elapsed_s / 86400.0, "machine": e.machine_id, "point": e.point_id, "value": e.value_name,
        "old_state": e.old_state, "new_state": e.new_state, "reading": e.value, "unit": e.unit,
        "level": e.level, "level_kind": e.level_kind, "reason": e.reason,
    })


def _when(elapsed_s: float, start_unix_s: float) -> str:
    date = iso_date(start_unix_s + elapsed_s)[:16].replace("T", " ")
    return f"day {elapsed_s / 86400.0:6.2f}  {date}"


def _value_order(machine: Machine, pid: str) -> list[str]:
    return ["overall"] + [b.name for b in machine.bands_for(pid)]


def _baselines_lines(log: ReplayLog, zone_limits_mm_s: tuple[float, float, float] | None, max_lines: int) -> list[str]:
    """When each point learned its baselines."""
    t0 = log.start_unix_s
    lines: list[str] = []
    learned = [(t, e) for t, e in log.events if e.old_state == "learning" and e.new_state == "normal" and e.value_name not in ("point", "machine")]
    if learned:
        lines.append("Baselines learned")
        by_time: dict[float, dict[str, int]] = {}
        for t, e in learned:
            by_time.setdefault(t, {}).setdefault(e.point_id or "-", 0)
            by_time[t][e.point_id or "-"] += 1
        for t, counts in list(by_time.items())[:max_lines]:
            lines.append(f"  {_when(t, t0)}  " + ", ".join(f"{p}: {n} value{'s' if n != 1 else ''}" for p, n in counts.items()))
        lines.append("")
    return lines


def _firsts_lines(log: ReplayLog, zone_limits_mm_s: tuple[float, float, float] | None, max_lines: int) -> list[str]:
    """The first warning and alarm of each value, and the values that never reached warning."""
    m, t0 = log.machine, log.start_unix_s
    lines: list[str] = []
    lines.append("First warning and alarm of each value")
    firsts = []
    reached = set()
    for t, e in log.events:
        if e.value_name in ("point", "machine"):
            continue
        for kind in ("warning", "alarm"):
            key = (e.point_id, e.value_name, kind)
            rank = {"warning": 1, "alarm": 2}
            if rank.get(e.new_state, 0) >= rank[kind] and rank.get(e.old_state, 0) < rank[kind] and key not in reached:
                reached.add(key)
                firsts.append((t, e, kind))
    for t, e, kind in firsts[:max_lines]:
        detail = e.reason[len(e.value_name) + 1:] if e.reason.startswith(f"{e.value_name} ") else e.reason
        if e.new_state != kind:
            detail += " (straight to alarm)"
        lines.append(f"  {_when(t, t0)}  {e.point_id:<6} {e.value_name:<16} {kind:<7}  {detail}")
    if len(firsts) > max_lines:
        lines.append(f"  ... {len(firsts) - max_lines} more")
    quiet = []
    for p in m.points:
        for name in _value_order(m, p.id):
            if (p.id, name, "warning") not in reached:
                peak = log.peaks.get((p.id, name))
                unit = next((s.values[(p.id, name)][2] for s in log.samples[-1:] if (p.id, name) in s.values), "")
                quiet.append(f"{p.id} {name}" + (f" (peak {peak[0]:.3g} {unit} at day {peak[1] / 86400:.2f})" if peak else ""))
    if not firsts:
        lines.append("  no value reached warning")
    if quiet:
        lines.append("  never reached warning: " + "; ".join(quiet))
    lines.append("")
    return lines


def _zones_lines(log: ReplayLog, zone_limits_mm_s: tuple[float, float, float] | None, max_lines: int) -> list[str]:
    """Each point's overall velocity and the ISO 20816-3 zones it went through."""
    m, t0 = log.machine, log.start_unix_s
    lines: list[str] = []
    limits = f": A/B {zone_limits_mm_s[0]:g}, B/C {zone_limits_mm_s[1]:g}, C/D {zone_limits_mm_s[2]:g} mm/s" if zone_limits_mm_s else ""
    lines.append(f"Overall velocity and ISO 20816-3 zone (group {m.iso_group}, {m.support}{limits})")
    for p in m.points:
        series = log.overall.get(p.id, [])
        if not series:
            lines.append(f"  {p.id:<6} no overall velocity (no analyzed update)")
            continue
        first_t, first_v, first_z = series[0]
        parts = [f"zone {first_z} at the start ({first_v:.3g} mm/s)"]
        seen = {first_z}
        for t, v, z in series[1:]:
            if z is not None and z not in seen and (first_z is None or z > first_z):
                seen.add(z)
                parts.append(f"zone {z} from {_when(t, t0).strip()} ({v:.3g} mm/s)")
        peak_v, peak_t = max((v, t) for t, v, _ in series)
        if len(parts) == 1:
            parts[0] = f"zone {first_z} throughout"
        lines.append(f"  {p.id:<6} " + "; ".join(parts) + f"; peak {peak_v:.3g} mm/s at day {peak_t / 86400:.2f}")
    lines.append("")
    return lines


def _raises_lines(log: ReplayLog, zone_limits_mm_s: tuple[float, float, float] | None, max_lines: int) -> list[str]:
    """How often each value and finding was raised, and its chatter."""
    m = log.machine
    lines: list[str] = []
    if log.last is not None:
        window = m.alarms.chatter_window_updates
        counted = []
        for pid, pu in log.last.points.items():
            counted += [(pid, name, v.raises, v.chatter) for name, v in pu.values.items() if v.raises]
            counted += [(pid, f"finding:{name}", f.raises, f.chatter) for name, f in pu.findings.items() if f.raises]
        lines.append(f"Raises and chatter (chatter: raised again within {window} updates of its last lowering)")
        for pid, name, n_raised, n_chatter in counted[:max_lines]:
            lines.append(f"  {pid:<6} {name:<16} raised {n_raised} time{'s' if n_raised != 1 else ''}, chatter {n_chatter}")
        if not counted:
            lines.append("  no value was raised")
        lines.append("")
    return lines


def _faults_lines(log: ReplayLog, zone_limits_mm_s: tuple[float, float, float] | None, max_lines: int) -> list[str]:
    """Sensor faults and their ends."""
    t0 = log.start_unix_s
    lines: list[str] = []
    faults = [(t, e) for t, e in log.events if e.value_name == "point" and "sensor_fault" in (e.old_state, e.new_state)]
    if faults:
        lines.append("Sensor faults")
        for t, e in faults[:max_lines]:
            what = e.reason if e.new_state == "sensor_fault" else f"back to {e.new_state}"
            lines.append(f"  {_when(t, t0)}  {e.point_id:<6} {what}")
        if len(faults) > max_lines:
            lines.append(f"  ... {len(faults) - max_lines} more")
        lines.append("")
    return lines


def _machine_states_lines(log: ReplayLog, zone_limits_mm_s: tuple[float, float, float] | None, max_lines: int) -> list[str]:
    """The machine's state changes."""
    t0 = log.start_unix_s
    lines: list[str] = []
    machine_events = [(t, e) for t, e in log.events if e.value_name == "machine"]
    lines.append("Machine state changes")
    for t, e in machine_events[:max_lines]:
        lines.append(f"  {_when(t, t0)}  {e.old_state} -> {e.new_state}")
    if len(machine_events) > max_lines:
        lines.append(f"  ... {len(machine_events) - max_lines} more")
    lines.append("")
    return lines


def _final_lines(log: ReplayLog, zone_limits_mm_s: tuple[float, float, float] | None, max_lines: int) -> list[str]:
    """The state of the machine and of each point at the end."""
    t0 = log.start_unix_s
    lines: list[str] = []
    if log.last is not None and log.samples:
        last_t = log.samples[-1].elapsed_s
        lines.append(f"Final state ({_when(last_t, t0).strip()} UTC): machine {log.last.state}")
        for pid, pu in log.last.points.items():
            lines.append(f"  {pid:<6} {pu.state:<12} {pu.reason}")
    return lines


def _projection_lines(log: ReplayLog, zone_limits_mm_s: tuple[float, float, float] | None, max_lines: int) -> list[str]:
    from .replay_projection import projection_lines

    return projection_lines(log.machine, log.start_unix_s, log.first_raised, log.events, _when, max_lines)


_TIMELINE_SECTIONS = (_baselines_lines, _firsts_lines, _projection_lines, _zones_lines, _raises_lines, _faults_lines, _machine_states_lines,
                      _final_lines)


def timeline(log: ReplayLog, zone_limits_mm_s: tuple[float, float, float] | None = None, max_lines: int = 40) -> str:
    """A human timeline: baselines, first warning/alarm of each value, zones, faults, machine states."""
    lines: list[str] = []
    for section in _TIMELINE_SECTIONS:
        lines += section(log, zone_limits_mm_s, max_lines)
    return "\n".join(lines)
