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
- with a tach, the tach-locked 1x and 2x of every analyzed point (:mod:`rotorwatch.analysis.tachphase`):
  ``1x_velocity_mm_s`` (unit ``mm/s``), ``1x_phase_deg`` (unit ``deg``), the same for ``2x`` (state ``-``);
- the machine's speed as value ``speed`` (unit ``rpm``) on point ``""`` (machine level), with the
  machine state.

Non-finite values are stored as NULL. Retention: rows older than ``retention_days`` (by the store's
clock, not the update time) are deleted every ``prune_interval_s``; the row count is held at
``max_rows`` at every commit by deleting the oldest rows in the same transaction. The age cutoff never moves faster than the
monotonic clock: at open it starts at the newest stored row (or now, if earlier) minus the retention,
then follows ``now - retention`` but advances at most by the monotonic time elapsed. So a wall clock
that steps forwards by a year does not wipe the store (the data ages at the real pace), and one that
steps back lowers the cutoff at once (nothing stalls; rows stamped in the "future" stay until their age
by the new clock passes the retention, and the row bound holds throughout). Series names are in a small table of their own, so a
row costs about 30 bytes.

Writes are batched to spare flash: rows wait in memory and are committed together every
``flush_interval_s`` (monotonic clock), at close and before a query. One commit per batch instead of
one per update writes each touched page once per batch (measured with tests/bench/disk_wear.py).

Durability: WAL with ``synchronous=NORMAL``: committed batches survive a crash or kill of the agent;
a power cut may lose the batches committed since the last checkpoint, and the rows still in memory
(at most ``flush_interval_s``) are lost on a kill or a power cut. They were also published. The WAL
is checkpointed every ``WAL_CHECKPOINT_PAGES`` pages and truncated to ``WAL_LIMIT_BYTES`` after a
checkpoint, so ``trends.sqlite-wal`` stays small whatever the row bound.

A file sqlite reports as damaged (a torn write after a power cut) is set aside at open, or at the
first write that finds the damage, with one warning naming it (:mod:`rotorwatch.storage.recovery`);
the store starts empty and monitoring goes on.
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
from typing import Any, NoReturn

from ..alarms.records import MachineUpdate
from ..analysis.tachphase import readings as order_readings
from . import TRENDS_FILE, StorageError
from .recovery import SQLITE_COMPANIONS, is_corruption, set_aside

log = logging.getLogger(__name__)

DAY_S = 86400.0
SCHEMA_VERSION = 1
NO_STATE = "-"
WAL_CHECKPOINT_PAGES = 256  # 1 MiB of 4 KiB pages (sqlite's default: 1000)
WAL_LIMIT_BYTES = 1024 * 1024

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
            for o in order_readings(pu.result):
                out += [
                    (point_id, f"{o.order}_velocity_mm_s", "mm/s", _finite(o.velocity_mm_s), NO_STATE),
                    (point_id, f"{o.order}_phase_deg", "deg", _finite(o.phase_deg), NO_STATE),
                ]
    return out


