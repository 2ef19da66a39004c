"""Shaft speeds that a drive or PLC publishes over MQTT (``[machines.speed] mode = "mqtt"``).

A reading is either a plain number (``1482.5``) or a JSON object ``{"rpm": 1482.5}``, in r/min. The
newest reading per machine is kept with its arrival time; it counts as stale after the machine's
``mqtt_max_age_s``, and then :meth:`SpeedBoard.rpm` returns None so the pipeline falls back to the
nominal speed. Readings arrive on paho's network thread and are read by the analysis loop.
"""

from __future__ import annotations

import json
import logging
import math
import threading
import time
from collections.abc import Callable

from ..logs import RepeatLimiter, fields
from ..settings.models import Config

log = logging.getLogger(__name__)

MAX_RPM = 1_000_000.0


class SpeedRejected(ValueError):
    pass


def parse_rpm(payload: bytes) -> float:
    """``b"1482"`` or ``b'{"rpm": 1482}'`` -> 1482.0; anything else raises :class:`SpeedRejected`."""
    try:
        text = payload.decode("utf-8").strip()
    except UnicodeDecodeError:
        raise SpeedRejected("not UTF-8 text") from None
    if not text:
        raise SpeedRejected("empty payload")
    try:
        data = json.loads(text)
    except json.JSONDecodeError:
        raise SpeedRejected(f"not a number or JSON: {text[:40]!r}") from None
    if isinstance(data, dict):
        if "rpm" not in data:
            raise SpeedRejected(f"JSON object without 'rpm' (keys: {', '.join(list(data)[:5])})")
        data = data["rpm"]
    if isinstance(data, bool) or not isinstance(data, (int, float)):
        raise SpeedRejected(f"rpm must be a number, got {type(data).__name__}")
    rpm = float(data)
    if not math.isfinite(rpm) or rpm < 0 or rpm > MAX_RPM:
        raise SpeedRejected(f"rpm = {rpm!r}: must be finite, 0 or more and below {MAX_RPM:g}")
    return rpm


class SpeedBoard:
    def __init__(self, config: Config, clock: Callable[[], float] = time.monotonic):
        self._clock = clock
        self._lock = threading.Lock()
        self._readings: dict[str, tuple[float, float]] = {}  # machine -> (rpm, arrival)
        self._limiter = RepeatLimiter(300.0, clock)
        self.set_config(config)

    def set_config(self, config: Config) -> None:
        topics: dict[str, list[tuple[str, float]]] = {}
        for m in config.machines:
            if m.speed.mode == "mqtt" and m.speed.mqtt_topic:
                topics.setdefault(m.speed.mqtt_topic, []).append((m.id, m.speed.mqtt_max_age_s))
        with self._lock:
            self._topics = topics
            self._max_age = {mid: age for entries in topics.values() for mid, age in entries}

    @property
    def topics(self) -> list[str]:
        with self._lock:
            return sorted(self._topics)

    def offer(self, topic: str, payload: bytes) -> bool:
        """Take a message from ``topic``; returns False if it is not a speed topic or is rejected."""
        with self._lock:
            machines = self._topics.get(topic)
        if not machines:
            return False
        try:
            rpm = parse_rpm(payload)
        except SpeedRejected as e:
            ok, held = self._limiter.allow(f"bad:{topic}")
            if ok:
                log.warning("ignored speed reading", extra=fields(topic=topic, problem=str(e), repeats=held or None))
            return False
        now = self._clock()
        with self._lock:
            for mid, _ in machines:
                self._readings[mid] = (rpm, now)
        return True

    def rpm(self, machine_id: str) -> float | None:
        with self._lock:
            reading = self._readings.get(machine_id)
            max_age = self._max_age.get(machine_id)
        if reading is None or max_age is None:
            return None
        rpm, arrived = reading
        if self._clock() - arrived > max_age:
            return None
        return rpm
