"""The Prometheus publisher: ``/metrics`` and ``/healthz`` (deploy/metrics.md is the contract).

- :mod:`.collector`: :class:`UpdateCollector`, the families of every scrape (measurements of the latest
  update per machine, the agent's own counts);
- :mod:`.server`: :class:`MetricsServer`, prometheus_client's WSGI app with ``/healthz`` beside it.

A change of ``[metrics]`` restarts the server; any other reload is adopted by the collector.
"""

from __future__ import annotations

from prometheus_client import CollectorRegistry

from ...alarms.records import MachineUpdate
from ...settings.models import Config, Machine
from ..base import Blocks, Publisher, SinkContext, changed
from .collector import UpdateCollector
from .server import MetricsServer

__all__ = ["MetricsServer", "PrometheusSink", "UpdateCollector", "make_registry"]


def make_registry(collector: UpdateCollector) -> CollectorRegistry:
    """A fresh registry holding only our collector (no process/platform defaults)."""
    registry = CollectorRegistry(auto_describe=False)
    registry.register(collector)
    return registry


class PrometheusSink(Publisher):
    name = "metrics"

    def __init__(self, config: Config, context: SinkContext):
        assert config.metrics is not None
        self.config = config
        self.collector = UpdateCollector(config, context.stats)
        self.server = MetricsServer(config.metrics, make_registry(self.collector), context.config_dir,
                                    health=self.collector.health)

    @classmethod
    def from_config(cls, config: Config, context: SinkContext) -> PrometheusSink | None:
        return cls(config, context) if config.metrics is not None else None

    def start(self) -> None:
        self.server.start()  # a one-line RotorwatchError when the port or the TLS files are unusable

    def on_update(self, update: MachineUpdate, blocks_v: Blocks | None, machine: Machine) -> None:
        self.collector.observe(update)

    def reconfigure(self, config: Config) -> bool:
        if changed(self.config, config, "metrics"):
            return True
        self.config = config
        self.collector.set_config(config)
        return False

    def close(self) -> None:
        self.server.stop()
