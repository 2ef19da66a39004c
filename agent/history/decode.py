"""Decoding one history element into the volts blocks of one update.

Each function returns a :class:`Decoded`: per point the raw sensor output in volts (what the pipeline
takes, as from a live input), the rate, and for the checks made across elements the number of columns
(text files) and an outside speed (the daemon's snapshots of a tach- or MQTT-fed machine). Sound files and
per-snapshot ``.npz`` go through the one recording reader (:func:`rotorwatch.replay.open_recording`, with
its unit rules); only the first ``analysis.window_s`` seconds of an element are analyzed.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import InputError
from ..recordings import UNITS, to_volts, unit_name
from ..settings.models import Machine

SOUND_SUFFIXES = (".wav", ".flac", ".aif", ".aiff", ".ogg")


@dataclass
class Decoded:
    blocks_v: dict[str, np.ndarray]
    fs_hz: float | None  # None: no point has samples in this element
    n_columns: int | None = None
    rpm: float | None = None


def window_frames(where: str, fs_hz: float, n_frames: int, window_s: float | None) -> int:
    """Frames of one analysis window (``window_s`` None: the whole element, as ``analyze`` takes it)."""
    if window_s is None:
        return n_frames
    n = int(round(window_s * fs_hz))
    if n < 1 or n_frames < n:
        raise InputError(f"{where}: {n_frames} samples ({n_frames / fs_hz:.3g} s at {fs_hz:g} Hz) is shorter than one "
                         f"analysis window (analysis.window_s = {window_s:g} s)")
    return n


def column_map(where: str, machine: Machine, columns: dict[str, int], n_columns: int) -> dict[str, int]:
    """Point id -> column: the given map, else each point's ``sensor.channel``; a column that is not
    there is an error (a point whose default channel is missing reads no data)."""
    known = {p.id for p in machine.points}
    unknown = [pid for pid in columns if pid not in known]
    if unknown:
        raise InputError(f"--columns: {unknown[0]!r} is not a point of machine {machine.id!r} "
                         f"(points: {', '.join(sorted(known))})")
    if columns:
        missing = {pid: c for pid, c in columns.items() if c >= n_columns}
        if missing:
            pid, c = next(iter(missing.items()))
            raise InputError(f"{where}: has {n_columns} column(s), but point {pid!r} reads column {c} (from 0)")
        return dict(columns)
    mapped = {p.id: p.sensor.channel for p in machine.points if p.sensor.channel < n_columns}
    if not mapped:
        raise InputError(f"{where}: has {n_columns} column(s), but the points of machine {machine.id!r} use channels "
                         + ", ".join(f"{p.id}: {p.sensor.channel}" for p in machine.points) + " (map them with --columns)")
    return mapped


def to_blocks(where: str, data: np.ndarray, fs_hz: float, unit: str, machine: Machine, columns: dict[str, int],
              window_s: float | None) -> Decoded:
    """Frames x columns in ``unit`` -> the first window of each mapped point, in volts."""
    n_win = window_frames(where, fs_hz, data.shape[0], window_s)
    mapped = column_map(where, machine, columns, data.shape[1])
    blocks = {pid: to_volts(np.asarray(data[:n_win, c], dtype=float), unit, machine.point(pid).sensor.volts_per_m_s2)
              for pid, c in mapped.items()}
    return Decoded(blocks, fs_hz, int(data.shape[1]))


def need_unit(where: str, unit: str | None) -> str:
    name = unit_name(unit) if unit is not None else None
    if name is None:
        what = f"unit {unit!r} is not one of {', '.join(UNITS)}" if unit is not None else "the unit of its samples is unknown"
        raise InputError(f"{where}: {what}: give --unit g, --unit m/s2 or --unit volts (or unit in the description)")
    return name


def decode_sound_or_npz(path: Path, machine: Machine, unit: str | None, window_s: float | None) -> Decoded:
    """One WAV (or other sound file) or per-snapshot ``.npz``, through the one recording reader."""
    from ..recordings import open_recording as open_file
    from ..replay import open_recording

    if window_s is None:  # the whole element
        with open_file(path) as whole:
            window_s = whole.n_frames / whole.fs_hz

    rec = open_recording(path, machine, unit, window_s)
    try:
        blocks = next(rec.windows)
    finally:
        rec.windows.close()  # type: ignore[attr-defined]
    return Decoded(blocks, rec.fs_hz)


def read_text(path: Path, delimiter: str | None, header_lines: int) -> np.ndarray:
    """A delimited text file -> frames x columns (float64); every malformed case is one line."""
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", UserWarning)  # numpy's "Empty input file": said below in one line
            data = np.loadtxt(path, delimiter=delimiter, skiprows=header_lines, ndmin=2, dtype=np.float64)
    except UnicodeDecodeError:
        raise InputError(f"{path}: not a delimited text file (binary content)") from None
    except ValueError as e:
        reason = str(e).split(";")[0].strip().rstrip(".")
        raise InputError(f"{path}: not a table of numbers with header_lines = {header_lines} and delimiter = "
                         f"{delimiter or 'white space'!r}: {reason}") from None
    except OSError as e:
        raise InputError(f"{path}: cannot read: {e.strerror or e}") from None
    if data.size == 0:
        raise InputError(f"{path}: holds no samples (empty after {header_lines} header line(s))")
    if not np.all(np.isfinite(data)):
        row = int(np.argwhere(~np.isfinite(data))[0][0]) + header_lines + 1
        raise InputError(f"{path}: line {row}: a value that is not a finite number")
    return data


def decode_text(path: Path, spec: Any, machine: Machine, window_s: float | None) -> Decoded:
    if spec.sample_rate_hz is None:
        raise InputError(f"{path}: a text file carries no sample rate: give --sample-rate HZ "
                         f"(or sample_rate_hz in the history description)")
    unit = need_unit(str(path), spec.unit)
    data = read_text(path, spec.delimiter, spec.header_lines)
    return to_blocks(str(path), data, float(spec.sample_rate_hz), unit, machine, spec.columns, window_s)


def decode_snapshot(store: Any, snap_id: str, machine: Machine) -> Decoded:
    """One evidence snapshot of the daemon: each point's waveform (m/s^2) back to the sensor's volts."""
    doc = store.load(snap_id)
    blocks: dict[str, np.ndarray] = {}
    rates = set()
    for p in machine.points:
        entry = doc.get("points", {}).get(p.id) or {}
        if not entry.get("waveform_file"):
            continue
        wave_m_s2, fs = store.read_waveform(snap_id, p.id)
        blocks[p.id] = np.asarray(wave_m_s2, dtype=np.float64) * p.sensor.volts_per_m_s2
        rates.add(float(fs))
    if len(rates) > 1:
        raise InputError(f"{store.root / snap_id}: points sampled at different rates ({', '.join(map(str, sorted(rates)))} Hz)")
    speed = doc.get("speed") or {}
    outside = speed.get("source") in ("tach", "mqtt") and speed.get("rpm")
    fs_hz = rates.pop() if rates else None
    return Decoded(blocks, fs_hz, rpm=float(speed["rpm"]) if outside else None)
