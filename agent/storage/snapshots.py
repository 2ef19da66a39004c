"""Evidence snapshots: what a machine looked like at one moment, kept under a disk quota.

A snapshot is one folder ``<root>/<ID>/`` for one machine at one update, with per point

- ``<point>.wav``: the calibrated waveform in m/s^2, WAV float32 (read back bit-exact as float32);
- ``<point>.spectra.npz``: the acceleration (m/s^2 RMS), velocity (mm/s RMS) and envelope spectra
  (arrays ``<quantity>_freqs_hz``, ``<quantity>_amplitude``, ``<quantity>_unit``; no pickles);

and one JSON sidecar ``snapshot.json`` (format ``rotorwatch-snapshot/1``): machine, time, why it was
taken (``reason`` = ``transition`` | ``command`` | ``schedule``, with a ``detail`` line), the
configuration fingerprint, speed, machine and point states, every value with its state and levels,
waveform figures, findings, the band edges in Hz at the snapshot's speed, the envelope band and the
defect-frequency markers (1x/2x/3x, blade pass and 2x, BPFO/BPFI/BSF/FTF and their harmonics).

Nothing secret goes in: the sidecar is built from the update, the machine's configuration (which
holds no credentials) and :func:`config_fingerprint`, a hash over the site, acquisition, machines and
storage sections only (never the MQTT, metrics or status-page sections).

A snapshot is written in a hidden temporary folder, its files and the folder synced, then renamed
into place and the parent folder synced, so neither a crash nor a power cut leaves a half snapshot in
the list. After each save the quota is enforced by :mod:`rotorwatch.storage.snapshot_quota`:
transition evidence keeps a reserved share and is never evicted by on-request or daily snapshots;
on-request snapshots are rate limited per machine.
"""

from __future__ import annotations

import builtins
import hashlib
import json
import logging
import math
import os
import re
import shutil
import time
from collections.abc import Callable, Mapping
from dataclasses import asdict, dataclass
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import numpy as np

from ..alarms.records import MachineUpdate
from ..analysis.result import Spectrum
from ..settings.quantities import SPECTRA
from . import SNAPSHOTS_DIR, StorageError, wallclock
from .snapshot_quota import RequestLimiter, evictions

log = logging.getLogger(__name__)

FORMAT = "rotorwatch-snapshot/1"
SIDECAR = "snapshot.json"
REASONS = ("transition", "command", "schedule")
_ID = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]{0,160}$")
_TMP_PREFIX = ".tmp-"


@dataclass(frozen=True)
class SnapshotInfo:
    id: str
    path: Path
    machine_id: str
    time_s: float
    reason: str
    detail: str
    points: tuple[str, ...]
    size_bytes: int
    seq: int = 0  # order of saving in this store (0: a sidecar written before sequence numbers)


def config_fingerprint(config: Any) -> str:
    """``sha256:<hex>`` of the monitoring part of a :class:`~rotorwatch.settings.models.Config`.

    Only ``site``, ``acquisition``, ``machines`` and ``storage`` go in: connection sections (which name
    users, password files and certificates) never do.
    """
    data = config.model_dump(mode="json", include={"site", "acquisition", "machines", "storage"})
    text = json.dumps(data, sort_keys=True, separators=(",", ":"))
    return "sha256:" + hashlib.sha256(text.encode("utf-8")).hexdigest()


