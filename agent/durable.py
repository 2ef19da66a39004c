"""Durable file-system steps shared by every part that writes state (storage, baselines, calibration).

At the bottom of the package: it imports nothing of it, so any part may use it without an import
cycle between parts (tests/unit/test_import_graph.py).
"""

from __future__ import annotations

import os
from pathlib import Path

__all__ = ["fsync_dir"]


def fsync_dir(folder: Path) -> None:
    """Make renames and new entries in ``folder`` durable (best effort: some filesystems refuse)."""
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)
