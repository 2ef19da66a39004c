"""The running publishers, in registry order: built, started, fed, reconfigured and closed together.

:class:`SinkSet` builds every kind in :data:`rotorwatch.publishers.PUBLISHERS` from the configuration
(those whose table is absent build to nothing), starts them in that order and closes them in the
reverse order. A reload asks each one to adopt the new configuration; one that answers that it must
restart is closed and built again from the new configuration (and one whose table appeared is
started, one whose table went away is closed).
"""

from __future__ import annotations

import logging
from collections.abc import Sequence
from typing import Any

from ..alarms.records import AlarmEvent, MachineUpdate
from ..logs import fields
from ..publishers.base import Blocks, Publisher, SinkContext
from ..settings.models import Config, Machine

log = logging.getLogger(__name__)


class SinkSet:
    def __init__(self, kinds: Sequence[type[Publisher]], context: SinkContext):
        self.kinds = tuple(kinds)
        self.context = context
        self._running: dict[type[Publisher], Publisher] = {}

    @property
    def running(self) -> list[Publisher]:
        """The running publishers in start order."""
        return [self._running[k] for k in self.kinds if k in self._running]

    def get(self, kind: type[Publisher]) -> Publisher | None:
        return self._running.get(kind)

    def start(self, config: Config) -> None:
        """Build and start every configured publisher (a RotorwatchError from one propagates; the ones
        started before it are closed by :meth:`close`)."""
        for kind in self.kinds:
            self._start(kind, config)

    def _start(self, kind: type[Publisher], config: Config) -> None:
        sink = kind.from_config(config, self.context)
        if sink is None:
            return
        self._running[kind] = sink
        sink.start()

    def reconfigure(self, config: Config) -> list[str]:
        """Adopt ``config``; the names of the publishers restarted, started or stopped."""
        touched = []
        for kind in self.kinds:
            sink = self._running.get(kind)
            if sink is not None and not sink.reconfigure(config):
                continue
            if sink is not None:
                self._close(self._running.pop(kind))
            self._start(kind, config)
            if sink is not None or kind in self._running:
                touched.append(kind.name)
        return touched

    def close(self) -> None:
        """Close every publisher, the last started first; errors are logged, never raised."""
        for kind in reversed(self.kinds):
            sink = self._running.pop(kind, None)
            if sink is not None:
                self._close(sink)

    @staticmethod
    def _close(sink: Publisher) -> None:
        try:
            sink.close()
        except Exception as e:  # noqa: BLE001 - shutdown goes on
            log.warning(f"error stopping the {sink.name} publisher", extra=fields(error=str(e)))

    # -- fan-out (the analysis loop) ------------------------------------------------------------
    def on_update(self, update: MachineUpdate, blocks_v: Blocks | None, machine: Machine) -> None:
        for sink in self.running:
            sink.on_update(update, blocks_v, machine)

    def on_events(self, events: list[AlarmEvent]) -> None:
        for sink in self.running:
            sink.on_events(events)

    def on_agent_event(self, kind: str, message: str, time_s: float, **detail: Any) -> None:
        for sink in self.running:
            sink.on_agent_event(kind, message, time_s, detail)

    def on_input(self, state: str, reason: str) -> None:
        for sink in self.running:
            sink.on_input(state, reason)

    def tick(self) -> None:
        for sink in self.running:
            sink.tick()
