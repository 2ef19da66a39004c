"""Histories: a machine's recorded life, replayed through the daemon's code.

A history is a set of short recordings, each one update at its own time (a folder of files, one
archive, or the daemon's own snapshot folder). :mod:`.spec` says how to read one (command line or a
small TOML description), :mod:`.timestamps` where each element's time comes from, :mod:`.readers`
lists and decodes the elements (in worker processes, each decoded once), :mod:`.margins` measures how
much room each value's levels had, and :mod:`.plot` draws the trend for a report.
"""

from __future__ import annotations

from .readers import History, open_history
from .spec import HistorySpec

__all__ = ["History", "HistorySpec", "open_history"]
