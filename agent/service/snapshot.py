"""Evidence snapshots on request (the ``snapshot`` command, the status page's button).

A snapshot is one ``.npz`` file per machine in ``<state_dir>/snapshots/<machine>/``, named by the UTC
time of the window's end (``20260301T120005.250Z.npz``). It holds, per point, the newest analysis window
in volts at the input (``volts_<point>``, float32) and, as ``meta`` (a JSON string), the sample rate,
the window's end time, the point states and values of the latest update, and the agent's id.
Load it with ``numpy.load(path)``; ``json.loads(str(f["meta"]))`` gives the metadata.
"""

from __future__ import annotations

import json
import os
from datetime import datetime, timezone
from pathlib import Path

import numpy as np

from rotorwatch.alarms.records import MachineUpdate
from rotorwatch.errors import RotorwatchError
from rotorwatch.service import payloads


def write_snapshot(state_dir: Path, agent_id: str, machine_id: str, fs_hz: float, end_time_s: float,
                   blocks_v: dict[str, np.ndarray], update: MachineUpdate | None) -> Path:
    """Write one snapshot atomically (temporary file + rename); returns its path."""
    if not blocks_v:
        raise RotorwatchError(f"snapshot of machine {machine_id!r}: no samples held yet (the first window is still filling)")
    folder = Path(state_dir) / "snapshots" / machine_id
    stamp = datetime.fromtimestamp(end_time_s, tz=timezone.utc).strftime("%Y%m%dT%H%M%S") + f".{int(end_time_s * 1000) % 1000:03d}Z"
    path = folder / f"{stamp}.npz"
    meta = {
        "agent": agent_id,
        "machine": machine_id,
        "sample_rate_hz": fs_hz,
        "end_time_s": end_time_s,
        "end_time": payloads.iso_time(end_time_s),
        "points": sorted(blocks_v),
        "unit": "V",
    }
    if update is not None:
        meta["update"] = {
            "state": update.state,
            "reason": update.reason,
            "rpm": payloads.num(update.rpm),
            "points": {pid: payloads.point_state_payload(update, pu, agent_id) for pid, pu in update.points.items()},
        }
    arrays = {f"volts_{pid}": np.asarray(block, dtype=np.float32) for pid, block in blocks_v.items()}
    try:
        folder.mkdir(parents=True, exist_ok=True)
        tmp = folder / f".{stamp}.tmp.npz"
        np.savez_compressed(tmp, meta=np.array(json.dumps(meta, allow_nan=False, default=str)), **arrays)
        os.replace(tmp, path)
    except OSError as e:
        raise RotorwatchError(f"snapshot: cannot write {path}: {e.strerror or e}") from None
    return path
