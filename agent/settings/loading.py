"""TOML file -> validated :class:`Config`, with one line per problem.

Every problem names the file, the field path (``machines[0].bands[1].high_hz``) and what is wrong, in
that order; nothing raises a traceback at a user.
"""

from __future__ import annotations

import tomllib
from pathlib import Path
from typing import Any, TypeVar

from pydantic import BaseModel, ValidationError

from ..errors import ConfigError
from .bands import BAND_KINDS, PLACEMENT_ERROR
from .models import Config

M = TypeVar("M", bound=BaseModel)


def read_toml(path: str | Path) -> dict[str, Any]:
    """Parse a TOML file, turning every failure into a one-line :class:`ConfigError`."""
    p = Path(path)
    try:
        raw = p.read_bytes()
    except FileNotFoundError:
        raise ConfigError([f"{p}: no such file"]) from None
    except IsADirectoryError:
        raise ConfigError([f"{p}: is a directory, expected a TOML file"]) from None
    except OSError as e:
        raise ConfigError([f"{p}: cannot read: {e.strerror}"]) from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as e:
        raise ConfigError([f"{p}: not UTF-8 text (byte {e.start})"]) from None
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as e:
        raise ConfigError([f"{p}: TOML syntax: {e}"]) from None


def _is_union_tag(loc: tuple[Any, ...], i: int) -> bool:
    """``machines[0].bands[1].hz``: the kind a band table was read as, not a key of the file."""
    return i >= 2 and loc[i - 2] == "bands" and isinstance(loc[i - 1], int) and loc[i] in BAND_KINDS


def format_location(loc: tuple[Any, ...]) -> str:
    out = ""
    for i, part in enumerate(loc):
        if _is_union_tag(loc, i):
            continue
        if isinstance(part, int):
            out += f"[{part}]"
        else:
            out += ("." if out else "") + str(part)
    return out


def _short(value: Any) -> str:
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."


_SECRET_WORDS = ("password", "passwd", "secret", "token")


def _looks_secret(loc: tuple[Any, ...]) -> bool:
    """An unknown key named like a secret (``password = "..."``): its value must not be echoed."""
    key = str(loc[-1]).lower() if loc else ""
    return any(w in key for w in _SECRET_WORDS) and not key.endswith(("_file", "_env"))


def validation_problems(source: str, error: ValidationError) -> list[str]:
    """One line per pydantic error: ``file: path = value: message``."""
    lines = []
    for err in error.errors(include_url=False):
        loc = format_location(tuple(p for p in err["loc"] if not (isinstance(p, str) and "[" in p and "]" in p)))
        msg = err["msg"]
        if msg.startswith("Value error, "):
            msg = msg[len("Value error, "):]
        if err["type"] == "extra_forbidden":
            msg = "unknown key (check the spelling; see the commented examples in config/)"
        where = f"{source}: {loc}" if loc else f"{source}"
        if err["type"] == "extra_forbidden" and _looks_secret(err["loc"]):
            lines.append(f"{where}: unknown key, and secrets never go in the configuration file (value not shown): "
                         "put the password in a file named by password_file (chmod 600) or in an environment "
                         "variable named by password_env")
            continue
        if err["type"] in ("value_error", "assertion_error", "missing", PLACEMENT_ERROR):
            lines.append(f"{where}: {msg}")
        else:
            lines.append(f"{where} = {_short(err.get('input'))}: {msg}")
    return lines


def validate(model: type[M], data: dict[str, Any], source: str) -> M:
    try:
        return model.model_validate(data)
    except ValidationError as e:
        raise ConfigError(validation_problems(source, e)) from None


def apply_overrides(data: dict[str, Any], overrides: list[str] | tuple[str, ...], source: str) -> dict[str, Any]:
    """Apply ``section.key=value`` overrides (``--set`` on the command line) to parsed TOML data.

    The value is read as a TOML value (``port=1884``, ``bind="0.0.0.0"``, ``loop=true``); anything that
    does not parse as one is taken as a plain string. Tables on the path are created when missing. In
    an array of tables an element is named by its ``id`` or ``name``:
    ``machines.rig.bands.outer-race.levels.relative_warning=4``.
    """
    problems = []
    for item in overrides:
        key, sep, raw = item.partition("=")
        parts = [k.strip() for k in key.split(".")]
        if not sep or not all(parts):
            problems.append(f"--set {item!r}: expected section.key=value, e.g. mqtt.port=1884")
            continue
        try:
            value = tomllib.loads(f"v = {raw}")["v"]
        except tomllib.TOMLDecodeError:
            value = raw
        node: Any = data
        for part in parts[:-1]:
            if isinstance(node, list):  # an array of tables: the element whose id or name is part
                found = [t for t in node if isinstance(t, dict) and part in (t.get("id"), t.get("name"))]
                if not found:
                    problems.append(f"--set {item!r}: no element with id or name {part!r} in {source}")
                    break
                node = found[0]
                continue
            child = node.setdefault(part, {})
            if isinstance(child, list) and child and all(isinstance(t, dict) for t in child):
                node = child
                continue
            if not isinstance(child, dict):
                problems.append(f"--set {item!r}: {part} is not a table in {source}")
                break
            node = child
        else:
            if isinstance(node, list):
                problems.append(f"--set {item!r}: {parts[-2]} is an array of tables: name an element and its key")
            else:
                node[parts[-1]] = value
    if problems:
        raise ConfigError(problems)
    return data


def load_config(path: str | Path, overrides: list[str] | tuple[str, ...] = ()) -> Config:
    """Load and validate a machine configuration file, with optional ``--set`` overrides."""
    data = read_toml(path)
    if overrides:
        data = apply_overrides(data, overrides, str(path))
    return validate(Config, data, str(path))
