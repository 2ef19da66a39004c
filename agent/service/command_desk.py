"""The command desk: commands from MQTT and the status page, carried out in the analysis loop.

Commands arrive on other threads (paho's network thread, the status page's request threads) and are
queued here (at most 64 waiting). A command that finds the queue full (a flood) is counted, not
answered one by one: the analysis loop publishes one ``commands_dropped`` agent event per
``DROP_SUMMARY_INTERVAL_S`` with the count dropped since the last one (and one at stop), so every
command is either answered or counted in such an event. The
analysis loop calls :meth:`CommandDesk.serve` every turn, which carries out at most 16 of them:
parsing (:func:`~rotorwatch.service.commands.parse_command`), then ``reload``, ``acknowledge``,
``relearn`` or ``snapshot`` against the running machines (:class:`CommandTarget`). Each command gets
one reply (:func:`~rotorwatch.publishers.mqtt.payloads.command_result_payload`): MQTT commands through
the ``reply`` callback they came with, status page calls as the return value of :meth:`call`, which
waits for it (bounded).
"""

from __future__ import annotations

import json
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

#: At most one ``commands_dropped`` event per this many seconds (monotonic) while commands are dropped.
DROP_SUMMARY_INTERVAL_S = 10.0


class CommandTarget(Protocol):
    """What commands act on: the daemon's running machines, its reload and its evidence store."""

    @property
    def config(self) -> Config | None: ...

    @property
    def runtimes(self) -> Mapping[str, MachineRuntime]: ...

    def reload(self, origin: str) -> tuple[bool, str]: ...

    def save_snapshot(self, rt: MachineRuntime, origin: str) -> Any: ...

    def deliver_events(self, rt: MachineRuntime, events: list[AlarmEvent]) -> None: ...

    def agent_event(self, kind: str, message: str, **detail: Any) -> None: ...


@dataclass
class _Request:
    """A command queued to the analysis loop; ``done`` is set with ``reply`` for waiting callers."""

    command: Command | None
    raw: bytes | None = None
    origin: str = "mqtt"
    answer: Reply | None = None
    done: threading.Event = field(default_factory=threading.Event)
    reply: dict | None = None


def _name_and_id(req: _Request) -> tuple[str | None, Any]:
    """The command's name and request id for a reply without carrying it out (best effort on raw JSON)."""
    if req.command is not None:
        return req.command.name, req.command.request_id
    try:
        doc = json.loads(req.raw or b"")
    except ValueError:
        return None, None
    return (doc.get("command"), doc.get("id")) if isinstance(doc, dict) else (None, None)


class CommandDesk:
    def __init__(self, target: CommandTarget, stats: SelfStats, wake: threading.Event | None = None,
                 max_waiting: int = 64):
        self.target = target
        self.stats = stats
        self._wake = wake or threading.Event()
        self._requests: queue.Queue[_Request] = queue.Queue(maxsize=max_waiting)
        self._limiter = RepeatLimiter(300.0)
        self._max_waiting = max_waiting
        self._drop_lock = threading.Lock()
        self._dropped = 0  # since the last summary event
        self._dropped_total = 0
        self._summary_at = float("-inf")  # monotonic time of the last summary event

    # -- other threads ---------------------------------------------------------------------------
    def submit(self, payload: bytes, reply: Reply | None = None, origin: str = "mqtt") -> None:
        """Queue a raw command (paho's thread); parsing happens in the analysis loop."""
        try:
            self._requests.put_nowait(_Request(None, raw=payload, origin=origin, answer=reply))
            self._wake.set()
        except queue.Full:  # counted; answered by the next commands_dropped event
            self.stats.commands.labels(result="rejected").inc()
            with self._drop_lock:
                self._dropped += 1
                self._dropped_total += 1
            ok, held = self._limiter.allow("commands-full")
            if ok:
                log.warning("command queue full; command dropped (counted in a commands_dropped event)",
                            extra=fields(repeats=held or None))
            self._wake.set()

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
        n = 0
        while n < limit:
            try:
                req = self._requests.get_nowait()
            except queue.Empty:
                break
            req.reply = self._execute(req)
            req.done.set()
            n += 1
        self.report_dropped()
        return n

    def report_dropped(self, force: bool = False) -> int:
        """Publish one ``commands_dropped`` agent event with the count dropped since the last one, at most
        once per ``DROP_SUMMARY_INTERVAL_S`` (``force``: now, at stop); returns the count reported."""
        now = time.monotonic()
        with self._drop_lock:
            if not self._dropped or (not force and now - self._summary_at < DROP_SUMMARY_INTERVAL_S):
                return 0
            n, self._dropped, self._summary_at = self._dropped, 0, now
            total = self._dropped_total
        message = (f"{n} command(s) dropped unanswered: more than {self._max_waiting} were waiting "
                   f"(at most one such event per {DROP_SUMMARY_INTERVAL_S:g} s)")
        log.warning(message, extra=fields(dropped=n, dropped_total=total))
        self.target.agent_event("commands_dropped", message, dropped=n, dropped_total=total)
        return n

    def answer_pending(self, message: str) -> None:
        """Refuse whatever still waits (the daemon is stopping)."""
        while True:
            try:
                req = self._requests.get_nowait()
            except queue.Empty:
                return
            req.reply = {"ok": False, "message": message}
            if req.answer is not None and self.target.config is not None:
                name, rid = _name_and_id(req)
                req.answer(command_result_payload(self.target.config.site.agent_id, time.time(), name, False,
                                                  message, rid), None)
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
            ok, held = self._limiter.allow(f"failed:{cmd.name}")  # a flood of refused snapshots: one line
            if ok:
                log.warning(f"command {cmd.name} failed: {e}", extra=fields(origin=req.origin, repeats=held or None))
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
