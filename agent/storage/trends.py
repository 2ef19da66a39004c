"""The trend store: every trended value of every update, kept by age and by row count (sqlite3).

A row is ``(time_s, machine, point, value name, value, unit, state)``. From each
:class:`~rotorwatch.alarms.records.MachineUpdate` the store keeps

- every :class:`~rotorwatch.alarms.records.ValueStatus` of every point (bands, ``overall``), with its
  alarm state; a value that has chattered also gets a row ``<value>:chatter`` (unit ``1``, its chatter
  count so far, state ``-``) on every update from its first chatter on;
- every finding named in the machine's ``alarms.findings``, as value ``finding:<NAME>`` (unit ``1``,
  the finding's strength, NULL in an update without it) with the state it raises;
- the waveform figures of every analyzed point: ``rms_m_s2``, ``peak_m_s2``, ``crest_factor``,
  ``kurtosis`` (state ``-``: they are trended, not alarmed here);
- the machine's speed as value ``speed`` (unit ``rpm``) on point ``""`` (machine level), with the
  machine state.

Non-finite values are stored as NULL. Retention: rows older than ``retention_days`` (by the store's
clock, not the update time) are deleted every ``prune_interval_s``; the row count is held at
``max_rows`` at once by deleting the oldest rows. Series names are in a small table of their own, so a
row costs about 30 bytes.

Durability: WAL with ``synchronous=NORMAL`` (a crash or kill of the agent loses nothing committed; a
power cut may lose the last few updates, which are also in the publish spool).
Threading: one connection behind a lock; call from any thread.
"""

from __future__ import annotations

import logging
import math
import sqlite3
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from ..alarms.records import MachineUpdate
from . import TRENDS_FILE, StorageError

log = logging.getLogger(__name__)

DAY_S = 86400.0
SCHEMA_VERSION = 1
NO_STATE = "-"

_SCHEMA = """
CREATE TABLE IF NOT EXISTS series (
    id INTEGER PRIMARY KEY,
    machine TEXT NOT NULL, point TEXT NOT NULL, name TEXT NOT NULL, unit TEXT NOT NULL,
    UNIQUE (machine, point, name, unit)
);
CREATE TABLE IF NOT EXISTS samples (
    time_s REAL NOT NULL, series INTEGER NOT NULL REFERENCES series(id), value REAL, state TEXT NOT NULL
);
CREATE INDEX IF NOT EXISTS samples_series_time ON samples (series, time_s);
CREATE INDEX IF NOT EXISTS samples_time ON samples (time_s);
"""


@dataclass(frozen=True)
class TrendRow:
    time_s: float
    machine: str
    point: str  # "" for machine-level values (speed)
    name: str
    value: float | None
    unit: str
    state: str


@dataclass(frozen=True)
class SeriesInfo:
    machine: str
    point: str
    name: str
    unit: str
    rows: int
    first_s: float | None
    last_s: float | None


@dataclass(frozen=True)
class TrendStats:
    rows: int
    series: int
    pruned_by_age: int  # since this store was opened
    pruned_by_count: int


def _finite(x: Any) -> float | None:
    try:
        v = float(x)
    except (TypeError, ValueError):
        return None
    return v if math.isfinite(v) else None


def rows_of(update: MachineUpdate) -> list[tuple[str, str, str, float | None, str]]:
    """(point, name, unit, value, state) of everything trended from one update."""
    out: list[tuple[str, str, str, float | None, str]] = []
    if update.rpm is not None:
        out.append(("", "speed", "rpm", _finite(update.rpm), update.state))
    for point_id, pu in update.points.items():
        for vs in pu.values.values():
            out.append((point_id, vs.name, vs.unit, _finite(vs.value), vs.state))
            if vs.chatter:
                out.append((point_id, f"{vs.name}:chatter", "1", float(vs.chatter), NO_STATE))
        for name, fs in pu.findings.items():
            out.append((point_id, f"finding:{name}", "1", _finite(fs.strength), fs.state))
        if pu.result is not None:
            w = pu.result.waveform
            out += [
                (point_id, "rms_m_s2", "m/s^2", _finite(w.rms_m_s2), NO_STATE),
                (point_id, "peak_m_s2", "m/s^2", _finite(w.peak_m_s2), NO_STATE),
                (point_id, "crest_factor", "1", _finite(w.crest_factor), NO_STATE),
                (point_id, "kurtosis", "1", _finite(w.kurtosis), NO_STATE),
            ]
    return out


