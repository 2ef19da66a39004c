"""The publish spool: a durable, bounded store-and-forward queue of what the agent publishes.

A record (``state``, ``metrics`` or ``event``) is stored in sqlite (:meth:`Spool.append`, or
:meth:`Spool.store` for records that waited in memory first, the outbox's default) and deleted when
the broker has acknowledged it (:meth:`Spool.ack_many`, on PUBACK). Each record gets ``seq`` (per
agent, strictly increasing, never reused: not after a restart, a delete, a drop or a ``kill -9``) and
``ts`` (POSIX time from the injected clock), both added to JSON payloads with ``clock`` when the
``clock_note`` has something to say about ``ts`` (``{"seq": 17, "ts": 1767225600.123, ...}``), so a
consumer can discard duplicates and see gaps. Bytes payloads are stored as given.

Durability (``durability`` -> sqlite ``PRAGMA synchronous`` in WAL mode): ``power_loss`` (default,
``FULL``: the WAL is fsynced at every commit; a stored record survives a power cut) or ``process_crash``
(``NORMAL``: commits survive a crash or ``kill -9``; the last ones before a power cut may be lost).
Acknowledgements and records from memory are committed in batches.

Threading: one sqlite connection behind a lock; every method may be called from any thread. No
method blocks on the network. Only one process may open a spool (an ``flock`` on ``<path>.lock``).
A file sqlite calls damaged is set aside (``spool.sqlite.damaged-<UTC>``, one warning) and the spool
starts empty.

Full policy (when a record would pass ``max_bytes`` or ``max_records``): see
:mod:`rotorwatch.storage.spool_full`; every drop is counted by reason in :meth:`stats` ``dropped``.
Records the broker refuses or paho cannot send are deleted through :meth:`reject` (``broker_rejected``,
``unsendable``).
"""

from __future__ import annotations

import fcntl
import logging
import os
import sqlite3
import threading
import time
from collections.abc import Callable, Iterable, Iterator, Mapping
from contextlib import contextmanager
from pathlib import Path
from typing import Any, Literal

from . import SPOOL_FILE, StorageError
from .recovery import SQLITE_COMPANIONS, is_corruption, set_aside
from .spool_full import make_room
from .spool_payloads import KINDS, Record, SpoolStats, check_record, encode_payload

__all__ = ["KINDS", "Record", "Spool", "SpoolStats"]

log = logging.getLogger(__name__)

DROP_REASONS = (
    "state_superseded", "metrics_thinned", "metrics_oldest", "event_oldest", "state_oldest",
    "oversize", "broker_rejected", "unsendable",
)
#: Bytes counted per record on top of topic and payload (seq, ts, kind, flags, row header).
RECORD_OVERHEAD_BYTES = 32
SCHEMA_VERSION = 1
#: Seqs for records kept in memory are reserved on disk this many at a time (one commit per block).
SEQ_BLOCK = 4096
WAL_CHECKPOINT_PAGES = 256
WAL_LIMIT_BYTES = 1024 * 1024
_SYNCHRONOUS = {"power_loss": "FULL", "process_crash": "NORMAL"}

_SCHEMA = """
CREATE TABLE IF NOT EXISTS meta (key TEXT PRIMARY KEY, value INTEGER NOT NULL);
CREATE TABLE IF NOT EXISTS records (
    seq INTEGER PRIMARY KEY,
    ts_s REAL NOT NULL,
    kind TEXT NOT NULL,
    topic TEXT NOT NULL,
    payload BLOB NOT NULL,
    qos INTEGER NOT NULL,
    retain INTEGER NOT NULL,
    size_bytes INTEGER NOT NULL
);
CREATE INDEX IF NOT EXISTS records_kind_seq ON records (kind, seq, size_bytes);
CREATE INDEX IF NOT EXISTS records_state_topic ON records (topic, seq) WHERE kind = 'state';
CREATE TABLE IF NOT EXISTS retained (topic TEXT PRIMARY KEY, seq INTEGER NOT NULL);
"""


