"""The agent's own health counts: what capture, analysis and publishing did (thread-safe).

Each count is a ``prometheus_client`` :class:`~prometheus_client.Counter` or
:class:`~prometheus_client.Gauge` declared below with its labels and help, on a
:class:`~prometheus_client.CollectorRegistry` of the :class:`SelfStats` instance (one per daemon, so two
daemons in one process, or two tests, never share a count). Writers use the objects, attributes of
:class:`SelfStats` named as below (``stats.updates.labels(machine="ef3").inc()``), from any thread;
a wrong label set is a programming error (ValueError).

The metrics publisher (:mod:`rotorwatch.publishers.prometheus.collector`) exposes :meth:`SelfStats.families`
with the ``agent`` label in front (the agent id can change on a reload; the counts stay). Names carry
the ``rotorwatch_`` prefix; counters are exposed with ``_total``. deploy/metrics.md lists them.
"""

from __future__ import annotations

import threading
from collections.abc import Iterator
from dataclasses import dataclass

from prometheus_client import CollectorRegistry, Counter, Gauge
from prometheus_client.core import CounterMetricFamily, GaugeMetricFamily, Metric

PREFIX = "rotorwatch_"
Labels = tuple[tuple[str, str], ...]


@dataclass(frozen=True)
class Count:
    help: str
    labels: tuple[str, ...] = ()


#: counter name -> help and labels (exposed as rotorwatch_<name>_total)
COUNTERS = {
    "updates": Count("analysis updates completed, per machine", ("machine",)),
    "updates_skipped": Count("analysis updates skipped because the previous one was still running (analysis behind the input)"),
    "samples_captured": Count("samples copied from the input source into the ring buffers (summed over the channels in use)"),
    "input_overflows": Count("chunks the input source flagged as overflowed (samples lost in the driver)"),
    "input_gaps": Count("discontinuities in the input stream (the ring buffers restart filling)"),
    "source_stalls": Count("times the input source delivered nothing for longer than two update intervals"),
    "source_reopens": Count("attempts to open or reopen the input source"),
    "mqtt_messages_published": Count("MQTT messages handed to the client for publishing"),
    "mqtt_publish_failures": Count("MQTT publishes refused by the client (queue full, not connected at QoS 0, too large)"),
    "mqtt_reconnects": Count("MQTT connections established after the first one"),
    "mqtt_connect_failures": Count("MQTT connection attempts refused by the broker or failed at the network level"),
    "commands": Count("commands received on the command topic, by result", ("result",)),
    "config_reloads": Count("configuration reloads, by result", ("result",)),
    "alarm_events": Count("state transition events emitted, per machine", ("machine",)),
    "sensor_faults": Count("times a point entered a sensor fault, by machine, point and fault kind",
                           ("fault", "machine", "point")),
    "spool_dropped_records": Count("records the publish spool dropped to stay within its bounds, by reason "
                                   "(since the spool file was created)", ("reason",)),
}

#: gauge name -> help and labels
GAUGES = {
    "mqtt_connected": Count("1 while connected to the MQTT broker"),
    "source_up": Count("1 while the input source is open and delivering samples"),
    "update_duration_seconds": Count("wall time of the latest analysis update, per machine", ("machine",)),
    "last_update_timestamp_seconds": Count("time of the latest analysis update (source clock), per machine", ("machine",)),
    "spool_records": Count("records waiting in the publish spool for the broker's acknowledgement"),
    "spool_bytes": Count("bytes held in the publish spool (topics and payloads)"),
}


class _ShownWhenSet(Gauge):
    """An unlabelled gauge exposed from its first ``set()`` on: before, the agent has no such figure
    (``mqtt_connected`` without ``[mqtt]`` would read as a broker that is down)."""

    def __init__(self, name: str, documentation: str, registry: CollectorRegistry):
        super().__init__(name, documentation, registry=None)  # registered at the first set()
        self._pending_registry: CollectorRegistry | None = registry
        self._register_lock = threading.Lock()

    def set(self, value: float) -> None:
        super().set(value)
        with self._register_lock:
            if self._pending_registry is not None:
                self._pending_registry.register(self)
                self._pending_registry = None


