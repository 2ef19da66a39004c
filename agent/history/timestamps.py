"""Where a history element's time comes from: a JSON sidecar, the file's name, or a start and a cadence.

- sidecar: ``FILE.json`` beside the file (the sidecar that may also name the unit, see
  :mod:`rotorwatch.recordings`) with ``time`` (ISO 8601, e.g. ``2004-02-12T10:32:39Z``) or ``time_s``
  (seconds since 1970-01-01 UTC);
- the file's name, read with a ``strftime``-style pattern given on the command line, e.g.
  ``%Y.%m.%d.%H.%M.%S`` for ``2004.02.12.10.32.39``; the pattern is searched anywhere in the name, so
  a prefix or an extension around it does not matter;
- a start date and a cadence: element k (in name order) at ``start + k x cadence``.

Every time is UTC. A time that cannot be read is one line naming the file and the pattern.
"""

from __future__ import annotations

import json
import math
import re
from datetime import UTC, datetime
from pathlib import Path

from ..errors import InputError

# strftime directives a pattern may use, and the text each one matches in a name
_DIRECTIVES = {
    "Y": r"\d{4}", "m": r"\d{1,2}", "d": r"\d{1,2}", "H": r"\d{1,2}", "M": r"\d{1,2}", "S": r"\d{1,2}",
    "y": r"\d{2}", "j": r"\d{1,3}", "f": r"\d{1,6}", "b": r"[A-Za-z]{3}", "z": r"[+-]\d{4}|Z", "%": "%",
}
_DURATION = re.compile(r"^\s*([0-9]*\.?[0-9]+(?:[eE][+-]?\d+)?)\s*(s|sec|min|h|hours?|d|days?)?\s*$")
_DURATION_S = {None: 1.0, "s": 1.0, "sec": 1.0, "min": 60.0, "h": 3600.0, "hour": 3600.0, "hours": 3600.0,
               "d": 86400.0, "day": 86400.0, "days": 86400.0}


def parse_date(text: str, where: str) -> float:
    """An ISO 8601 date and time (UTC when no offset is given) -> seconds since 1970-01-01 UTC."""
    raw = str(text).strip()
    try:
        dt = datetime.fromisoformat(raw.replace("Z", "+00:00"))
    except ValueError:
        raise InputError(f"{where} = {raw!r}: not an ISO 8601 date and time, e.g. 2004-02-12T10:32:39Z") from None
    if dt.tzinfo is None:
        dt = dt.replace(tzinfo=UTC)
    return dt.timestamp()


def parse_duration(text: str, where: str) -> float:
    """``600``, ``600 s``, ``10 min``, ``1.5 h``, ``2 d`` -> seconds (positive)."""
    m = _DURATION.match(str(text))
    if m is None or float(m.group(1)) <= 0:
        raise InputError(f"{where} = {text!r}: expected a positive duration, e.g. 600 s, 10 min, 1 h or 2 d")
    return float(m.group(1)) * _DURATION_S[m.group(2)]


def pattern_regex(pattern: str) -> re.Pattern[str]:
    """The regular expression that finds a ``strftime`` pattern's text inside a file name."""
    out, i = [], 0
    while i < len(pattern):
        ch = pattern[i]
        if ch == "%" and i + 1 < len(pattern):
            code = pattern[i + 1]
            if code not in _DIRECTIVES:
                raise InputError(f"--time-pattern = {pattern!r}: %{code} is not supported "
                                 f"(use %{', %'.join(k for k in _DIRECTIVES if k != '%')})")
            out.append(f"(?:{_DIRECTIVES[code]})")
            i += 2
            continue
        out.append(re.escape(ch))
        i += 1
    return re.compile("".join(out))


def time_from_name(path: Path, pattern: str, regex: re.Pattern[str] | None = None) -> float:
    """The time a file's name carries, read with ``pattern``."""
    rx = regex or pattern_regex(pattern)
    for m in rx.finditer(path.name):
        try:
            dt = datetime.strptime(m.group(0), pattern)
        except ValueError:
            continue
        if dt.tzinfo is None:
            dt = dt.replace(tzinfo=UTC)
        return dt.timestamp()
    raise InputError(f"{path}: its name holds no time in the pattern {pattern!r} (--time-pattern)")


def time_from_sidecar(path: Path) -> float | None:
    """The time in ``FILE.json`` beside ``path`` (``time`` ISO 8601 or ``time_s``), None without one."""
    side = path.with_suffix(".json")
    if not side.is_file():
        return None
    try:
        doc = json.loads(side.read_text(encoding="utf-8"))
    except (OSError, ValueError, UnicodeDecodeError) as e:
        raise InputError(f"{side}: the sidecar cannot be read: {e}") from None
    if not isinstance(doc, dict):
        return None
    if "time" in doc:
        return parse_date(str(doc["time"]), f"{side}: time")
    if "time_s" in doc:
        try:
            t = float(doc["time_s"])
        except (TypeError, ValueError):
            t = math.nan
        if not math.isfinite(t):
            raise InputError(f"{side}: time_s = {doc['time_s']!r}: expected seconds since 1970-01-01 UTC")
        return t
    return None


def iso(t_s: float) -> str:
    return datetime.fromtimestamp(t_s, tz=UTC).strftime("%Y-%m-%dT%H:%M:%SZ")
