"""Commands that arrive on ``<prefix>/<agent>/command``: parsing and checking, no side effects.

A command is a JSON object::

    {"command": "acknowledge", "machine": "ef3", "point": "de-h", "value": "de-outer-race", "id": 17}

- ``acknowledge``: clear latched alarms (of one value, one point, or the whole machine) once their
  values are back below the clear level; ``machine`` is required, ``point`` and ``value`` narrow it.
- ``snapshot``: write the newest window of a machine's points to the state folder as evidence;
  ``machine`` optional (default: all machines).
- ``reload``: re-read the configuration file, as SIGHUP does.
- ``relearn``: forget the learned baselines of a machine (``machine`` required; ``point`` and ``value``
  narrow it) and learn them again from the next updates; relearning whole points also forgets their
  kept envelope bands, which are then searched again.

``id`` (a string or an integer) is echoed in the reply on ``<prefix>/<agent>/command/result``.
Anything else (not JSON, not an object, unknown keys, an unknown command, a machine or point the
agent does not monitor) is a :class:`CommandRejected` with a one-line reason.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field, ValidationError

from ..settings.loading import format_location
from ..settings.models import Config

COMMANDS = ("acknowledge", "snapshot", "reload", "relearn")
MAX_PAYLOAD_BYTES = 4096


class CommandRejected(Exception):
    """A command that cannot be carried out; ``request_id`` is echoed if it could be read."""

    def __init__(self, message: str, request_id: Any = None, command: str | None = None):
        super().__init__(message)
        self.request_id = request_id
        self.command = command


class _Request(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)

    command: Literal["acknowledge", "snapshot", "reload", "relearn"]
    machine: str | None = Field(None, min_length=1, max_length=64)
    point: str | None = Field(None, min_length=1, max_length=64)
    value: str | None = Field(None, min_length=1, max_length=64)
    id: str | int | None = None


@dataclass(frozen=True)
class Command:
    name: str
    machine: str | None = None
    point: str | None = None
    value: str | None = None
    request_id: str | int | None = None


def parse_command(payload: bytes, config: Config) -> Command:
    """Decode and check one command against the running configuration."""
    if len(payload) > MAX_PAYLOAD_BYTES:
        raise CommandRejected(f"command payload of {len(payload)} bytes exceeds {MAX_PAYLOAD_BYTES}")
    try:
        data = json.loads(payload.decode("utf-8"))
    except UnicodeDecodeError:
        raise CommandRejected("command payload is not UTF-8 text") from None
    except json.JSONDecodeError as e:
        raise CommandRejected(f"command payload is not JSON: {e.msg} at character {e.pos}") from None
    if not isinstance(data, dict):
        raise CommandRejected(f"command payload must be a JSON object, got {type(data).__name__}")
    request_id = data.get("id") if isinstance(data.get("id"), (str, int)) and not isinstance(data.get("id"), bool) else None
    name = data.get("command") if isinstance(data.get("command"), str) else None
    try:
        req = _Request.model_validate(data)
    except ValidationError as e:
        err = e.errors(include_url=False)[0]
        where = format_location(tuple(err["loc"])) or "command"
        if err["type"] == "extra_forbidden":
            msg = f"unknown key {where!r} (known: command, machine, point, value, id)"
        elif where == "command" and err["type"] == "missing":
            msg = f"missing 'command' (one of {', '.join(COMMANDS)})"
        elif where == "command":
            msg = f"unknown command {data.get('command')!r} (one of {', '.join(COMMANDS)})"
        else:
            msg = f"{where} = {str(err.get('input'))[:60]!r}: {err['msg']}"
        raise CommandRejected(msg, request_id, name) from None

    cmd = Command(req.command, req.machine, req.point, req.value, req.id)
    machines = {m.id: m for m in config.machines}
    if cmd.name in ("acknowledge", "relearn") and cmd.machine is None:
        raise CommandRejected(f"{cmd.name} needs 'machine'", cmd.request_id, cmd.name)
    if cmd.machine is not None and cmd.machine not in machines:
        raise CommandRejected(f"unknown machine {cmd.machine!r} (known: {', '.join(machines)})",
                              cmd.request_id, cmd.name)
    if cmd.name not in ("acknowledge", "relearn") and (cmd.point is not None or cmd.value is not None):
        raise CommandRejected(f"{cmd.name} takes no 'point' or 'value'", cmd.request_id, cmd.name)
    if cmd.name == "reload" and cmd.machine is not None:
        raise CommandRejected("reload takes no 'machine'", cmd.request_id, cmd.name)
    if cmd.point is not None:
        machine = machines[cmd.machine]  # type: ignore[index]
        points = [p.id for p in machine.points]
        if cmd.point not in points:
            raise CommandRejected(f"machine {cmd.machine!r} has no point {cmd.point!r} (known: {', '.join(points)})",
                                  cmd.request_id, cmd.name)
    if cmd.value is not None:
        machine = machines[cmd.machine]  # type: ignore[index]
        names = ["overall"] + [b.name for b in machine.bands]
        if cmd.value not in names:
            raise CommandRejected(f"machine {cmd.machine!r} has no value {cmd.value!r} (known: {', '.join(names)})",
                                  cmd.request_id, cmd.name)
    return cmd
