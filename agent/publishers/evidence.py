"""The evidence publisher: what the daemon keeps on disk per update, trend rows and snapshots.

- every update goes into the trend store (``<state_dir>/trends.sqlite``, read by ``rotorwatch trend``);
- a snapshot (``<state_dir>/snapshots/<id>/``: calibrated waveforms, spectra, a JSON sidecar) is
  saved when :class:`~rotorwatch.storage.snapshot_policy.SnapshotPolicy` says so (a transition into
  warning/alarm/sensor fault, the daily slot) and on request (the ``snapshot`` command, the status
  page's button), under the store's disk quota.

Storage failures (a full disk, a broken file) never stop monitoring: they are logged, rate-limited,
and the update goes on to the publishers. Called from the analysis loop only.
"""

from __future__ import annotations

import logging
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from ..alarms.records import MachineUpdate
from ..errors import RotorwatchError
from ..logs import RepeatLimiter, fields
from ..settings.models import Config, Machine
from .base import Blocks, Publisher, SinkContext

if TYPE_CHECKING:
    from ..storage.snapshots import SnapshotInfo

log = logging.getLogger(__name__)


def calibrated(blocks_v: Blocks, machine: Machine) -> dict[str, np.ndarray]:
    """Volts at the input -> acceleration in m/s^2, per point (the sensor's sensitivity)."""
    out = {}
    for pid, block in blocks_v.items():
        try:
            point = machine.point(pid)
        except KeyError:
            continue
        out[pid] = (np.asarray(block, dtype=np.float64) / point.sensor.volts_per_m_s2).astype(np.float32)
    return out


class Evidence(Publisher):
    """The trend store and the snapshot store in the state folder (always on: ``[storage]``)."""

    name = "evidence"

    @classmethod
    def from_config(cls, config: Config, context: SinkContext) -> Evidence:
        return cls(config, context.state_dir)  # StorageError (one line) if the stores cannot open

    def __init__(self, config: Config, state_dir: Path):
        from ..storage.snapshot_policy import SnapshotPolicy
        from ..storage.snapshots import SnapshotStore, config_fingerprint
        from ..storage.trends import TrendStore

        self.config = config
        self._fingerprint = config_fingerprint(config)
        self._limiter = RepeatLimiter(300.0)
        self.trends = TrendStore.in_state_dir(state_dir, config.storage.trends)
        self.snapshots = SnapshotStore.in_state_dir(state_dir, config.storage.snapshots)
        self.policy = SnapshotPolicy(config.storage.snapshots, self.snapshots)

    def set_config(self, config: Config) -> None:
        from ..storage.snapshots import config_fingerprint

        self.config = config
        self._fingerprint = config_fingerprint(config)

    def reconfigure(self, config: Config) -> bool:
        self.set_config(config)
        return False

    def _failed(self, what: str, e: Exception) -> None:
        ok, held = self._limiter.allow(what)
        if ok:
            log.error(f"{what} failed: {e}", extra=fields(repeats=held or None))

    def on_update(self, update: MachineUpdate, blocks_v: Blocks | None, machine: Machine) -> None:
        try:
            self.trends.record(update)
        except (RotorwatchError, OSError) as e:
            self._failed("trend store write", e)
        if blocks_v is None:
            return
        decision = self.policy.decide(update)
        if decision is not None:
            reason, detail = decision
            self.save(update, blocks_v, machine, reason, detail)

    def save(self, update: MachineUpdate, blocks_v: Blocks, machine: Machine, reason: str,
             detail: str) -> SnapshotInfo | None:
        """Save one snapshot; returns its SnapshotInfo, or None after a (logged) failure. An on-request
        snapshot the store refuses (its limit, or no room) raises the refusal: the command's reply
        carries its message (the store logs the refusals once, with their count)."""
        from ..storage.snapshots import SnapshotRefused

        try:
            return self.snapshots.save(update, calibrated(blocks_v, machine), reason=reason, machine=machine,
                                       config_hash=self._fingerprint, detail=detail)
        except SnapshotRefused as e:
            if reason == "command":
                raise
            self._failed(f"{reason} snapshot", e)
            return None
        except (RotorwatchError, OSError, ValueError) as e:
            self._failed("snapshot save", e)
            return None

    def close(self) -> None:
        try:
            self.trends.close()
        except Exception as e:  # noqa: BLE001 - closing must not stop shutdown
            log.warning("error closing the trend store", extra=fields(error=str(e)))