def _clean(obj: Any) -> Any:
    """JSON-safe: numpy to Python, tuples to lists, non-finite numbers to null."""
    if isinstance(obj, dict):
        return {str(k): _clean(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_clean(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return _clean(obj.tolist())
    if isinstance(obj, np.generic):
        return _clean(obj.item())
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    return obj


def markers_for(machine: Any, shaft_hz: float, harmonics: int = 3) -> list[dict[str, Any]]:
    """Defect-frequency markers of a :class:`~rotorwatch.settings.models.Machine` at ``shaft_hz``.

    Shaft orders 1x..3x; blade pass and 2x blade pass when the machine has blades; 2xLF and its harmonics
    (family ``electrical``) when it has a line frequency; BPFO, BPFI, BSF and FTF of every bearing with
    ``harmonics`` harmonics (kinematics in :mod:`rotorwatch.kinematics`).
    """
    from ..analysis.labels import harmonic, twice_line_frequency
    from ..kinematics import bearing_multiples

    out: list[dict[str, Any]] = []
    for k in (1, 2, 3):
        out.append({"name": f"{k}x", "family": "shaft", "order": float(k), "frequency_hz": k * shaft_hz})
    if machine.blades:
        for k in (1, 2):
            name = "blade pass" if k == 1 else f"{k}x blade pass"
            out.append({"name": name, "family": "blade", "order": float(k * machine.blades),
                        "frequency_hz": k * machine.blades * shaft_hz})
    lf = getattr(machine, "line_frequency_hz", None)
    if lf:  # electrical lines: 2xLF and its harmonics
        for k in range(1, harmonics + 1):
            out.append({"name": twice_line_frequency(k), "family": "electrical", "harmonic": k,
                        "order": 2 * k * lf / shaft_hz, "frequency_hz": 2 * k * lf})
    for b in machine.bearings:
        for defect, order in bearing_multiples(b).as_dict().items():
            for k in range(1, harmonics + 1):
                label = harmonic(k, defect.upper())
                out.append({"name": label, "family": defect, "bearing": b.id, "harmonic": k,
                            "order": k * order, "frequency_hz": k * order * shaft_hz})
    return out


def bands_for(machine: Any, point_id: str, shaft_hz: float) -> list[dict[str, Any]]:
    """Band edges in Hz at ``shaft_hz`` for the bands on ``point_id``, plus the overall velocity band."""
    from ..kinematics import band_edges_hz

    out = [{"name": "overall", "quantity": "velocity",
            "parts_hz": [[machine.overall.low_hz, machine.overall.high_hz]]}]
    for band in machine.bands_for(point_id):
        out.append({"name": band.name, "quantity": band.quantity,
                    "parts_hz": [list(p) for p in band_edges_hz(machine, band, shaft_hz)]})
    return out


def _time_utc(t_s: float) -> str:
    return datetime.fromtimestamp(t_s, tz=UTC).strftime("%Y-%m-%dT%H:%M:%SZ")


def _fsync_file(path: Path) -> None:
    """fsync a file or a folder (a folder's entry list: a rename in it reaches the disk)."""
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


class SnapshotRefused(StorageError):
    """An on-request snapshot was not taken: the machine's request limit is reached, or it did not fit
    the room left to on-request and daily snapshots."""


class SnapshotStore:
    """Snapshots under ``root`` with a disk quota (see the module docstring)."""

    def __init__(self, root: str | Path, quota_bytes: int = 512 * 1024 * 1024, *,
                 transition_share: float = 0.5, on_request_burst: int = 3, on_request_interval_s: float = 600.0,
                 clock: Callable[[], float] = time.time, monotonic: Callable[[], float] = time.monotonic) -> None:
        if quota_bytes < 1:
            raise ValueError(f"snapshot quota_bytes = {quota_bytes}: must be positive")
        if not 0.0 <= transition_share <= 1.0:
            raise ValueError(f"snapshot transition_share = {transition_share}: must be within 0..1")
        self.root = Path(root)
        self.quota_bytes = int(quota_bytes)
        self.reserved_bytes = int(transition_share * quota_bytes)
        self.limiter = RequestLimiter(on_request_burst, on_request_interval_s, clock=monotonic)
        self._clock = clock
        self._seq: int | None = None
        if self.root.is_dir():
            for stale in self.root.glob(_TMP_PREFIX + "*"):  # left by a crash during a save
                shutil.rmtree(stale, ignore_errors=True)
            self._set_aside_damaged()

    def _set_aside_damaged(self) -> None:
        """Rename snapshot folders whose sidecar cannot be read to ``.damaged-<id>`` (one warning each):
        they leave the list and the quota, and stay for a person to look at."""
        for folder in self.root.iterdir():
            if folder.name.startswith(".") or not folder.is_dir():
                continue
            try:
                self._info(folder.name)
            except StorageError as e:
                aside = self.root / f".damaged-{folder.name}"
                try:
                    os.replace(folder, aside)
                except OSError:
                    continue
                log.warning("damaged snapshot set aside: %s -> %s (%s)", folder, aside.name, e)

    @classmethod
    def in_state_dir(cls, state_dir: str | Path, settings: Any = None, **kwargs: Any) -> SnapshotStore:
        """``<state_dir>/snapshots`` with a :class:`~rotorwatch.settings.storage.SnapshotSettings`."""
        if settings is not None:
            for key in ("quota_bytes", "transition_share", "on_request_burst", "on_request_interval_s"):
                kwargs.setdefault(key, getattr(settings, key))
        return cls(Path(state_dir) / SNAPSHOTS_DIR, **kwargs)

    # -- saving -------------------------------------------------------------------------------------
    def save(self, update: MachineUpdate, waveforms_m_s2: Mapping[str, np.ndarray], *, reason: str,
             machine: Any = None, config_hash: str = "", detail: str = "") -> SnapshotInfo:
        """Write one snapshot of ``update`` and prune to the quota; returns what was saved.

        ``waveforms_m_s2``: point id -> the calibrated samples of that update (1-D, m/s^2); the sample
        rate is the point result's ``fs_hz``. ``machine``: the machine's configuration, for band
        edges and markers (without it the sidecar has none). Spectra are taken from the point
        results when they were kept. Raises ValueError for a bad reason, StorageError on disk failures,
        :class:`SnapshotRefused` when an on-request snapshot is over its machine's limit or finds no room.
        """
        if reason not in REASONS:
            raise ValueError(f"snapshot reason {reason!r}: must be one of {', '.join(REASONS)}")
        if reason == "command":
            self._admit(update.machine_id)
        time_s = float(update.time_s)
        base = f"{datetime.fromtimestamp(time_s, tz=UTC):%Y%m%dT%H%M%SZ}-{update.machine_id}-{reason}"
        try:
            self.root.mkdir(parents=True, exist_ok=True)
            snap_id = base
            n = 2
            while (self.root / snap_id).exists():
                snap_id, n = f"{base}-{n}", n + 1
            tmp = self.root / f"{_TMP_PREFIX}{snap_id}-{os.getpid()}"
            tmp.mkdir()
            try:
                sidecar = self._write_files(tmp, snap_id, update, waveforms_m_s2, reason, machine, config_hash, detail)
                (tmp / SIDECAR).write_text(json.dumps(_clean(sidecar), indent=1, allow_nan=False) + "\n")
                for f in tmp.iterdir():
                    _fsync_file(f)
                _fsync_file(tmp)
                os.replace(tmp, self.root / snap_id)
                _fsync_file(self.root)
            except BaseException:
                shutil.rmtree(tmp, ignore_errors=True)
                raise
        except OSError as e:
            raise StorageError(f"{self.root}: cannot save snapshot {base}: {e.strerror or e}") from e
        info = self._info(snap_id)
        log.info("snapshot saved id=%s reason=%s size_bytes=%d", snap_id, reason, info.size_bytes)
        removed = self.prune(keep=snap_id)
        if snap_id in removed:
            raise SnapshotRefused(
                f"{reason} snapshot of machine {update.machine_id!r} ({info.size_bytes} bytes) does not fit the "
                f"room left to on-request and daily snapshots (quota {self.quota_bytes} bytes, "
                f"{self.reserved_bytes} reserved for transition evidence): not kept")
        return info

    def _admit(self, machine_id: str) -> None:
        ok, refused = self.limiter.allow(machine_id)
        if ok:
            if refused:
                log.warning("on-request snapshots of machine %s: %d request(s) refused by the limit before this one",
                            machine_id, refused)
            return
        lim = self.limiter
        raise SnapshotRefused(
            f"on-request snapshot of machine {machine_id!r} refused: at most {lim.burst} at once and one per "
            f"{lim.interval_s:g} s (storage.snapshots.on_request_burst / on_request_interval_s); "
            f"next in {lim.wait_s(machine_id):.0f} s, {refused} refused since the last one")

    def _write_files(self, folder: Path, snap_id: str, update: MachineUpdate, waveforms: Mapping[str, np.ndarray],
                     reason: str, machine: Any, config_hash: str, detail: str) -> dict[str, Any]:
        from ..recordings import write_wav

        rpm = update.rpm
        shaft_hz = rpm / 60.0 if rpm else None
        points: dict[str, Any] = {}
        for pid, pu in update.points.items():
            res = pu.result
            bearing = None
            if machine is not None:
                try:
                    bearing = machine.point(pid).bearing
                except KeyError:
                    bearing = None
            entry: dict[str, Any] = {
                "state": pu.state, "reason": pu.reason, "health": asdict(pu.health), "bearing": bearing,
                "values": {name: {k: v for k, v in asdict(vs).items() if k != "name"} for name, vs in pu.values.items()},
                "waveform_file": None, "spectra_file": None,
            }
            if res is not None:
                entry.update({
                    "fs_hz": res.fs_hz, "n_samples": res.n_samples, "rpm": res.rpm, "rpm_source": res.rpm_source,
                    "overall_velocity_mm_s": res.overall_velocity_mm_s, "iso_zone": res.iso_zone,
                    "band_values": dict(res.bands), "waveform": asdict(res.waveform),
                    "envelope_band_hz": list(res.envelope_band_hz), "findings": [f.as_json() for f in res.findings],
                })
                wave = waveforms.get(pid)
                if wave is not None:
                    data = np.asarray(wave, dtype=np.float32)
                    if data.ndim != 1 or data.size == 0:
                        raise ValueError(f"snapshot {snap_id}: waveform of point {pid!r} must be 1-D and not empty, "
                                         f"got shape {data.shape}")
                    name = f"{pid}.wav"
                    write_wav(folder / name, data, res.fs_hz, "m/s2")
                    entry["waveform_file"] = name
                    entry["waveform_unit"] = "m/s^2"
                arrays: dict[str, np.ndarray] = {}
                for q in SPECTRA:
                    spec = getattr(res, q)
                    if spec is not None:
                        arrays[f"{q}_freqs_hz"] = np.asarray(spec.freqs_hz, dtype=np.float64)
                        arrays[f"{q}_amplitude"] = np.asarray(spec.amplitude, dtype=np.float64)
                        arrays[f"{q}_unit"] = np.array(spec.unit)
                if arrays:
                    name = f"{pid}.spectra.npz"
                    # numpy's stubs type the keyword arrays against its own allow_pickle flag
                    save_arrays: Callable[..., None] = np.savez_compressed
                    save_arrays(folder / name, **arrays)
                    entry["spectra_file"] = name
            if machine is not None and shaft_hz:
                entry["bands"] = bands_for(machine, pid, shaft_hz)
            points[pid] = entry
        return {
            "format": FORMAT, "id": snap_id, "machine": update.machine_id,
            "time_s": update.time_s, "time_utc": _time_utc(update.time_s),
            "taken_s": self._clock(), "clock_synchronized": wallclock.synchronized(), "seq": self._next_seq(),
            "reason": reason, "detail": detail, "config_hash": config_hash,
            "speed": {"rpm": rpm, "source": update.rpm_source, "shaft_hz": shaft_hz},
            "machine_state": update.state, "machine_reason": update.reason,
            "events": [asdict(e) for e in update.events],
            "markers": markers_for(machine, shaft_hz) if machine is not None and shaft_hz else [],
            "points": points,
        }

    # -- reading ------------------------------------------------------------------------------------
    def _folder(self, snap_id: str) -> Path:
        if not _ID.match(snap_id or "") or not (self.root / snap_id / SIDECAR).is_file():
            raise StorageError(f"snapshot {snap_id!r}: not found in {self.root} (see: rotorwatch snapshot list)")
        return self.root / snap_id

    def load(self, snap_id: str) -> dict[str, Any]:
        """The sidecar of snapshot ``snap_id`` as a dict."""
        path = self._folder(snap_id) / SIDECAR
        try:
            doc = json.loads(path.read_text())
        except (OSError, ValueError) as e:
            raise StorageError(f"{path}: unreadable snapshot sidecar: {e}") from e
        if not isinstance(doc, dict) or doc.get("format") != FORMAT:
            raise StorageError(f"{path}: not a {FORMAT} sidecar")
        return doc

    def _info(self, snap_id: str) -> SnapshotInfo:
        doc = self.load(snap_id)
        folder = self.root / snap_id
        size = sum(f.stat().st_size for f in folder.iterdir() if f.is_file())
        return SnapshotInfo(id=snap_id, path=folder, machine_id=doc.get("machine", ""),
                            time_s=float(doc.get("time_s", 0.0)), reason=doc.get("reason", ""),
                            detail=doc.get("detail", ""), points=tuple(doc.get("points", {})), size_bytes=size,
                            seq=int(doc.get("seq") or 0))

    def _next_seq(self) -> int:
        if self._seq is None:
            self._seq = max((i.seq for i in self.list()), default=0)
        self._seq += 1
        return self._seq

    def list(self, machine_id: str | None = None) -> list[SnapshotInfo]:
        """Every readable snapshot, by time (the quota evicts by saving order, ``seq``, instead: a
        wall clock stepped back does not reorder that); unreadable folders are skipped with a warning."""
        if not self.root.is_dir():
            return []
        out = []
        for folder in self.root.iterdir():
            if folder.name.startswith(".") or not folder.is_dir():
                continue
            try:
                info = self._info(folder.name)
            except StorageError as e:
                log.warning("skipping snapshot folder: %s", e)
                continue
            if machine_id is None or info.machine_id == machine_id:
                out.append(info)
        return sorted(out, key=lambda i: (i.time_s, i.id))

    def read_waveform(self, snap_id: str, point_id: str) -> tuple[np.ndarray, float]:
        """(samples in m/s^2 as float32, sample rate in Hz) of one point."""
        from ..recordings import open_recording, to_m_s2

        entry = self._point(snap_id, point_id)
        if not entry.get("waveform_file"):
            raise StorageError(f"snapshot {snap_id!r}: point {point_id!r} has no waveform")
        with open_recording(self.root / snap_id / entry["waveform_file"]) as rec:
            data = rec.read_all()[:, 0]
            unit, rate = rec.unit.name or "m/s2", rec.fs_hz  # snapshots from before units were written: m/s^2
        return to_m_s2(data, unit).astype(np.float32), float(entry.get("fs_hz", rate))

    def read_spectra(self, snap_id: str, point_id: str) -> dict[str, Spectrum]:
        """quantity -> :class:`Spectrum` of one point (only the quantities that were saved)."""
        entry = self._point(snap_id, point_id)
        if not entry.get("spectra_file"):
            return {}
        with np.load(self.root / snap_id / entry["spectra_file"], allow_pickle=False) as z:
            return {q: Spectrum(z[f"{q}_freqs_hz"], z[f"{q}_amplitude"], str(z[f"{q}_unit"]))
                    for q in SPECTRA if f"{q}_freqs_hz" in z}

    def _point(self, snap_id: str, point_id: str) -> dict[str, Any]:
        points = self.load(snap_id).get("points", {})
        if point_id not in points:
            raise StorageError(f"snapshot {snap_id!r}: no point {point_id!r}, it has: {', '.join(points) or 'none'}")
        return points[point_id]

    def last_time(self, machine_id: str, reason: str | None = None) -> float | None:
        """Time of the newest snapshot of ``machine_id`` (with ``reason``, when given)."""
        times = [i.time_s for i in self.list(machine_id) if reason is None or i.reason == reason]
        return max(times) if times else None

    # -- quota --------------------------------------------------------------------------------------
    def total_bytes(self) -> int:
        return sum(i.size_bytes for i in self.list())

    def delete(self, snap_id: str) -> None:
        shutil.rmtree(self._folder(snap_id))

    def prune(self, keep: str | None = None) -> builtins.list[str]:
        """Enforce the quota rule of :mod:`rotorwatch.storage.snapshot_quota`; returns the ids deleted.

        ``keep``: the snapshot just saved (a transition snapshot is kept even when it alone is larger
        than the quota; an on-request or daily one only when it fits the room left to them)."""
        infos = self.list()
        others, trans = evictions(infos, self.quota_bytes, self.reserved_bytes, keep)
        for info in trans:
            log.warning("transition evidence %s (%d bytes) deleted to make room for newer transition evidence "
                        "(quota %d bytes; raise storage.snapshots.quota_bytes to keep more)",
                        info.id, info.size_bytes, self.quota_bytes)
        for info in others + trans:
            shutil.rmtree(info.path, ignore_errors=True)
        total = sum(i.size_bytes for i in infos) - sum(i.size_bytes for i in others + trans)
        if others:
            log.info("snapshots pruned to the quota removed=%d total_bytes=%d quota_bytes=%d",
                     len(others), total, self.quota_bytes)
        if total > self.quota_bytes:
            log.warning("snapshot %s alone is larger than the quota (%d > %d bytes): kept", keep, total, self.quota_bytes)
        return [i.id for i in others + trans]
