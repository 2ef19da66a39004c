"""When and what the daemon publishes over MQTT, per machine update.

- machine and point **state** (retained): whenever a state, its reason or the ISO zone changes, and
  refreshed every ``metrics_interval_s`` (wall clock) so a retained copy never grows old;
- point **metrics** (not retained): every ``metrics_interval_s``;
- **events** (not retained): every transition in the update, as it happens.

States, metrics and events go through :meth:`MqttLink.publish_record`: with the durable spool
(``[mqtt] delivery = "spool"``, the default) they get a ``seq`` and ``ts`` and survive outages and
restarts; availability, info, discovery and command results are sent directly.

Called from the analysis loop only. Payloads come from :mod:`rotorwatch.service.payloads`.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from typing import Any

from ..alarms.records import AlarmEvent, MachineUpdate
from ..settings.models import Config
from . import payloads
from .mqtt import MqttLink


class UpdatePublisher:
    def __init__(self, link: MqttLink, config: Config, clock: Callable[[], float] = time.monotonic):
        self.link = link
        self.topics = link.topics
        self._clock = clock
        self._signature: dict[str, tuple] = {}  # topic -> what the last state publish said
        self._last_refresh: dict[str, float] = {}  # machine -> monotonic time of the last refresh
        self.set_config(config)

    def set_config(self, config: Config) -> None:
        self.config = config
        self.agent_id = config.site.agent_id
        self.interval_s = self.link.settings.metrics_interval_s
        self._machines = {m.id: m for m in config.machines}

    def publish_info(self) -> None:
        from ..sources.base import input_clock

        info = payloads.hello_payload(self.agent_id, self.config.site.name, [m.id for m in self.config.machines],
                                      input_clock(self.config.acquisition))
        self.link.publish(self.topics.info, payloads.encode(info), retain=True)
        self.publish_discovery()

    def publish_discovery(self) -> int:
        """Retained discovery configs for automation hubs, when ``[mqtt] discovery_prefix`` is set."""
        s = self.link.settings
        if not s.discovery_prefix:
            return 0
        from ..web.discovery import discovery_messages

        messages = discovery_messages(self.config, s.topic_prefix, s.discovery_prefix)
        for topic, payload in messages:
            self.link.publish(topic, payload, retain=True)
        return len(messages)

    def clear_discovery(self, old: Config, new: Config) -> None:
        """After a reload: empty retained messages for discovery configs of ``old`` that ``new`` lacks."""
        if old.mqtt is None or not old.mqtt.discovery_prefix:
            return
        from ..web.discovery import discovery_messages

        keep: set[str] = set()
        if new.mqtt is not None and new.mqtt.discovery_prefix:
            keep = {t for t, _ in discovery_messages(new, new.mqtt.topic_prefix, new.mqtt.discovery_prefix)}
        for topic, _ in discovery_messages(old, old.mqtt.topic_prefix, old.mqtt.discovery_prefix):
            if topic not in keep:
                self.link.publish(topic, b"", retain=True)

    def publish_update(self, update: MachineUpdate, metrics: bool = True) -> None:
        machine = self._machines.get(update.machine_id)
        now = self._clock()
        last = self._last_refresh.get(update.machine_id)
        refresh = last is None or now - last >= self.interval_s
        if refresh:
            self._last_refresh[update.machine_id] = now

        m_topic = self.topics.machine_state(update.machine_id)
        m_sig = (update.state, update.reason, update.rpm_source)
        if refresh or self._signature.get(m_topic) != m_sig:
            self._signature[m_topic] = m_sig
            body = payloads.machine_state_payload(update, self.agent_id, machine)
            self.link.publish_record("state", m_topic, body, retain=True)

        counts = self._input_counts()
        for pid, pu in update.points.items():
            quality = {"sensor_faults": self._fault_counts(update.machine_id, pid), **counts}
            p_topic = self.topics.point_state(update.machine_id, pid)
            zone = pu.result.iso_zone if pu.result is not None else None
            p_sig = (pu.state, pu.reason, zone, tuple((n, v.state, v.latched) for n, v in sorted(pu.values.items())))
            if refresh or self._signature.get(p_topic) != p_sig:
                self._signature[p_topic] = p_sig
                body = payloads.point_state_payload(update, pu, self.agent_id, machine, quality)
                self.link.publish_record("state", p_topic, body, retain=True)
            if refresh and metrics:
                mbody = payloads.point_metrics_payload(update, pu, self.agent_id, machine, quality)
                if mbody is not None:
                    self.link.publish_record("metrics", self.topics.point_metrics(update.machine_id, pid), mbody)

        self.publish_events(update.events)

    def _input_counts(self) -> dict[str, int]:
        stats = getattr(self.link, "stats", None)
        if stats is None:
            return {}
        return {name: int(stats.counter(name)) for name in ("input_overflows", "input_gaps", "source_stalls")}

    def _fault_counts(self, machine_id: str, point_id: str) -> dict[str, int]:
        stats = getattr(self.link, "stats", None)
        if stats is None:
            return {}
        counters, _ = stats.copy()
        out = {}
        for (name, labels), value in counters.items():
            d = dict(labels)
            if name == "sensor_faults" and d.get("machine") == machine_id and d.get("point") == point_id:
                out[d.get("fault", "")] = int(value)
        return dict(sorted(out.items()))

    def publish_events(self, events: list[AlarmEvent]) -> None:
        for e in events:
            self.link.publish_record("event", self.topics.events, payloads.event_payload(e, self.agent_id))

    def publish_agent_event(self, kind: str, message: str, time_s: float, **detail: Any) -> None:
        body = payloads.agent_event_payload(kind, message, self.agent_id, time_s, **detail)
        self.link.publish_record("event", self.topics.events, body)

    def publish_command_result(self, body: dict[str, Any]) -> None:
        self.link.publish(self.topics.command_result, payloads.encode(body))

    def forget(self, machine_id: str) -> None:
        """A machine removed by a reload: clear its retained topics so dashboards do not show ghosts."""
        prefix = f"{self.topics.root}/machine/{machine_id}/"
        for topic in [t for t in self._signature if t.startswith(prefix)]:
            self._signature.pop(topic, None)
            self.link.publish(topic, b"", retain=True)
        self._last_refresh.pop(machine_id, None)
