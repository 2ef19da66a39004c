"""A restarted daemon's projections start from the trend store, not from nothing.

Each value's time to its levels (:mod:`rotorwatch.alarms.projection`) fits the value's last
``alarms.projection.window_hours``. The monitor keeps that window in memory; at start this module fills it
from the rows the trend store (``<state_dir>/trends.sqlite``, :mod:`rotorwatch.storage.trends`) holds for
the machine, so a restart (or a reload that rebuilds the machine) projects at once. A store that is
missing, or cannot be read, leaves the windows empty with one log line: monitoring goes on.
"""

from __future__ import annotations

import logging
import sqlite3
from pathlib import Path

from ..alarms.monitor import MachineMonitor
from ..logs import fields
from ..storage import TRENDS_FILE, StorageError

log = logging.getLogger(__name__)


def seed_projections(monitor: MachineMonitor, state_dir: Path) -> int:
    """Fill ``monitor``'s trend windows from the store's rows of its machine; returns the rows taken."""
    settings = monitor.machine.alarms.projection
    path = Path(state_dir) / TRENDS_FILE
    if not settings.enabled or not path.is_file():
        return 0
    from ..storage.trends import TrendStore

    window_s = settings.window_hours * 3600.0
    taken = 0
    try:
        store = TrendStore(path, read_only=True)
        try:
            for info in store.series():
                slots = monitor.slots.get(info.point)
                if info.machine != monitor.machine.id or slots is None or info.name not in slots or info.last_s is None:
                    continue
                rows = store.query(machine=info.machine, point=info.point, value=info.name,
                                   since_s=info.last_s - window_s)
                samples = [(r.time_s, r.value) for r in rows
                           if r.value is not None and r.state in ("learning", "normal", "warning", "alarm")]
                taken += monitor.seed_trend(info.point, info.name, samples)
        finally:
            store.close()
    except (StorageError, OSError, sqlite3.Error) as e:
        log.warning("trend windows not seeded from the trend store", extra=fields(machine=monitor.machine.id, error=str(e)))
        return 0
    if taken:
        log.info("trend windows seeded from the trend store", extra=fields(machine=monitor.machine.id, rows=taken))
    return taken