class Spool:
    """A durable, bounded publish queue in one sqlite file (see the module docstring).

    Parameters: ``path`` of the sqlite file (created with its directory), ``max_bytes`` and
    ``max_records`` (the bounds of the full policy), ``durability`` (``power_loss`` |
    ``process_crash``), ``clock`` (POSIX seconds, for ``ts``).
    """

    def __init__(self, path: str | Path, max_bytes: int = 64 * 1024 * 1024, max_records: int = 200_000,
                 *, durability: Literal["power_loss", "process_crash"] = "power_loss",
                 clock: Callable[[], float] = time.time,
                 clock_note: Callable[[float], str | None] | None = None) -> None:
        if max_bytes < 1024 or max_records < 2:
            raise ValueError(f"spool bounds max_bytes={max_bytes}, max_records={max_records}: too small")
        if durability not in _SYNCHRONOUS:
            raise ValueError(f"durability = {durability!r}: must be one of {sorted(_SYNCHRONOUS)}")
        self.path = Path(path)
        self.max_bytes = int(max_bytes)
        self.max_records = int(max_records)
        self.durability = durability
        self._clock = clock
        self._clock_note = clock_note  # ts -> the payload's "clock" flag (wallclock.ClockWatch), or None
        self._lock = threading.RLock()
        self._in_flight: dict[int, int] = {}  # seq -> mid
        self._listeners: list[Callable[[int], None]] = []
        self._event_warned_s = float("-inf")
        self._lock_fd: int | None = self._take_file_lock()
        try:
            try:
                self._db, self.set_aside_as = self._open(), None
                self._load()
            except sqlite3.Error as e:
                if not is_corruption(e):
                    raise
                self._close_quietly()  # a damaged file: aside with one warning, start an empty spool
                self.set_aside_as = set_aside(self.path, e, SQLITE_COMPANIONS)
                self._db = self._open()
                self._load()
        except sqlite3.Error as e:
            self._release_file_lock()
            raise StorageError(f"{self.path}: cannot open the spool: {e}") from e
        except BaseException:
            self._release_file_lock()
            raise

    def _close_quietly(self) -> None:
        db, self._db = getattr(self, "_db", None), None  # type: ignore[assignment]
        if db is not None:
            db.close()

    @classmethod
    def in_state_dir(cls, state_dir: str | Path, settings: Any = None, **kwargs: Any) -> Spool:
        """Open ``<state_dir>/spool.sqlite`` with a :class:`~rotorwatch.settings.storage.SpoolSettings`."""
        if settings is not None:
            kwargs.setdefault("max_bytes", settings.max_bytes)
            kwargs.setdefault("max_records", settings.max_records)
            kwargs.setdefault("durability", settings.durability)
        return cls(Path(state_dir) / SPOOL_FILE, **kwargs)

    # -- opening ------------------------------------------------------------------------------
    def _take_file_lock(self) -> int:
        try:
            self.path.parent.mkdir(parents=True, exist_ok=True)
            fd = os.open(f"{self.path}.lock", os.O_RDWR | os.O_CREAT, 0o644)
        except OSError as e:
            raise StorageError(f"{self.path}: cannot create the spool: {e.strerror}") from e
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            os.close(fd)
            raise StorageError(f"{self.path}: the spool is in use by another rotorwatch process "
                               "(one agent per state_dir)") from None
        return fd

    def _release_file_lock(self) -> None:
        if self._lock_fd is not None:
            os.close(self._lock_fd)  # closing releases the flock
            self._lock_fd = None

    def _open(self) -> sqlite3.Connection:
        db = sqlite3.connect(self.path, isolation_level=None, check_same_thread=False, timeout=10.0)
        try:
            return self._prepare(db)
        except BaseException:
            db.close()
            raise

    def _prepare(self, db: sqlite3.Connection) -> sqlite3.Connection:
        version = db.execute("PRAGMA user_version").fetchone()[0]
        if version > SCHEMA_VERSION:
            db.close()
            raise StorageError(f"{self.path}: spool schema version {version} is newer than this "
                               f"rotorwatch understands ({SCHEMA_VERSION})")
        mode = db.execute("PRAGMA journal_mode=WAL").fetchone()[0]
        if str(mode).lower() != "wal":
            log.warning("spool journal mode is %s, not wal path=%s", mode, self.path)
        db.execute(f"PRAGMA synchronous={_SYNCHRONOUS[self.durability]}")
        # the WAL is checkpointed every 256 pages (1 MiB) and cut back to 1 MiB after each checkpoint
        db.execute(f"PRAGMA wal_autocheckpoint={WAL_CHECKPOINT_PAGES}")
        db.execute(f"PRAGMA journal_size_limit={WAL_LIMIT_BYTES}")
        db.executescript(_SCHEMA)
        db.execute(f"PRAGMA user_version={SCHEMA_VERSION}")
        return db

    def _load(self) -> None:
        db = self._db
        meta = dict(db.execute("SELECT key, value FROM meta").fetchall())
        max_row = db.execute("SELECT MAX(seq) FROM records").fetchone()[0] or 0
        self._last_seq = max(int(meta.get("last_seq", 0)), int(max_row))
        self._reserved = self._last_seq  # seqs up to here may have been given out: never again
        self._dirty_retained: dict[str, int] = {}
        self._dirty_dropped = False
        self._dropped = {r: int(meta.get(f"dropped.{r}", 0)) for r in DROP_REASONS}
        count, total = db.execute("SELECT COUNT(*), COALESCE(SUM(size_bytes), 0) FROM records").fetchone()
        self._count, self._bytes = int(count), int(total)
        self._retained = dict(db.execute("SELECT topic, seq FROM retained").fetchall())

    # -- life cycle ---------------------------------------------------------------------------
    def close(self) -> None:
        """Close the file; on a clean close the unused rest of a seq block is given back (no gap)."""
        with self._lock:
            if self._db is not None:
                try:
                    with self._write("close") as db:
                        self._set_meta(db, "last_seq", self._last_seq)
                        self._reserved = self._last_seq
                except StorageError as e:
                    log.error("%s", e)
                self._db.close()
                self._db = None  # type: ignore[assignment]
            self._release_file_lock()

    def __enter__(self) -> Spool:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    @contextmanager
    def _write(self, what: str) -> Iterator[sqlite3.Connection]:
        """One write transaction; sqlite failures become a one-line StorageError."""
        if self._db is None:
            raise StorageError(f"{self.path}: spool is closed ({what})")
        db = self._db
        try:
            db.execute("BEGIN IMMEDIATE")
        except sqlite3.Error as e:
            raise StorageError(f"{self.path}: spool {what} failed: {e}") from e
        try:
            yield db
            self._flush_dirty(db)
            db.execute("COMMIT")
        except BaseException as e:
            try:
                db.execute("ROLLBACK")
                self._load()  # the counters in memory may have moved with the rolled-back work
            except sqlite3.Error:
                pass
            if isinstance(e, sqlite3.Error) and is_corruption(e):  # found damaged while running
                self._start_over(e)
            if isinstance(e, sqlite3.Error):
                raise StorageError(f"{self.path}: spool {what} failed: {e}") from e
            raise

    def _start_over(self, error: sqlite3.Error) -> None:
        """Set the damaged file aside (one warning) and go on with an empty one; seq carries on."""
        last = max(self._last_seq, self._reserved)
        self._close_quietly()
        self.set_aside_as = set_aside(self.path, error, SQLITE_COMPANIONS)
        self._db = self._open()
        self._db.execute("INSERT INTO meta (key, value) VALUES ('last_seq', ?)", (last,))
        self._in_flight.clear()
        self._load()

    def add_listener(self, callback: Callable[[int], None]) -> None:
        """Call ``callback(seq)`` after each append (outside the spool's lock; keep it quick)."""
        if callback not in self._listeners:
            self._listeners.append(callback)

    def remove_listener(self, callback: Callable[[int], None]) -> None:
        if callback in self._listeners:
            self._listeners.remove(callback)

    # -- writing ------------------------------------------------------------------------------
    def append(self, kind: str, topic: str, payload: Mapping[str, Any] | bytes, retain: bool = False,
               qos: int = 1) -> int:
        """Store one record durably and return its seq. ``kind``: state, metrics or event; a dict payload
        is encoded as JSON with seq and ts added (non-finite numbers become null). Raises ValueError for
        a bad kind, topic, qos or payload, StorageError when the disk write fails."""
        check_record(kind, topic, qos)
        with self._lock:
            seq = self._last_seq + 1
            ts_s = float(self._clock())
            rec = Record(seq, ts_s, kind, topic, encode_payload(payload, seq, ts_s, self._note(ts_s)), qos, bool(retain))
            self._store([rec], last_seq=max(seq, self._reserved))
            self._last_seq = seq
        for callback in list(self._listeners):
            callback(seq)
        return seq

    def new_record(self, kind: str, topic: str, payload: Mapping[str, Any] | bytes, retain: bool = False,
                   qos: int = 1) -> Record:
        """Give the next seq and ts to a record that waits in memory (not stored; see :meth:`store`).
        Seqs are reserved on disk ``SEQ_BLOCK`` at a time (one commit per block), so a seq is never reused,
        not even after a ``kill -9`` or a power cut, which leaves the rest of the block unused (a gap that
        is no lost record). Raises like :meth:`append`."""
        check_record(kind, topic, qos)
        with self._lock:
            seq = self._last_seq + 1
            ts_s = float(self._clock())
            data = encode_payload(payload, seq, ts_s, self._note(ts_s))
            if seq > self._reserved:
                with self._write("seq reservation") as db:
                    self._set_meta(db, "last_seq", seq + SEQ_BLOCK - 1)
                self._reserved = seq + SEQ_BLOCK - 1
            self._last_seq = seq
        return Record(seq, ts_s, kind, topic, data, qos, bool(retain))

    def store(self, records: Iterable[Record], in_flight: Mapping[int, int] | None = None) -> int:
        """Store records made by :meth:`new_record` in one transaction (the full policy applies);
        ``in_flight``: seq -> message id of those the client holds. Returns how many were stored."""
        records = list(records)
        if not records:
            return 0
        with self._lock:
            self._in_flight.update(in_flight or {})
            try:
                self._store(records)
            except BaseException:
                for seq in in_flight or {}:
                    self._in_flight.pop(seq, None)
                raise
        for callback in list(self._listeners):
            callback(records[-1].seq)
        return len(records)

    def _store(self, records: list[Record], last_seq: int | None = None) -> None:
        with self._write("store") as db:
            for rec in records:
                size = len(rec.topic.encode("utf-8")) + len(rec.payload) + RECORD_OVERHEAD_BYTES
                if size > self.max_bytes:
                    self._in_flight.pop(rec.seq, None)
                    self._count_drop(db, "oversize", 1)
                    log.warning("spool record too large, not stored seq=%d topic=%r size_bytes=%d max_bytes=%d",
                                rec.seq, rec.topic, size, self.max_bytes)
                    continue
                if self._bytes + size > self.max_bytes or self._count + 1 > self.max_records:
                    self._make_room(db, size)
                cur = db.execute("INSERT OR IGNORE INTO records (seq, ts_s, kind, topic, payload, qos, retain, "
                                 "size_bytes) VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
                                 (rec.seq, rec.ts_s, rec.kind, rec.topic, rec.payload, rec.qos, int(rec.retain), size))
                if cur.rowcount == 1:
                    self._count += 1
                    self._bytes += size
            if last_seq is not None:
                self._set_meta(db, "last_seq", last_seq)

    def note_delivered(self, rec: Record) -> None:
        """A record from memory was acknowledged: its retained seq counts (written with the next commit)."""
        if rec.retain:
            with self._lock:
                if rec.seq > self._retained.get(rec.topic, 0):
                    self._retained[rec.topic] = self._dirty_retained[rec.topic] = rec.seq

    def note_dropped(self, reason: str) -> None:
        """A record from memory was refused or unsendable: counted (written with the next commit)."""
        with self._lock:
            self._dropped[reason] += 1
            self._dirty_dropped = True

    def _note(self, ts_s: float) -> str | None:
        return self._clock_note(ts_s) if self._clock_note is not None else None

    def _flush_dirty(self, db: sqlite3.Connection) -> None:
        for topic, seq in self._dirty_retained.items():
            db.execute("INSERT INTO retained (topic, seq) VALUES (?, ?) "
                       "ON CONFLICT(topic) DO UPDATE SET seq = MAX(seq, excluded.seq)", (topic, seq))
        self._dirty_retained = {}
        if self._dirty_dropped:
            for reason, n in self._dropped.items():
                self._set_meta(db, f"dropped.{reason}", n)
            self._dirty_dropped = False

    @staticmethod
    def _set_meta(db: sqlite3.Connection, key: str, value: int) -> None:
        db.execute("INSERT INTO meta (key, value) VALUES (?, ?) "
                   "ON CONFLICT(key) DO UPDATE SET value = excluded.value", (key, value))

    def _count_drop(self, db: sqlite3.Connection, reason: str, n: int) -> None:
        if n <= 0:
            return
        self._dropped[reason] += n
        self._set_meta(db, f"dropped.{reason}", self._dropped[reason])

    def _delete(self, db: sqlite3.Connection, victims: list[tuple[int, int]]) -> None:
        for i in range(0, len(victims), 500):
            chunk = victims[i:i + 500]
            db.execute(f"DELETE FROM records WHERE seq IN ({','.join('?' * len(chunk))})",
                       [s for s, _ in chunk])
        self._count -= len(victims)
        self._bytes -= sum(b for _, b in victims)

    def _make_room(self, db: sqlite3.Connection, incoming_bytes: int) -> None:
        make_room(self, db, incoming_bytes)

    # -- reading and acknowledging ---------------------------------------------------------------
    def next_batch(self, limit: int, *, after_seq: int | None = None,
                   through_seq: int | None = None) -> list[Record]:
        """Up to ``limit`` stored records not in flight, oldest first, with ``after_seq < seq <= through_seq``."""
        if limit <= 0:
            return []
        lo = -1 if after_seq is None else int(after_seq)
        hi = self._last_seq if through_seq is None else int(through_seq)
        with self._lock:
            if self._db is None:
                raise StorageError(f"{self.path}: spool is closed (next_batch)")
            skip = sum(1 for s in self._in_flight if lo < s <= hi)
            rows = self._db.execute(
                "SELECT seq, ts_s, kind, topic, payload, qos, retain FROM records "
                "WHERE seq > ? AND seq <= ? ORDER BY seq LIMIT ?", (lo, hi, limit + skip)).fetchall()
            out = [Record(s, t, k, tp, bytes(p), q, bool(r)) for s, t, k, tp, p, q, r in rows
                   if s not in self._in_flight]
        return out[:limit]

    def mark_in_flight(self, seq: int, mid: int) -> None:
        """Note that record ``seq`` was handed to the client as message id ``mid`` (memory only)."""
        with self._lock:
            self._in_flight[seq] = mid

    def in_flight(self) -> dict[int, int]:
        """seq -> mid of the records in flight (a copy)."""
        with self._lock:
            return dict(self._in_flight)

    def requeue_in_flight(self) -> int:
        """Make every record in flight pending again (a new client); returns how many. In-flight marks
        live in memory only: after a restart every stored record is pending."""
        with self._lock:
            n = len(self._in_flight)
            self._in_flight.clear()
        return n

    def ack(self, seq: int) -> bool:
        """Delete record ``seq`` (its PUBACK arrived). False if it was not stored (already acked or dropped)."""
        return self.ack_many([seq]) == 1

    def ack_many(self, seqs: Iterable[int]) -> int:
        """Delete several acknowledged records in one transaction; returns how many were stored."""
        seqs = list(seqs)
        if not seqs:
            return 0
        with self._lock, self._write("ack") as db:
            done = 0
            for seq in seqs:
                self._in_flight.pop(seq, None)
                row = db.execute("DELETE FROM records WHERE seq = ? RETURNING topic, retain, size_bytes",
                                 (seq,)).fetchone()
                if row is None:
                    continue
                topic, retain, size = row
                done += 1
                self._count -= 1
                self._bytes -= size
                if retain and seq > self._retained.get(topic, 0):
                    self._retained[topic] = seq
                    db.execute("INSERT INTO retained (topic, seq) VALUES (?, ?) "
                               "ON CONFLICT(topic) DO UPDATE SET seq = excluded.seq", (topic, seq))
            return done

    def reject(self, seq: int, reason: Literal["broker_rejected", "unsendable"]) -> bool:
        """Delete a record that cannot be delivered, counting it under ``reason``."""
        if reason not in ("broker_rejected", "unsendable"):
            raise ValueError(f"reject reason {reason!r}: must be broker_rejected or unsendable")
        with self._lock, self._write("reject") as db:
            self._in_flight.pop(seq, None)
            row = db.execute("DELETE FROM records WHERE seq = ? RETURNING size_bytes", (seq,)).fetchone()
            if row is None:
                return False
            self._count -= 1
            self._bytes -= row[0]
            self._count_drop(db, reason, 1)
            return True

    def retained_seq(self, topic: str) -> int | None:
        """The highest acknowledged seq of a retained record on ``topic`` (None: none yet)."""
        with self._lock:
            return self._retained.get(topic)

    # -- figures ---------------------------------------------------------------------------------
    @property
    def last_seq(self) -> int:
        """The highest seq given out so far (0 before the first append)."""
        return self._last_seq

    def stats(self) -> SpoolStats:
        with self._lock:
            if self._db is None:
                raise StorageError(f"{self.path}: spool is closed (stats)")
            oldest = self._db.execute("SELECT seq, ts_s FROM records ORDER BY seq LIMIT 1").fetchone()
            return SpoolStats(
                depth=self._count, stored_bytes=self._bytes, in_flight=len(self._in_flight),
                last_seq=self._last_seq, oldest_seq=oldest[0] if oldest else None,
                oldest_ts_s=oldest[1] if oldest else None, max_bytes=self.max_bytes,
                max_records=self.max_records, dropped=dict(self._dropped),
            )

    def counts_by_kind(self) -> dict[str, int]:
        """Stored records per kind (for tests and the status page)."""
        with self._lock:
            rows = self._db.execute("SELECT kind, COUNT(*) FROM records GROUP BY kind").fetchall()
        return {k: 0 for k in KINDS} | dict(rows)
