"""Listing a history's elements and giving each its time (see :mod:`rotorwatch.history`).

What ``--history PATH`` may be:

- a **folder** of files, one element each: sound files (WAV, ...) and ``.npz`` archives read by the one
  recording reader, anything else as a delimited text file (one column per channel); ``.json`` sidecars,
  ``.toml`` and hidden files are not elements;
- a **zip or tar archive** of such a folder (unpacked into a temporary folder for the replay);
- **one .npz** holding every element: ``snapshots`` as [n, samples] or [n, channels, samples],
  ``timestamps`` (n ISO 8601 strings), ``fs`` (or ``fs_hz``) and ``unit`` (g, m/s2 or volts);
- the daemon's own **snapshot folder** (``<state_dir>/snapshots`` or the state dir itself), as
  ``rotorwatch run`` writes it: each snapshot's waveforms at the snapshot's time.

Elements are replayed in time order; gaps are kept.
"""

from __future__ import annotations

import shutil
import tempfile
import zipfile
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import InputError
from ..settings.models import Machine
from .decode import (
    SOUND_SUFFIXES,
    Decoded,
    decode_snapshot,
    decode_sound_or_npz,
    decode_text,
    need_unit,
    to_blocks,
)
from .spec import HistorySpec
from .timestamps import parse_date, pattern_regex, time_from_name, time_from_sidecar

NOT_ELEMENTS = (".json", ".toml", ".md")
ARCHIVES = (".zip", ".tar", ".tgz", ".gz", ".bz2", ".xz")


@dataclass(frozen=True)
class Element:
    time_s: float
    name: str  # for messages: the file, or archive[index]
    ref: Any  # a Path, a snapshot id, or an index into a stacked archive


@dataclass
class History:
    """A history opened for replay: its elements in time order and how to decode each."""

    spec: HistorySpec
    machine: Machine
    window_s: float | None  # None: each element whole (analyze)
    kind: str  # files | stack | snapshots
    elements: list[Element]
    source: str  # one line for the replay's header
    _stack: tuple[np.ndarray, float, str] | None = field(default=None, repr=False)  # samples, fs, unit
    _store: Any = field(default=None, repr=False)
    _cleanup: Callable[[], None] | None = field(default=None, repr=False)

    @property
    def start_unix_s(self) -> float:
        return self.elements[0].time_s

    def decode(self, i: int) -> Decoded:
        e = self.elements[i]
        if self.kind == "snapshots":
            return decode_snapshot(self._store, e.ref, self.machine)
        if self.kind == "stack":
            assert self._stack is not None
            data, fs, unit = self._stack
            block = data[e.ref]
            frames = block[:, None] if block.ndim == 1 else block.T
            return to_blocks(e.name, frames, fs, unit, self.machine, self.spec.columns, self.window_s)
        path = Path(e.ref)
        if path.suffix.lower() in SOUND_SUFFIXES + (".npz",):
            return decode_sound_or_npz(path, self.machine, self.spec.unit, self.window_s)
        return decode_text(path, self.spec, self.machine, self.window_s)

    def close(self) -> None:
        done, self._cleanup = self._cleanup, None
        if done is not None:
            done()


def _snapshot_root(p: Path) -> Path | None:
    from ..storage.snapshots import SIDECAR

    for root in (p / "snapshots", p):
        if root.is_dir() and any((c / SIDECAR).is_file() for c in root.iterdir() if c.is_dir()):
            return root
    return None


def open_history(spec: HistorySpec, machine: Machine, window_s: float | None) -> History:
    """List the elements of ``spec.path`` (one-line :class:`InputError` on any problem)."""
    p = spec.path
    if not p.exists():
        raise InputError(f"{p}: no such file or folder")
    if p.is_file() and p.suffix.lower() == ".npz":
        return _open_stack(spec, machine, window_s)
    if p.is_file() and (p.suffix.lower() in ARCHIVES or zipfile.is_zipfile(p)):
        tmp = tempfile.mkdtemp(prefix="rotorwatch-history-")
        try:
            shutil.unpack_archive(str(p), tmp)
        except (shutil.ReadError, ValueError, OSError, EOFError) as e:
            shutil.rmtree(tmp, ignore_errors=True)
            raise InputError(f"{p}: not a readable zip or tar archive: {e}") from None
        root = Path(tmp)
        dirs = [c for c in root.iterdir() if not c.name.startswith(".")]
        inner = dirs[0] if len(dirs) == 1 and dirs[0].is_dir() else root
        try:
            h = _open_folder(HistorySpec(**{**spec.__dict__, "path": inner}), machine, window_s, str(p))
        except BaseException:
            shutil.rmtree(tmp, ignore_errors=True)
            raise
        h._cleanup = lambda: shutil.rmtree(tmp, ignore_errors=True)
        return h
    if not p.is_dir():
        raise InputError(f"{p}: a history is a folder, a zip or tar archive, or one .npz of snapshots")
    return _open_folder(spec, machine, window_s, str(p))