class TrendStore:
    """Per-update values in ``path`` (see the module docstring).

    ``read_only=True`` opens an existing store for the ``trend`` command (no pruning, no writes).
    """

    def __init__(self, path: str | Path, *, retention_days: float = 90.0, max_rows: int = 4_000_000,
                 min_interval_s: float = 0.0, prune_interval_s: float = 3600.0,
                 clock: Callable[[], float] = time.time, read_only: bool = False) -> None:
        if not retention_days > 0 or max_rows < 1 or min_interval_s < 0 or not prune_interval_s > 0:
            raise ValueError(f"trend store retention_days={retention_days}, max_rows={max_rows}, "
                             f"min_interval_s={min_interval_s}, prune_interval_s={prune_interval_s}: out of range")
        self.path = Path(path)
        self.retention_s = float(retention_days) * DAY_S
        self.max_rows = int(max_rows)
        self.min_interval_s = float(min_interval_s)
        self.prune_interval_s = float(prune_interval_s)
        self.read_only = read_only
        self._clock = clock
        self._lock = threading.Lock()
        self._series: dict[tuple[str, str, str, str], int] = {}
        self._last_stored: dict[int, float] = {}
        self._pruned_age = self._pruned_count = 0
        try:
            self._db = self._open()
            self._rows = self._db.execute("SELECT COUNT(*) FROM samples").fetchone()[0]
            for sid, m, p, n, u in self._db.execute("SELECT id, machine, point, name, unit FROM series"):
                self._series[(m, p, n, u)] = sid
        except sqlite3.Error as e:
            raise StorageError(f"{self.path}: cannot open the trend store: {e}") from e
        self._last_prune_s = float("-inf")
        self._logged_at_s = float("-inf")
        self._unlogged = [0, 0]  # rows pruned by age, by count since the last log line

    @classmethod
    def in_state_dir(cls, state_dir: str | Path, settings: Any = None, **kwargs: Any) -> TrendStore:
        """Open ``<state_dir>/trends.sqlite`` with a :class:`~rotorwatch.settings.storage.TrendSettings`."""
        if settings is not None:
            for key in ("retention_days", "max_rows", "min_interval_s", "prune_interval_s"):
                kwargs.setdefault(key, getattr(settings, key))
        return cls(Path(state_dir) / TRENDS_FILE, **kwargs)

    def _open(self) -> sqlite3.Connection:
        if self.read_only:
            if not self.path.is_file():
                raise StorageError(f"{self.path}: no trend store here (check --state-dir; the daemon "
                                   "creates it with its first update)")
            db = sqlite3.connect(f"file:{self.path}?mode=ro", uri=True, check_same_thread=False)
            if db.execute("SELECT COUNT(*) FROM sqlite_master WHERE name = 'samples'").fetchone()[0] == 0:
                db.close()
                raise StorageError(f"{self.path}: not a rotorwatch trend store (no samples table)")
            return db
        self.path.parent.mkdir(parents=True, exist_ok=True)
        db = sqlite3.connect(self.path, isolation_level=None, check_same_thread=False, timeout=10.0)
        version = db.execute("PRAGMA user_version").fetchone()[0]
        if version > SCHEMA_VERSION:
            db.close()
            raise StorageError(f"{self.path}: trend schema version {version} is newer than this rotorwatch "
                               f"understands ({SCHEMA_VERSION})")
        db.execute("PRAGMA journal_mode=WAL")
        db.execute("PRAGMA synchronous=NORMAL")
        db.executescript(_SCHEMA)
        db.execute(f"PRAGMA user_version={SCHEMA_VERSION}")
        return db

    def close(self) -> None:
        with self._lock:
            if self._db is not None:
                self._db.close()
                self._db = None  # type: ignore[assignment]

    def __enter__(self) -> TrendStore:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    # -- writing ----------------------------------------------------------------------------------
    def _series_id(self, machine: str, point: str, name: str, unit: str) -> int:
        key = (machine, point, name, unit)
        sid = self._series.get(key)
        if sid is None:
            self._db.execute("INSERT OR IGNORE INTO series (machine, point, name, unit) VALUES (?, ?, ?, ?)", key)
            sid = self._db.execute("SELECT id FROM series WHERE machine = ? AND point = ? AND name = ? AND unit = ?",
                                   key).fetchone()[0]
            self._series[key] = sid
        return sid

    def record(self, update: MachineUpdate) -> int:
        """Store the trended values of one update; returns the rows written (prunes when due)."""
        if self.read_only:
            raise StorageError(f"{self.path}: trend store opened read-only")
        t = float(update.time_s)
        with self._lock:
            try:
                self._db.execute("BEGIN IMMEDIATE")
                batch = []
                for point, name, unit, value, state in rows_of(update):
                    sid = self._series_id(update.machine_id, point, name, unit)
                    if self.min_interval_s > 0:
                        last = self._last_stored.get(sid)
                        if last is None:
                            last = self._db.execute("SELECT MAX(time_s) FROM samples WHERE series = ?",
                                                    (sid,)).fetchone()[0]
                        if last is not None and t - last < self.min_interval_s:
                            continue
                        self._last_stored[sid] = t
                    batch.append((t, sid, value, state))
                self._db.executemany("INSERT INTO samples (time_s, series, value, state) VALUES (?, ?, ?, ?)", batch)
                self._db.execute("COMMIT")
            except sqlite3.Error as e:
                self._db.execute("ROLLBACK") if self._db.in_transaction else None
                self._last_stored.clear()
                raise StorageError(f"{self.path}: trend write failed: {e}") from e
            self._rows += len(batch)
        now = self._clock()
        if self._rows > self.max_rows or now - self._last_prune_s >= self.prune_interval_s:
            self.prune(now)
        return len(batch)

    def prune(self, now_s: float | None = None) -> int:
        """Delete rows older than the retention and the oldest rows above ``max_rows``; returns how many."""
        now = self._clock() if now_s is None else float(now_s)
        with self._lock:
            try:
                self._db.execute("BEGIN IMMEDIATE")
                aged = self._db.execute("DELETE FROM samples WHERE time_s < ?", (now - self.retention_s,)).rowcount
                self._rows -= aged
                excess = self._rows - self.max_rows
                counted = 0
                if excess > 0:
                    counted = self._db.execute(
                        "DELETE FROM samples WHERE rowid IN (SELECT rowid FROM samples ORDER BY time_s LIMIT ?)",
                        (excess,)).rowcount
                    self._rows -= counted
                self._db.execute("COMMIT")
            except sqlite3.Error as e:
                if self._db.in_transaction:
                    self._db.execute("ROLLBACK")
                self._rows = self._db.execute("SELECT COUNT(*) FROM samples").fetchone()[0]
                raise StorageError(f"{self.path}: trend pruning failed: {e}") from e
            self._last_prune_s = now
            self._pruned_age += aged
            self._pruned_count += counted
            self._last_stored.clear()
        # once at the row bound every write prunes: note it at most once per prune interval (at least a
        # minute), with what was pruned since the last note, so the journal does not get a line per update
        self._unlogged[0] += aged
        self._unlogged[1] += counted
        if any(self._unlogged) and now - self._logged_at_s >= max(self.prune_interval_s, 60.0):
            log.info("trend store pruned by_age=%d by_count=%d rows=%d", *self._unlogged, self._rows)
            self._unlogged = [0, 0]
            self._logged_at_s = now
        return aged + counted

    # -- reading ----------------------------------------------------------------------------------
    def query(self, machine: str | None = None, point: str | None = None, value: str | None = None,
              since_s: float | None = None, until_s: float | None = None,
              limit: int | None = None) -> list[TrendRow]:
        """Rows matching every given filter, oldest first; ``limit`` keeps the newest ``limit`` rows."""
        where: list[str] = []
        args: list[str | float | int] = []
        for column, wanted in (("s.machine", machine), ("s.point", point), ("s.name", value)):
            if wanted is not None:
                where.append(f"{column} = ?")
                args.append(wanted)
        if since_s is not None:
            where.append("x.time_s >= ?")
            args.append(float(since_s))
        if until_s is not None:
            where.append("x.time_s <= ?")
            args.append(float(until_s))
        sql = ("SELECT x.time_s, s.machine, s.point, s.name, x.value, s.unit, x.state "
               "FROM samples x JOIN series s ON s.id = x.series")
        if where:
            sql += " WHERE " + " AND ".join(where)
        if limit is not None:
            sql += " ORDER BY x.time_s DESC, x.rowid DESC LIMIT ?"
            args.append(int(limit))
        else:
            sql += " ORDER BY x.time_s, x.rowid"
        with self._lock:
            try:
                rows = [TrendRow(*r) for r in self._db.execute(sql, args)]
            except sqlite3.Error as e:
                raise StorageError(f"{self.path}: trend query failed: {e}") from e
        return rows[::-1] if limit is not None else rows

    def series(self) -> list[SeriesInfo]:
        """Every series with its row count and time span."""
        with self._lock:
            rows = self._db.execute(
                "SELECT s.machine, s.point, s.name, s.unit, COUNT(x.rowid), MIN(x.time_s), MAX(x.time_s) "
                "FROM series s LEFT JOIN samples x ON x.series = s.id "
                "GROUP BY s.id ORDER BY s.machine, s.point, s.name").fetchall()
        return [SeriesInfo(*r) for r in rows]

    def stats(self) -> TrendStats:
        with self._lock:
            return TrendStats(rows=self._rows, series=len(self._series), pruned_by_age=self._pruned_age,
                              pruned_by_count=self._pruned_count)
