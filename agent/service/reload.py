"""Reloading the configuration (SIGHUP or the ``reload`` command) in the running daemon.

:meth:`Reloader.reload` reads the file again (with the same ``--set`` overrides). An invalid file
changes nothing: the running configuration stays, the rejection is logged, counted
(``config_reloads{result="rejected"}``) and published as an agent event. A valid one is applied:

- machines whose settings (and the sample rate) are unchanged keep their pipeline and what it learned;
  the others get a new one, the old one's state is saved;
- the capture restarts when ``[acquisition]`` or the ring buffers' layout changed;
- every publisher adopts the new configuration or is restarted (:class:`~rotorwatch.service.sinks.SinkSet`).

What changed is found structurally: the pydantic models compare by value, so the sections that
differ are read off :class:`~rotorwatch.settings.models.Config`'s own fields, with nothing listed
by hand. The result message names them (``configuration reloaded (changed: mqtt, machine fan-1)``).
"""

from __future__ import annotations

import logging
import time
from collections.abc import Callable, Mapping
from typing import Protocol

from ..errors import ConfigError, RotorwatchError
from ..logs import fields
from ..selfstats import SelfStats
from ..settings.models import Config
from .runtimes import MachineRuntime, close_pipeline, ring_layout
from .sinks import SinkSet

log = logging.getLogger(__name__)


class Reloadable(Protocol):
    """What a reload changes in the daemon."""

    config: Config | None
    runtimes: dict[str, MachineRuntime]

    def build_runtimes(self, config: Config, keep: Mapping[str, MachineRuntime]) -> dict[str, MachineRuntime]: ...

    def adopt(self, config: Config, runtimes: dict[str, MachineRuntime], restart_capture: bool) -> None: ...

    def status_line(self) -> str: ...


class Notifier(Protocol):
    def reloading(self) -> None: ...

    def reloaded(self, status: str) -> None: ...


def changed_sections(old: Config, new: Config) -> list[str]:
    """The top-level sections that differ (machines are compared one by one, see :meth:`Reloader.reload`)."""
    return [name for name in type(old).model_fields if name != "machines" and getattr(old, name) != getattr(new, name)]


class Reloader:
    def __init__(self, target: Reloadable, load: Callable[[], Config], sinks: SinkSet, stats: SelfStats,
                 notifier: Notifier, on_applied: Callable[[Config], None] | None = None):
        self.target = target
        self.load = load
        self.sinks = sinks
        self.stats = stats
        self.notifier = notifier
        self.on_applied = on_applied

    def reload(self, origin: str) -> tuple[bool, str]:
        """Re-read the configuration; keep the running one if the new one is invalid. (ok, message)."""
        old = self.target.config
        assert old is not None
        self.notifier.reloading()
        try:
            new = self.load()
            runtimes = self.target.build_runtimes(new, self.target.runtimes)
        except ConfigError as e:
            return self._rejected("; ".join(e.problems), origin)
        changed = changed_sections(old, new)
        machines_changed = [m for m in runtimes if self.target.runtimes.get(m) is not runtimes[m]]
        try:
            for mid, rt in self.target.runtimes.items():
                if runtimes.get(mid) is not rt:
                    close_pipeline(rt)
            restart_capture = "acquisition" in changed or ring_layout(new, runtimes) != ring_layout(old, self.target.runtimes)
            self.target.adopt(new, runtimes, restart_capture)
            self.sinks.reconfigure(new)
        except RotorwatchError as e:
            # the new settings parsed but cannot be put to work (a port in use, a missing TLS file)
            log.error(f"reload applied partly: {e}", extra=fields(origin=origin))
            self.stats.config_reloads.labels(result="failed").inc()
            self.notifier.reloaded(self.target.status_line())
            return False, str(e)
        self.stats.config_reloads.labels(result="applied").inc()
        if self.on_applied is not None:
            self.on_applied(new)
        what = changed + [f"machine {m}" for m in machines_changed]
        msg = f"configuration reloaded (changed: {', '.join(what) or 'nothing'})"
        log.info(msg, extra=fields(origin=origin))
        self.notifier.reloaded(self.target.status_line())
        return True, msg

    def _rejected(self, msg: str, origin: str) -> tuple[bool, str]:
        log.error(f"reload rejected, keeping the running configuration: {msg}", extra=fields(origin=origin))
        self.stats.config_reloads.labels(result="rejected").inc()
        self.sinks.on_agent_event("reload_rejected", msg, time.time(), origin=origin)
        self.notifier.reloaded(self.target.status_line())
        return False, msg
