"""What a publisher is: a sink of machine updates with one method set.

Every publisher (MQTT, Prometheus, the status page, the evidence stores) is a :class:`Publisher`:

- ``from_config(config, context)`` builds it, or returns None when its table is absent;
- ``start()`` opens what it serves or connects to (in the background; a broker that is away never
  blocks start-up). Publishers start before the source and stop after it;
- ``on_update(update, blocks_v, machine)`` takes every :class:`MachineUpdate` (with the window's raw
  blocks in volts when the update analyzed samples), from the analysis loop: quick, never blocking;
- ``reconfigure(config)`` adopts a reloaded configuration and returns True when it cannot, and must be
  closed and built again (typically: a sub-model it depends on changed, see :func:`changed`);
- ``close()`` publishes what is due at the end, stops and releases (bounded in time).

Four notifications are optional (no-ops here): ``on_input(state, reason)`` with the input's state
on every loop turn, ``on_agent_event(kind, message, time_s, detail)`` about the agent itself (a
reload rejected), ``on_events(events)`` with transitions outside an update (an acknowledge) and
``tick()`` on every loop turn.
What a publisher needs of the daemon comes in the :class:`SinkContext`; the registry of publishers
is :data:`rotorwatch.publishers.PUBLISHERS` (DEVELOPERS.md: adding a publisher).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any, Protocol

import numpy as np

from ..alarms.records import AlarmEvent, MachineUpdate
from ..settings.models import Config, Machine

if TYPE_CHECKING:
    from ..selfstats import SelfStats

Blocks = Mapping[str, np.ndarray]

#: reply(result body, the rejection message when the command was refused as such, else None)
Reply = Callable[[dict[str, Any], "str | None"], None]


class Commands(Protocol):
    """Where commands from MQTT and the status page go (the daemon's
    :class:`~rotorwatch.service.command_desk.CommandDesk`): carried out in the analysis loop."""

    def submit(self, payload: bytes, reply: Reply | None = None, origin: str = "mqtt") -> None:
        """Queue a raw command (any thread); ``reply`` gets its result body."""

    def acknowledge(self, machine_id: str, point_id: str | None, value: str | None) -> str:
        """Acknowledge latched values and wait (bounded); the result message. KeyError: unknown
        machine; RotorwatchError: it failed."""

    def snapshot(self, machine_id: str) -> str:
        """Save a snapshot and wait (bounded); as :meth:`acknowledge`."""


class SpeedReadings(Protocol):
    """Shaft speeds read from MQTT topics (:class:`~rotorwatch.service.speed.SpeedBoard`)."""

    @property
    def topics(self) -> list[str]: ...

    def offer(self, topic: str, payload: bytes) -> object: ...


@dataclass
class SinkContext:
    """What the daemon lends its publishers."""

    config_dir: Path  # relative file names in the configuration are taken from here
    state_dir: Path  # the agent's state folder (spool, trends, snapshots)
    stats: SelfStats  # the agent's own counts
    speeds: SpeedReadings | None = None  # shaft speeds read from MQTT topics
    commands: Commands | None = None  # where commands from MQTT and the status page go


class Publisher:
    """Base of every publisher (see the module docstring for the contract)."""

    name = "publisher"

    @classmethod
    def from_config(cls, config: Config, context: SinkContext) -> Publisher | None:
        raise NotImplementedError

    def start(self) -> None:
        """Open and start serving (default: nothing to start)."""

    def on_update(self, update: MachineUpdate, blocks_v: Blocks | None, machine: Machine) -> None:
        raise NotImplementedError

    def reconfigure(self, config: Config) -> bool:
        """Adopt ``config``; True when a restart is needed (default: always)."""
        return True

    def close(self) -> None:
        """Stop and release (default: nothing to release)."""

    # optional notifications
    def on_input(self, state: str, reason: str) -> None:
        """The input's state (``running``, ``stalled``, ``ended``, ...) and why, every loop turn."""

    def on_agent_event(self, kind: str, message: str, time_s: float, detail: dict[str, Any]) -> None:
        """Something about the agent itself (``reload_rejected``)."""

    def on_events(self, events: list[AlarmEvent]) -> None:
        """Transitions outside an update (an acknowledge clearing latched values)."""

    def tick(self) -> None:
        """Every turn of the analysis loop (a few times a second): housekeeping, quick."""


def changed(old: Config, new: Config, *paths: str) -> list[str]:
    """Which of ``paths`` (dotted names of sub-models, ``"storage.spool"``) differ between two
    configurations: the pydantic models compare by value, so nothing here lists their fields."""
    out = []
    for path in paths:
        a: Any = old
        b: Any = new
        for part in path.split("."):
            a = getattr(a, part, None)
            b = getattr(b, part, None)
        if a != b:
            out.append(path)
    return out

