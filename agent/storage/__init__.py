"""Local storage of the agent: the publish spool, the trend store and evidence snapshots.

API overview (each module has one job; all of them take their paths and clocks from the caller):

- :mod:`rotorwatch.storage.spool` -- :class:`~rotorwatch.storage.spool.Spool`: a durable
  store-and-forward queue (sqlite3, WAL). Every record the agent publishes gets a per-agent sequence
  number that survives restarts and is never reused.
  It is drained into the broker by the MQTT publisher's outbox
  (:class:`rotorwatch.publishers.mqtt.outbox.Outbox`), which deletes a record only on its PUBACK.
- :mod:`rotorwatch.storage.trends` -- :class:`~rotorwatch.storage.trends.TrendStore`: per-update values
  (time, machine, point, value name, value, unit, state) with retention by age and row count.
- :mod:`rotorwatch.storage.snapshots` -- :class:`~rotorwatch.storage.snapshots.SnapshotStore`:
  evidence (calibrated waveform WAV, spectra .npz, JSON sidecar) under a disk quota.
- :mod:`rotorwatch.storage.snapshot_policy` -- when to take a snapshot (state transitions, a daily
  time); :mod:`rotorwatch.storage.snapshot_plot` -- the evidence plot (optional ``plot`` extra).
- :mod:`rotorwatch.storage.snapshot_quota` -- the quota's transition share and the on-request limit;
  :mod:`rotorwatch.storage.recovery` -- setting a damaged file aside; :mod:`rotorwatch.storage.wallclock`
  -- whether the kernel calls the wall clock synchronised.
- :mod:`rotorwatch.settings.storage` -- pydantic models of the knobs above (they live with the other
  settings, which depend on nothing else in the package).

File names inside the state directory (``storage.state_dir``) are fixed: ``spool.sqlite``,
``trends.sqlite`` and ``snapshots/``. What is and is not guaranteed is written down in
``deploy/data-guarantees.md``.
"""

from __future__ import annotations

from ..errors import RotorwatchError

SPOOL_FILE = "spool.sqlite"
TRENDS_FILE = "trends.sqlite"
SNAPSHOTS_DIR = "snapshots"


class StorageError(RotorwatchError):
    """A store cannot be opened, read or written (one line: which file, what failed, a hint)."""
