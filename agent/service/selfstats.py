"""The agent's own health counts: what capture, analysis and publishing did (thread-safe).

Counters only go up; gauges are set. Every name here is exposed by :mod:`rotorwatch.service.metrics`
with the ``rotorwatch_`` prefix (counters get ``_total``), where their help text lives. Writers call
:meth:`SelfStats.inc` / :meth:`SelfStats.set` from any thread; the collector takes a copy.
"""

from __future__ import annotations

import threading

Labels = tuple[tuple[str, str], ...]

#: counter name -> help (exposed as rotorwatch_<name>_total)
COUNTERS = {
    "updates": "analysis updates completed, per machine",
    "updates_skipped": "analysis updates skipped because the previous one was still running (analysis behind the input)",
    "samples_captured": "samples copied from the input source into the ring buffers (summed over the channels in use)",
    "input_overflows": "chunks the input source flagged as overflowed (samples lost in the driver)",
    "input_gaps": "discontinuities in the input stream (the ring buffers restart filling)",
    "source_stalls": "times the input source delivered nothing for longer than two update intervals",
    "source_reopens": "attempts to open or reopen the input source",
    "mqtt_messages_published": "MQTT messages handed to the client for publishing",
    "mqtt_publish_failures": "MQTT publishes refused by the client (queue full, not connected at QoS 0, too large)",
    "mqtt_reconnects": "MQTT connections established after the first one",
    "mqtt_connect_failures": "MQTT connection attempts refused by the broker or failed at the network level",
    "commands": "commands received on the command topic, by result",
    "config_reloads": "configuration reloads, by result",
    "alarm_events": "state transition events emitted, per machine",
    "sensor_faults": "times a point entered a sensor fault, by machine, point and fault kind",
    "spool_dropped_records": "records the publish spool dropped to stay within its bounds, by reason (since the spool file was created)",
}

#: gauge name -> help
GAUGES = {
    "mqtt_connected": "1 while connected to the MQTT broker",
    "source_up": "1 while the input source is open and delivering samples",
    "update_duration_seconds": "wall time of the latest analysis update, per machine",
    "last_update_timestamp_seconds": "time of the latest analysis update (source clock), per machine",
    "spool_records": "records waiting in the publish spool for the broker's acknowledgement",
    "spool_bytes": "bytes held in the publish spool (topics and payloads)",
}


class SelfStats:
    def __init__(self) -> None:
        self._lock = threading.Lock()
        self._counters: dict[tuple[str, Labels], float] = {}
        self._gauges: dict[tuple[str, Labels], float] = {}

    @staticmethod
    def _key(name: str, labels: dict[str, str]) -> tuple[str, Labels]:
        return name, tuple(sorted((k, str(v)) for k, v in labels.items()))

    def inc(self, name: str, amount: float = 1.0, **labels: str) -> None:
        if name not in COUNTERS:
            raise KeyError(f"unknown counter {name!r}")
        key = self._key(name, labels)
        with self._lock:
            self._counters[key] = self._counters.get(key, 0.0) + amount

    def mirror_counter(self, name: str, value: float, **labels: str) -> None:
        """Set a counter to a total kept elsewhere (the spool's own drop counts)."""
        if name not in COUNTERS:
            raise KeyError(f"unknown counter {name!r}")
        key = self._key(name, labels)
        with self._lock:
            self._counters[key] = max(self._counters.get(key, 0.0), float(value))

    def set(self, name: str, value: float, **labels: str) -> None:
        if name not in GAUGES:
            raise KeyError(f"unknown gauge {name!r}")
        with self._lock:
            self._gauges[self._key(name, labels)] = float(value)

    def counter(self, name: str, **labels: str) -> float:
        with self._lock:
            return self._counters.get(self._key(name, labels), 0.0)

    def gauge(self, name: str, **labels: str) -> float | None:
        with self._lock:
            return self._gauges.get(self._key(name, labels))

    def copy(self) -> tuple[dict[tuple[str, Labels], float], dict[tuple[str, Labels], float]]:
        with self._lock:
            return dict(self._counters), dict(self._gauges)
