"""The command desk: commands from MQTT and the status page, carried out in the analysis loop.

Commands arrive on other threads (paho's network thread, the status page's request threads) and are
queued here (at most 64 waiting; a full queue refuses with a counted, rate-limited warning). The
analysis loop calls :meth:`CommandDesk.serve` every turn, which carries out at most 16 of them:
parsing (:func:`~rotorwatch.service.commands.parse_command`), then ``reload``, ``acknowledge``,
``relearn`` or ``snapshot`` against the running machines (:class:`CommandTarget`). Each command gets
one reply (:func:`~rotorwatch.publishers.mqtt.payloads.command_result_payload`): MQTT commands through
the ``reply`` callback they came with, status page calls as the return value of :meth:`call`, which
waits for it (bounded).
"""

from __future__ import annotations

import logging
import queue
import threading
import time
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any, Protocol

from ..alarms.records import AlarmEvent
from ..errors import RotorwatchError
from ..logs import RepeatLimiter, fields
from ..publishers.base import Reply
from ..publishers.mqtt.payloads import command_result_payload
from ..selfstats import SelfStats
from ..settings.models import Config
from .commands import Command, CommandRejected, parse_command
from .runtimes import MachineRuntime

log = logging.getLogger(__name__)



class CommandTarget(Protocol):
    """What commands act on: the daemon's running machines, its reload and its evidence store."""

    @property
    def config(self) -> Config | None: ...

    @property
    def runtimes(self) -> Mapping[str, MachineRuntime]: ...

    def reload(self, origin: str) -> tuple[bool, str]: ...

    def save_snapshot(self, rt: MachineRuntime, origin: str) -> Any: ...

    def deliver_events(self, rt: MachineRuntime, events: list[AlarmEvent]) -> None: ...


@dataclass
class _Request:
    """A command queued to the analysis loop; ``done`` is set with ``reply`` for waiting callers."""

    command: Command | None
    raw: bytes | None = None
    origin: str = "mqtt"
    answer: Reply | None = None
    done: threading.Event = field(default_factory=threading.Event)
    reply: dict | None = None


