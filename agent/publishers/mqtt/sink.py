"""The MQTT publisher: when and what goes out over MQTT, per machine update.

- machine and point **state** (retained): whenever a state, its reason or the ISO zone changes, and
  refreshed every ``metrics_interval_s`` (wall clock) so a retained copy never grows old;
- point **metrics** (not retained): every ``metrics_interval_s``;
- **events** (not retained): every transition in the update, as it happens;
- the retained **info** and **discovery** configs at start and after a reload; command results and
  agent events as they come; at the end the last states once more, then ``offline``.

Everything goes through the link's :class:`~rotorwatch.publishers.mqtt.outbox.Outbox`: with the
durable spool (``[mqtt] delivery = "spool"``, the default) states, metrics and events get a ``seq``
and ``ts`` and survive outages and restarts; the rest waits in memory. Payloads come from
:mod:`rotorwatch.publishers.mqtt.payloads`. Called from the analysis loop only (commands arrive on
paho's thread and are queued to the loop through the :class:`~rotorwatch.service.command_desk.CommandDesk`).
"""

from __future__ import annotations

import time
from collections.abc import Callable
from typing import Any

from ...alarms.records import AlarmEvent, MachineUpdate
from ...errors import RotorwatchError
from ...selfstats import SelfStats
from ...settings.models import Config, Machine
from ...storage.spool import Spool
from ...storage.wallclock import ClockWatch
from ..base import Blocks, Publisher, SinkContext, changed
from . import payloads
from .discovery import discovery_messages
from .link import MqttLink


class UpdatePublisher:
    """States, metrics and events of machine updates onto ``link`` (rate and change rules above)."""

    def __init__(self, link: MqttLink, config: Config, clock: Callable[[], float] = time.monotonic,
                 stats: SelfStats | None = None):
        self.link = link
        self.topics = link.topics
        self.stats = stats if stats is not None else link.stats
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
        from ...sources.base import input_clock

        info = payloads.hello_payload(self.agent_id, self.config.site.name, [m.id for m in self.config.machines],
                                      input_clock(self.config.acquisition))
        self.link.publish(self.topics.info, payloads.encode(info), retain=True)
        self.publish_discovery()

    def publish_discovery(self) -> int:
        """Retained discovery configs for automation hubs, when ``[mqtt] discovery_prefix`` is set."""
        s = self.link.settings
        if not s.discovery_prefix:
            return 0
        messages = discovery_messages(self.config, s.topic_prefix, s.discovery_prefix)
        for topic, payload in messages:
            self.link.publish(topic, payload, retain=True)
        return len(messages)

    def clear_discovery(self, old: Config, new: Config) -> None:
        """After a reload: empty retained messages for discovery configs of ``old`` that ``new`` lacks."""
        if old.mqtt is None or not old.mqtt.discovery_prefix:
            return
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
        return {name: int(self.stats.counter(name)) for name in ("input_overflows", "input_gaps", "source_stalls")}

    def _fault_counts(self, machine_id: str, point_id: str) -> dict[str, int]:
        counters, _ = self.stats.copy()
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
        prefix = self.topics.machine_prefix(machine_id)
        for topic in [t for t in self._signature if t.startswith(prefix)]:
            self._signature.pop(topic, None)
            self.link.publish(topic, b"", retain=True)
        self._last_refresh.pop(machine_id, None)