def _open_folder(spec: HistorySpec, machine: Machine, window_s: float | None, shown: str) -> History:
    root = _snapshot_root(spec.path)
    if root is not None:
        return _open_snapshots(spec, machine, window_s, root)
    files = sorted(f for f in spec.path.iterdir()
                   if f.is_file() and not f.name.startswith(".") and f.suffix.lower() not in NOT_ELEMENTS)
    if not files:
        raise InputError(f"{shown}: holds no recordings (expected sound files, .npz or delimited text files)")
    times = _file_times(spec, files)
    elements = sorted((Element(t, str(f), f) for t, f in zip(times, files)), key=lambda e: (e.time_s, e.name))
    _no_repeats(elements)
    kinds = sorted({"sound" if f.suffix.lower() in SOUND_SUFFIXES else "npz" if f.suffix.lower() == ".npz"
                    else "text" for f in files})
    return History(spec, machine, window_s, "files", elements, f"{shown} ({len(files)} {'/'.join(kinds)} files)")


def _file_times(spec: HistorySpec, files: list[Path]) -> list[float]:
    if spec.time_pattern:
        rx = pattern_regex(spec.time_pattern)
        return [time_from_name(f, spec.time_pattern, rx) for f in files]
    if spec.cadence_s is not None and spec.start_unix_s is not None:
        return [spec.start_unix_s + k * spec.cadence_s for k in range(len(files))]
    out = []
    for f in files:
        t = time_from_sidecar(f)
        if t is None:
            raise InputError(f"{f}: no time for this element: give --time-pattern (the time in the file names), "
                             f"a sidecar {f.with_suffix('.json').name} with time, or --start and --cadence")
        out.append(t)
    return out


def _no_repeats(elements: list[Element]) -> None:
    for a, b in zip(elements, elements[1:]):
        if a.time_s == b.time_s:
            raise InputError(f"{b.name}: has the same time as {a.name}: each element is one update at its own time")


def _open_snapshots(spec: HistorySpec, machine: Machine, window_s: float | None, root: Path) -> History:
    from ..storage.snapshots import SnapshotStore

    store = SnapshotStore(root)
    infos = store.list()
    mine = [i for i in infos if i.machine_id == machine.id]
    if not mine:
        others = sorted({i.machine_id for i in infos})
        raise InputError(f"{root}: no snapshot of machine {machine.id!r} (machines: {', '.join(others) or 'none'})")
    elements = [Element(i.time_s, str(i.path), i.id) for i in mine]
    _no_repeats(elements)
    return History(spec, machine, window_s, "snapshots", elements, f"{root} ({len(mine)} evidence snapshots)",
                   _store=store)


def _stack_entries(p: Path) -> dict[str, np.ndarray]:
    try:
        with np.load(p, allow_pickle=False) as z:
            return {k: np.asarray(z[k]) for k in z.files}
    except (OSError, ValueError, zipfile.BadZipFile, EOFError) as e:
        raise InputError(f"{p}: cannot read as .npz: {e}") from None


def _open_stack(spec: HistorySpec, machine: Machine, window_s: float | None) -> History:
    """One ``.npz`` holding every element (``snapshots``, ``timestamps``, ``fs``, ``unit``)."""
    p = spec.path
    z = _stack_entries(p)
    missing = [k for k in ("snapshots", "timestamps") if k not in z]
    if missing or not ({"fs", "fs_hz"} & set(z)):
        need = missing + ([] if {"fs", "fs_hz"} & set(z) else ["fs"])
        raise InputError(f"{p}: a history .npz needs {', '.join(need)} (has: {', '.join(sorted(z)) or 'nothing'})")
    data, stamps = z["snapshots"], z["timestamps"]
    if data.ndim not in (2, 3) or not np.issubdtype(data.dtype, np.number) or np.iscomplexobj(data):
        raise InputError(f"{p}: snapshots has shape {data.shape} of {data.dtype}: expected real numbers as "
                         "[n, samples] or [n, channels, samples]")
    if stamps.ndim != 1 or len(stamps) != data.shape[0]:
        raise InputError(f"{p}: timestamps has shape {stamps.shape}, snapshots holds {data.shape[0]} elements: "
                         "one ISO 8601 time per element")
    if data.shape[0] == 0:
        raise InputError(f"{p}: holds no snapshots")
    rate = z["fs"] if "fs" in z else z["fs_hz"]
    try:
        fs = float(rate.reshape(-1)[0]) if rate.size == 1 else float("nan")
    except (TypeError, ValueError):
        fs = float("nan")
    if not (np.isfinite(fs) and fs > 0):
        raise InputError(f"{p}: fs = {rate!r}: expected one positive number (Hz)")
    unit_raw = str(z["unit"].reshape(-1)[0]) if "unit" in z and z["unit"].size == 1 else spec.unit
    unit = need_unit(str(p), unit_raw)
    times = [parse_date(str(s), f"{p}: timestamps[{k}]") for k, s in enumerate(stamps)]
    elements = sorted((Element(t, f"{p}[{k}]", k) for k, t in enumerate(times)), key=lambda e: e.time_s)
    _no_repeats(elements)
    shape = "x".join(map(str, data.shape[1:]))
    return History(spec, machine, window_s, "stack", elements, f"{p} ({data.shape[0]} snapshots of {shape} at {fs:g} Hz)",
                   _stack=(data, fs, unit))
