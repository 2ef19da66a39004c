"""Logging for the daemon: stdlib ``logging`` to stderr, one line per record, journald-friendly.

Text lines read ``level component message key=value ...``; ``--log-format json`` writes one JSON object
per line instead (``{"level": ..., "component": ..., "message": ..., key: value}``). The component is
the logger name without the ``rotorwatch.`` prefix (``service.mqtt``).

Structured fields travel in ``extra={"fields": {...}}``; :func:`fields` builds that dict. Repeated
conditions (a broker that stays away, a source that keeps stalling) go through :class:`RepeatLimiter`,
so the log stays quiet in steady state while the counts live in the metrics.
"""

from __future__ import annotations

import json
import logging
import sys
import threading
import time
from collections.abc import Callable
from typing import Any

_PREFIX = "rotorwatch."


def fields(**kv: Any) -> dict[str, Any]:
    """``log.info("msg", extra=fields(machine="ef3"))``; keys whose value is None are left out."""
    return {"fields": {k: v for k, v in kv.items() if v is not None}}


def _component(name: str) -> str:
    return name[len(_PREFIX):] if name.startswith(_PREFIX) else name


def _text_value(v: Any) -> str:
    if isinstance(v, float):
        text = f"{v:.6g}"
    else:
        text = str(v)
    if text == "" or any(c in text for c in ' "=\n\t'):
        return json.dumps(text)
    return text


class TextFormatter(logging.Formatter):
    """``WARNING service.mqtt broker refused the login host=127.0.0.1 reason='Not authorized'``."""

    def format(self, record: logging.LogRecord) -> str:
        message = record.getMessage().replace("\n", " | ")
        parts = [record.levelname, _component(record.name), message]
        for k, v in (getattr(record, "fields", None) or {}).items():
            parts.append(f"{k}={_text_value(v)}")
        line = " ".join(parts)
        if record.exc_info:
            line += " | " + self.formatException(record.exc_info).replace("\n", " | ")
        return line


class JsonFormatter(logging.Formatter):
    def format(self, record: logging.LogRecord) -> str:
        out: dict[str, Any] = {
            "time": round(record.created, 3),
            "level": record.levelname,
            "component": _component(record.name),
            "message": record.getMessage(),
        }
        for k, v in (getattr(record, "fields", None) or {}).items():
            out.setdefault(k, v if isinstance(v, (int, float, str, bool, type(None))) else str(v))
        if record.exc_info:
            out["exception"] = self.formatException(record.exc_info)
        return json.dumps(out, allow_nan=False, default=str)


def setup_logging(level: str = "INFO", log_format: str = "text", stream: Any = None) -> logging.Handler:
    """Send the ``rotorwatch`` loggers (and paho's, at WARNING) to stderr. Returns the handler."""
    handler = logging.StreamHandler(stream if stream is not None else sys.stderr)
    handler.setFormatter(JsonFormatter() if log_format == "json" else TextFormatter())
    root = logging.getLogger("rotorwatch")
    for old in list(root.handlers):
        root.removeHandler(old)
    root.addHandler(handler)
    root.setLevel(level.upper())
    root.propagate = False
    return handler


class RepeatLimiter:
    """Lets a condition through once, then at most once per ``interval_s``; counts what it held back.

    ``allow(key)`` returns ``(True, suppressed_since_last)`` when the caller should log now. ``reset(key)``
    forgets a condition once it has cleared, so its next occurrence logs at once.
    """

    def __init__(self, interval_s: float = 300.0, clock: Callable[[], float] = time.monotonic):
        self.interval_s = interval_s
        self._clock = clock
        self._last: dict[str, float] = {}
        self._held: dict[str, int] = {}
        self._lock = threading.Lock()

    def allow(self, key: str) -> tuple[bool, int]:
        now = self._clock()
        with self._lock:
            last = self._last.get(key)
            if last is None or now - last >= self.interval_s:
                self._last[key] = now
                return True, self._held.pop(key, 0)
            self._held[key] = self._held.get(key, 0) + 1
            return False, 0

    def reset(self, key: str) -> None:
        with self._lock:
            self._last.pop(key, None)
            self._held.pop(key, None)