class SelfStats:
    """The counts of one agent, as prometheus_client objects on :attr:`registry` (one attribute per
    name in :data:`COUNTERS` and :data:`GAUGES`): ``stats.updates.labels(machine="ef3").inc()``,
    ``stats.mqtt_connected.set(1)``."""

    updates: Counter
    updates_skipped: Counter
    samples_captured: Counter
    input_overflows: Counter
    input_gaps: Counter
    source_stalls: Counter
    source_reopens: Counter
    mqtt_messages_published: Counter
    mqtt_publish_failures: Counter
    mqtt_reconnects: Counter
    mqtt_connect_failures: Counter
    commands: Counter
    config_reloads: Counter
    alarm_events: Counter
    sensor_faults: Counter
    spool_dropped_records: Counter
    mqtt_connected: Gauge
    source_up: Gauge
    update_duration_seconds: Gauge
    last_update_timestamp_seconds: Gauge
    spool_records: Gauge
    spool_bytes: Gauge

    def __init__(self) -> None:
        self.registry = CollectorRegistry(auto_describe=True)
        for name, c in COUNTERS.items():
            setattr(self, name, Counter(PREFIX + name, c.help, c.labels, registry=self.registry))
        for name, c in GAUGES.items():
            gauge = Gauge(PREFIX + name, c.help, c.labels, registry=self.registry) if c.labels \
                else _ShownWhenSet(PREFIX + name, c.help, self.registry)
            setattr(self, name, gauge)
        self._lock = threading.Lock()
        self._mirrored: dict[tuple[str, Labels], float] = {}

    def mirror(self, counter: Counter, total: float, **labels: str) -> None:
        """Raise ``counter`` to a total kept elsewhere (the spool's own drop counts)."""
        key = str(id(counter)), tuple(sorted(labels.items()))
        with self._lock:
            step = float(total) - self._mirrored.get(key, 0.0)
            if step <= 0:
                return
            self._mirrored[key] = float(total)
        (counter.labels(**labels) if labels else counter).inc(step)

    # -- reading (tests, the MQTT data-quality block) ---------------------------------------------
    def counter(self, name: str, **labels: str) -> float:
        """The value of counter ``name`` (0 when the series does not exist yet)."""
        if name not in COUNTERS:
            raise KeyError(f"unknown counter {name!r}")
        v = self.registry.get_sample_value(f"{PREFIX}{name}_total", {k: str(x) for k, x in labels.items()})
        return 0.0 if v is None else v

    def gauge(self, name: str, **labels: str) -> float | None:
        """The value of gauge ``name`` (None when never set)."""
        if name not in GAUGES:
            raise KeyError(f"unknown gauge {name!r}")
        return self.registry.get_sample_value(PREFIX + name, {k: str(x) for k, x in labels.items()})

    def copy(self) -> tuple[dict[tuple[str, Labels], float], dict[tuple[str, Labels], float]]:
        """(counters, gauges): (short name, sorted labels) -> value, of the series that exist."""
        counters: dict[tuple[str, Labels], float] = {}
        gauges: dict[tuple[str, Labels], float] = {}
        for fam in self.registry.collect():
            name = fam.name[len(PREFIX):]
            for s in fam.samples:
                labels = tuple(sorted(s.labels.items()))
                if fam.type == "counter" and s.name.endswith("_total"):
                    counters[(name, labels)] = s.value
                elif fam.type == "gauge":
                    gauges[(name, labels)] = s.value
        return counters, gauges

    def families(self, agent: str) -> Iterator[Metric]:
        """Every count with the ``agent`` label in front, by name (counters, then gauges); labelled
        metrics without a series yet and gauges never set are left out."""
        counters, gauges = self.copy()
        for kind, values, table in (("counter", counters, COUNTERS), ("gauge", gauges, GAUGES)):
            for name in sorted({n for n, _ in values}):
                label_names = list(table[name].labels)
                fam_cls = CounterMetricFamily if kind == "counter" else GaugeMetricFamily
                fam = fam_cls(PREFIX + name, table[name].help, labels=["agent", *label_names])
                for (n, labels), value in sorted(values.items()):
                    if n == name:
                        d = dict(labels)
                        fam.add_metric([agent, *(d.get(k, "") for k in label_names)], value)
                yield fam
