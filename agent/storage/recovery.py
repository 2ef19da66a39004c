"""Setting a damaged file aside so the daemon starts anyway (one warning naming it).

After a power cut a file can be torn (a sqlite database whose pages did not all reach the disk, a
JSON file cut short). The stores that find such a file at start move it aside with
:func:`set_aside` and start empty: monitoring goes on, and the damaged file stays next to the new one
(``<name>.damaged-<UTC time>``, with its ``-wal``/``-shm`` companions) for a person to look at.
"""

from __future__ import annotations

import logging
import os
import sqlite3
import time
from pathlib import Path

from ..durable import fsync_dir

log = logging.getLogger(__name__)

SQLITE_COMPANIONS = ("-wal", "-shm", "-journal")


def is_corruption(e: BaseException) -> bool:
    """True for sqlite's "damaged file" errors (not for a locked, missing or unwritable file)."""
    if isinstance(e, sqlite3.DatabaseError) and not isinstance(e, sqlite3.OperationalError):
        return True
    text = str(e).lower()
    return isinstance(e, sqlite3.DatabaseError) and ("malformed" in text or "not a database" in text)


def set_aside(path: Path, error: object, companions: tuple[str, ...] = ()) -> Path:
    """Rename ``path`` (and ``path + companion`` for each that exists) to ``<name>.damaged-<UTC>``;
    logs one warning naming both; returns the new name."""
    stamp = time.strftime("%Y%m%dT%H%M%SZ", time.gmtime())
    aside = path.with_name(f"{path.name}.damaged-{stamp}")
    n = 2
    while aside.exists():
        aside, n = path.with_name(f"{path.name}.damaged-{stamp}-{n}"), n + 1
    os.replace(path, aside)
    for suffix in companions:
        extra = Path(f"{path}{suffix}")
        if extra.exists():
            os.replace(extra, Path(f"{aside}{suffix}"))
    fsync_dir(path.parent)
    log.warning("damaged file set aside, starting empty: %s -> %s (%s)", path, aside.name, error)
    return aside