class MqttSink(Publisher):
    """The ``[mqtt]`` publisher: the link, its spool (``delivery = "spool"``) and the update publisher.

    A change of ``[mqtt]``, ``[site]`` or the spool's and forwarding's settings restarts it (a new
    connection under the new identity); any other reload is adopted in place."""

    name = "mqtt"
    RESTART_ON = ("mqtt", "site", "storage.spool", "storage.forwarding", "storage.state_dir")

    def __init__(self, config: Config, context: SinkContext, spool: Spool | None):
        assert config.mqtt is not None
        self.config = config
        self.context = context
        self.spool = spool
        speeds = context.speeds
        self.link = MqttLink(config.mqtt, config.site.agent_id, context.config_dir, context.stats,
                             on_command=self._command_arrived,
                             on_message=speeds.offer if speeds is not None else None,
                             extra_topics=speeds.topics if speeds is not None else [],
                             spool=spool, forwarding=config.storage.forwarding,
                             spool_settings=config.storage.spool)
        self.publisher = UpdatePublisher(self.link, config, stats=context.stats)
        self._last: dict[str, MachineUpdate] = {}
        self._restarting = False
        self._spool_stats_at = 0.0

    @classmethod
    def from_config(cls, config: Config, context: SinkContext) -> MqttSink | None:
        if config.mqtt is None:
            return None
        spool = None
        if config.mqtt.delivery == "spool":  # StorageError (one line) if it cannot be opened
            spool = Spool.in_state_dir(context.state_dir, config.storage.spool, clock_note=ClockWatch())
        return cls(config, context, spool)

    def start(self) -> None:
        try:
            self.link.start()  # raises a one-line RotorwatchError for unusable TLS/password files
        except BaseException:
            self._close_spool()
            raise
        self.publisher.publish_info()

    def on_update(self, update: MachineUpdate, blocks_v: Blocks | None, machine: Machine) -> None:
        self._last[update.machine_id] = update
        self.publisher.publish_update(update)

    def reconfigure(self, config: Config) -> bool:
        old = self.config
        if changed(old, config, *self.RESTART_ON):
            self.publisher.clear_discovery(old, config)
            self._restarting = True  # closed and built again: no final states from this one
            return True
        keep = {m.id for m in config.machines}
        for mid in [m for m in self._last if m not in keep]:
            self._last.pop(mid)
        for mid in [m.id for m in old.machines if m.id not in keep]:
            self.publisher.forget(mid)
        self.config = config
        if self.context.speeds is not None:
            self.link.set_extra_topics(self.context.speeds.topics)
        self.publisher.clear_discovery(old, config)
        self.publisher.set_config(config)
        self.publisher.publish_info()
        return False

    def close(self) -> None:
        """The last states once more (not the metrics), then ``offline`` and a bounded disconnect."""
        try:
            if not self._restarting:
                for update in self._last.values():
                    self.publisher.publish_update(update, metrics=False)
            self.link.stop()
        finally:
            self._close_spool()

    def _close_spool(self) -> None:
        if self.spool is not None:
            self.spool.close()
            self.spool = None

    def tick(self) -> None:
        """The spool's figures as self-metrics, at most once a second."""
        if self.spool is None:
            return
        now = time.monotonic()
        if now - self._spool_stats_at < 1.0:
            return
        self._spool_stats_at = now
        try:
            st = self.spool.stats()
        except RotorwatchError:
            return
        stats = self.context.stats
        stats.spool_records.set(st.depth)
        stats.spool_bytes.set(st.stored_bytes)
        for reason, n in st.dropped.items():
            stats.mirror(stats.spool_dropped_records, n, reason=reason)

    def on_agent_event(self, kind: str, message: str, time_s: float, detail: dict[str, Any]) -> None:
        self.publisher.publish_agent_event(kind, message, time_s, **detail)

    def on_events(self, events: list[AlarmEvent]) -> None:
        self.publisher.publish_events(events)

    # -- commands (paho's thread in, the analysis loop out) ---------------------------------------
    def _command_arrived(self, payload: bytes) -> None:
        if self.context.commands is not None:
            self.context.commands.submit(payload, reply=self._command_answered)

    def _command_answered(self, body: dict[str, Any], rejected: str | None) -> None:
        self.publisher.publish_command_result(body)
        if rejected is not None:
            self.publisher.publish_agent_event("command_rejected", rejected, time.time(),
                                               command=body.get("command"), id=body.get("id"))