class CommandDesk:
    def __init__(self, target: CommandTarget, stats: SelfStats, wake: threading.Event | None = None,
                 max_waiting: int = 64):
        self.target = target
        self.stats = stats
        self._wake = wake or threading.Event()
        self._requests: queue.Queue[_Request] = queue.Queue(maxsize=max_waiting)
        self._limiter = RepeatLimiter(300.0)

    # -- other threads ---------------------------------------------------------------------------
    def submit(self, payload: bytes, reply: Reply | None = None, origin: str = "mqtt") -> None:
        """Queue a raw command (paho's thread); parsing happens in the analysis loop."""
        try:
            self._requests.put_nowait(_Request(None, raw=payload, origin=origin, answer=reply))
            self._wake.set()
        except queue.Full:
            self.stats.commands.labels(result="rejected").inc()
            ok, held = self._limiter.allow("commands-full")
            if ok:
                log.warning("command queue full; command dropped", extra=fields(repeats=held or None))

    def call(self, cmd: Command, timeout_s: float = 10.0, origin: str = "status_page") -> str:
        """Queue ``cmd`` and wait for its reply (the status page's threads); its message, or a
        RotorwatchError with the reason it failed."""
        if cmd.machine is not None and cmd.machine not in self.target.runtimes:
            raise KeyError(cmd.machine)
        req = _Request(cmd, origin=origin)
        try:
            self._requests.put(req, timeout=1.0)
        except queue.Full:
            raise RotorwatchError("the daemon is busy; try again") from None
        self._wake.set()
        if not req.done.wait(timeout_s):
            raise RotorwatchError(f"no answer from the analysis loop within {timeout_s:g} s")
        reply = req.reply or {}
        if not reply.get("ok"):
            raise RotorwatchError(str(reply.get("message", "failed")))
        return str(reply.get("message", ""))

    def acknowledge(self, machine_id: str, point_id: str | None, value: str | None) -> str:
        """The status page's acknowledge button (see :meth:`call`)."""
        return self.call(Command("acknowledge", machine_id, point_id, value))

    def snapshot(self, machine_id: str) -> str:
        """The status page's snapshot button (see :meth:`call`)."""
        return self.call(Command("snapshot", machine_id))

    # -- the analysis loop -------------------------------------------------------------------------
    def serve(self, limit: int = 16) -> int:
        """Carry out up to ``limit`` waiting commands; returns how many."""
        for n in range(limit):
            try:
                req = self._requests.get_nowait()
            except queue.Empty:
                return n
            req.reply = self._execute(req)
            req.done.set()
        return limit

    def answer_pending(self, message: str) -> None:
        """Refuse whatever still waits (the daemon is stopping)."""
        while True:
            try:
                req = self._requests.get_nowait()
            except queue.Empty:
                return
            req.reply = {"ok": False, "message": message}
            req.done.set()

    def _execute(self, req: _Request) -> dict:
        config = self.target.config
        assert config is not None
        now = time.time()
        agent = config.site.agent_id
        cmd = req.command
        rejected: str | None = None
        try:
            if cmd is None:
                cmd = parse_command(req.raw or b"", config)
            ok, message, detail = self.run(cmd, req.origin)
            self.stats.commands.labels(result="ok" if ok else "failed").inc()
            body = command_result_payload(agent, now, cmd.name, ok, message, cmd.request_id, **detail)
            log.info(f"command {cmd.name}: {message}", extra=fields(origin=req.origin, ok=ok, machine=cmd.machine or "-"))
        except RotorwatchError as e:  # the command was fine but could not be carried out
            assert cmd is not None
            self.stats.commands.labels(result="failed").inc()
            log.warning(f"command {cmd.name} failed: {e}", extra=fields(origin=req.origin))
            body = command_result_payload(agent, now, cmd.name, False, str(e), cmd.request_id)
        except CommandRejected as e:
            self.stats.commands.labels(result="rejected").inc()
            ok, held = self._limiter.allow(f"rejected:{e}")
            if ok:
                log.warning(f"command rejected: {e}", extra=fields(origin=req.origin, repeats=held or None))
            body = command_result_payload(agent, now, e.command, False, str(e), e.request_id)
            rejected = str(e)
        if req.answer is not None:
            req.answer(body, rejected)
        return body

    def run(self, cmd: Command, origin: str = "mqtt") -> tuple[bool, str, dict]:
        """Carry out one parsed command: (ok, message, detail for the reply)."""
        if cmd.name == "reload":
            ok, message = self.target.reload("command")
            return ok, message, {}
        if cmd.name == "acknowledge":
            return self._acknowledge(cmd)
        if cmd.name == "relearn":
            rt = self.target.runtimes[cmd.machine]  # type: ignore[index]  # checked by parse_command
            reset = list(rt.pipeline.relearn(cmd.point, cmd.value) or [])
            return True, f"learning {len(reset)} baseline(s) again", {"machine": rt.machine.id, "reset": reset}
        if cmd.name == "snapshot":
            return self._snapshot(cmd, origin)
        raise CommandRejected(f"unknown command {cmd.name!r}", cmd.request_id, cmd.name)

    def _acknowledge(self, cmd: Command) -> tuple[bool, str, dict]:
        rt = self.target.runtimes[cmd.machine]  # type: ignore[index]  # checked by parse_command
        try:
            events = rt.pipeline.acknowledge(point_id=cmd.point, value=cmd.value)
        except KeyError as e:
            raise CommandRejected(f"acknowledge: unknown point or value {e.args[0]!r}", cmd.request_id, cmd.name) from None
        events = list(events or [])
        if events:
            self.stats.alarm_events.labels(machine=rt.machine.id).inc(len(events))
            self.target.deliver_events(rt, events)
        cleared = sorted({f"{e.point_id}/{e.value_name}" for e in events if e.value_name not in ("point", "machine")})
        message = f"cleared {len(cleared)} latched value(s)" if cleared else "nothing latched to clear"
        return True, message, {"machine": rt.machine.id, "cleared": cleared}

    def _snapshot(self, cmd: Command, origin: str) -> tuple[bool, str, dict]:
        targets = [cmd.machine] if cmd.machine is not None else list(self.target.runtimes)
        saved = []
        for mid in targets:
            rt = self.target.runtimes[mid]
            if rt.last_update is None or rt.last_blocks is None:
                raise RotorwatchError(f"snapshot of machine {mid!r}: no analyzed update yet (the first window is still filling)")
            info = self.target.save_snapshot(rt, origin)
            if info is None:
                raise RotorwatchError(f"snapshot of machine {mid!r} could not be saved (see the log)")
            saved.append(info)
        return True, f"saved {len(saved)} snapshot(s)", {"snapshots": [i.id for i in saved],
                                                           "paths": [str(i.path) for i in saved]}