class TrendStore:
    """Per-update values in ``path`` (see the module docstring).

    ``read_only=True`` opens an existing store for the ``trend`` command (no pruning, no writes).
    """

    def __init__(self, path: str | Path, *, retention_days: float = 90.0, max_rows: int = 4_000_000,
                 min_interval_s: float = 0.0, prune_interval_s: float = 3600.0, flush_interval_s: float = 0.0,
                 clock: Callable[[], float] = time.time, monotonic: Callable[[], float] = time.monotonic,
                 read_only: bool = False) -> None:
        if not retention_days > 0 or max_rows < 1 or min_interval_s < 0 or not prune_interval_s > 0:
            raise ValueError(f"trend store retention_days={retention_days}, max_rows={max_rows}, "
                             f"min_interval_s={min_interval_s}, prune_interval_s={prune_interval_s}: out of range")
        self.path = Path(path)
        self.retention_s = float(retention_days) * DAY_S
        self.max_rows = int(max_rows)
        self.min_interval_s = float(min_interval_s)
        self.prune_interval_s = float(prune_interval_s)
        self.flush_interval_s = max(0.0, float(flush_interval_s))
        self.read_only = read_only
        self._clock = clock
        self._monotonic = monotonic
        self._lock = threading.Lock()
        self._series: dict[tuple[str, str, str, str], int] = {}
        self._last_stored: dict[int, float] = {}
        self._pending: list[tuple[float, int, float | None, str]] = []
        self._flushed_at = monotonic()
        self._pruned_age = self._pruned_count = 0
        try:
            self._load()
        except sqlite3.Error as e:
            if read_only or not is_corruption(e):
                raise StorageError(f"{self.path}: cannot open the trend store: {e}") from e
            self._recover(e)
        self._last_prune_s = float("-inf")
        self._cutoff: tuple[float, float] | None = None  # (age cutoff, monotonic time it was set)
        self._logged_at_s = float("-inf")
        self._unlogged = [0, 0]  # rows pruned by age, by count since the last log line

    def _load(self) -> None:
        self._db = self._open()
        self._rows = self._db.execute("SELECT COUNT(*) FROM samples").fetchone()[0]
        self._series.clear()
        for sid, m, p, n, u in self._db.execute("SELECT id, machine, point, name, unit FROM series"):
            self._series[(m, p, n, u)] = sid

    def _recover(self, error: sqlite3.Error) -> None:
        """Set a damaged file aside and start an empty store (one warning naming the file)."""
        db = getattr(self, "_db", None)
        if db is not None:
            db.close()
        self._last_stored.clear()
        try:
            set_aside(self.path, error, SQLITE_COMPANIONS)
            self._load()
        except (OSError, sqlite3.Error) as e:
            raise StorageError(f"{self.path}: damaged trend store ({error}) and no fresh one: {e}") from e

    @classmethod
    def in_state_dir(cls, state_dir: str | Path, settings: Any = None, **kwargs: Any) -> TrendStore:
        """Open ``<state_dir>/trends.sqlite`` with a :class:`~rotorwatch.settings.storage.TrendSettings`."""
        if settings is not None:
            for key in ("retention_days", "max_rows", "min_interval_s", "prune_interval_s", "flush_interval_s"):
                if hasattr(settings, key):
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
        db.execute(f"PRAGMA wal_autocheckpoint={WAL_CHECKPOINT_PAGES}")
        db.execute(f"PRAGMA journal_size_limit={WAL_LIMIT_BYTES}")
        db.executescript(_SCHEMA)
        db.execute(f"PRAGMA user_version={SCHEMA_VERSION}")
        return db

    def close(self) -> None:
        try:
            self.flush()
        except StorageError as e:
            log.error("%s", e)
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
        """Queue the trended values of one update; returns the rows queued (flushes and prunes when due)."""
        if self.read_only:
            raise StorageError(f"{self.path}: trend store opened read-only")
        t = float(update.time_s)
        with self._lock:
            try:
                batch = self._rows_to_keep(update, t)
            except sqlite3.Error as e:
                self._failed(e, "trend write")
            self._pending += batch
        if self._monotonic() - self._flushed_at >= self.flush_interval_s or len(self._pending) >= 20_000:
            self.flush()
        now = self._clock()
        if now - self._last_prune_s >= self.prune_interval_s:
            self.prune(now)
        return len(batch)

    def _rows_to_keep(self, update: MachineUpdate, t: float) -> list[tuple[float, int, float | None, str]]:
        batch = []
        for point, name, unit, value, state in rows_of(update):
            sid = self._series_id(update.machine_id, point, name, unit)
            if self.min_interval_s > 0:
                last = self._last_stored.get(sid)
                if last is None:
                    last = self._db.execute("SELECT MAX(time_s) FROM samples WHERE series = ?", (sid,)).fetchone()[0]
                if last is not None and abs(t - last) < self.min_interval_s:
                    continue
                self._last_stored[sid] = t
            batch.append((t, sid, value, state))
        return batch

    def _failed(self, e: sqlite3.Error, what: str) -> NoReturn:
        """Roll back; set a damaged file aside (the store goes on empty); raise a one-line StorageError."""
        if self._db.in_transaction:
            self._db.execute("ROLLBACK")
        self._last_stored.clear()
        if is_corruption(e):
            self._pending.clear()
            self._recover(e)
        raise StorageError(f"{self.path}: {what} failed: {e}") from e

    def flush(self) -> int:
        """Commit the rows waiting in memory in one transaction; returns how many."""
        with self._lock:
            self._flushed_at = self._monotonic()
            if not self._pending or self._db is None:
                return 0
            batch, self._pending = self._pending, []
            try:
                self._db.execute("BEGIN IMMEDIATE")
                self._db.executemany("INSERT INTO samples (time_s, series, value, state) VALUES (?, ?, ?, ?)", batch)
                counted = self._delete_excess(self._rows + len(batch))  # the row bound holds at every commit
                self._db.execute("COMMIT")
            except sqlite3.Error as e:
                self._failed(e, "trend write")
            self._rows += len(batch) - counted
            if counted:
                self._pruned_count += counted
                self._unlogged[1] += counted
                self._last_stored.clear()
            return len(batch)

    def _delete_excess(self, rows: int) -> int:
        """Delete the oldest rows above ``max_rows`` of ``rows`` (inside the caller's transaction);
        returns how many."""
        excess = rows - self.max_rows
        if excess <= 0:
            return 0
        return int(self._db.execute(
            "DELETE FROM samples WHERE rowid IN (SELECT rowid FROM samples ORDER BY time_s LIMIT ?)",
            (excess,)).rowcount)

    def prune(self, now_s: float | None = None) -> int:
        """Delete rows older than the retention and the oldest rows above ``max_rows``; returns how many."""
        now = self._clock() if now_s is None else float(now_s)
        self.flush()
        with self._lock:
            try:
                self._db.execute("BEGIN IMMEDIATE")
                aged = self._db.execute("DELETE FROM samples WHERE time_s < ?", (self._age_cutoff(now),)).rowcount
                counted = self._delete_excess(self._rows - aged)
                self._db.execute("COMMIT")
            except sqlite3.Error as e:
                self._failed(e, "trend pruning")
            self._rows -= aged + counted
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

    def _age_cutoff(self, now: float) -> float:
        """Rows before this time are past the retention (see the module docstring: clock steps)."""
        mono = self._monotonic()
        if self._cutoff is None:
            newest = self._db.execute("SELECT MAX(time_s) FROM samples").fetchone()[0]
            cutoff = (now if newest is None else min(now, float(newest))) - self.retention_s
        else:
            last, at = self._cutoff
            cutoff = min(now - self.retention_s, last + max(0.0, mono - at))
        self._cutoff = (cutoff, mono)
        return cutoff

    # -- reading ----------------------------------------------------------------------------------
    def query(self, machine: str | None = None, point: str | None = None, value: str | None = None,
              since_s: float | None = None, until_s: float | None = None,
              limit: int | None = None) -> list[TrendRow]:
        """Rows matching every given filter, oldest first; ``limit`` keeps the newest ``limit`` rows."""
        if not self.read_only:
            self.flush()
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
        if not self.read_only:
            self.flush()
        with self._lock:
            rows = self._db.execute(
                "SELECT s.machine, s.point, s.name, s.unit, COUNT(x.rowid), MIN(x.time_s), MAX(x.time_s) "
                "FROM series s LEFT JOIN samples x ON x.series = s.id "
                "GROUP BY s.id ORDER BY s.machine, s.point, s.name").fetchall()
        return [SeriesInfo(*r) for r in rows]

    def stats(self) -> TrendStats:
        with self._lock:
            return TrendStats(rows=self._rows + len(self._pending), series=len(self._series), pruned_by_age=self._pruned_age,
                              pruned_by_count=self._pruned_count)
