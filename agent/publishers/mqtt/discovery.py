"""MQTT discovery messages, so a building-automation hub lists rotorwatch's machines by itself.

Several open home- and building-automation hubs read retained *discovery* messages from the broker,
following one open convention: a JSON config per entity on

    <discovery_prefix>/<component>/<node_id>/<object_id>/config

whose fields name the state topic, a template picking the value out of its JSON payload, the unit, an
availability topic, and the device the entity belongs to. ``homeassistant`` is the convention's
default prefix. The messages here describe entities over the topics rotorwatch already publishes
(deploy/mqtt-topics.md); no extra payloads are sent. Off by default: the daemon publishes them only
when its configuration asks for it, and :func:`removal_messages` clears them again.

One device per machine, with entities:

- machine: state (enum), shaft speed (r/min);
- each point: state (enum), overall velocity (mm/s RMS), ISO 20816-3 zone, "needs attention" (on in
  warning or alarm) and "sensor fault" (problem sensors).

All readings are advisory (condition monitoring, not protection); the state payloads say so.
"""

from __future__ import annotations

import json
import re

from ... import __version__
from ...alarms.records import STATES
from ...settings.models import Config

DEFAULT_DISCOVERY_PREFIX = "homeassistant"
_SAFE = re.compile(r"[^A-Za-z0-9_-]")


def _safe(text: str) -> str:
    """An id usable as a topic level and unique_id part ([A-Za-z0-9_-])."""
    return _SAFE.sub("_", text)


def _root(topic_prefix: str, agent_id: str) -> str:
    return f"{topic_prefix}/{agent_id}"


def discovery_messages(config: Config, topic_prefix: str,
                       discovery_prefix: str = DEFAULT_DISCOVERY_PREFIX) -> list[tuple[str, bytes]]:
    """(topic, payload) of every discovery config, to publish retained (QoS 1)."""
    agent = config.site.agent_id
    root = _root(topic_prefix, agent)
    node = _safe(f"rotorwatch_{agent}")
    availability = {"availability_topic": f"{root}/availability", "payload_available": "online",
                    "payload_not_available": "offline"}
    out: list[tuple[str, bytes]] = []

    def add(component: str, object_id: str, body: dict) -> None:
        oid = _safe(object_id)
        body = {**body, **availability, "unique_id": f"{node}_{oid}", "object_id": f"{node}_{oid}"}
        out.append((f"{discovery_prefix}/{component}/{node}/{oid}/config",
                    json.dumps(body, separators=(",", ":"), ensure_ascii=False).encode("utf-8")))

    for m in config.machines:
        device = {
            "identifiers": [f"{node}_{_safe(m.id)}"],
            "name": m.name or m.id,
            "manufacturer": "rotorwatch",
            "model": f"rotorwatch agent ({m.kind})",
            "sw_version": __version__,
            "suggested_area": config.site.name or None,
        }
        device = {k: v for k, v in device.items() if v is not None}
        m_topic = f"{root}/machine/{m.id}/state"
        add("sensor", f"{m.id}_state", {
            "name": "state", "device": device, "state_topic": m_topic,
            "value_template": "{{ value_json.state }}", "json_attributes_topic": m_topic,
            "device_class": "enum", "options": list(STATES),
        })
        add("sensor", f"{m.id}_speed", {
            "name": "shaft speed", "device": device, "state_topic": m_topic,
            "value_template": "{{ value_json.rpm }}", "unit_of_measurement": "rpm",
            "state_class": "measurement",
        })
        for p in m.points:
            p_topic = f"{root}/machine/{m.id}/point/{p.id}/state"
            label = p.name or p.id
            base = f"{m.id}_{p.id}"
            add("sensor", f"{base}_state", {
                "name": f"{label} state", "device": device, "state_topic": p_topic,
                "value_template": "{{ value_json.state }}", "json_attributes_topic": p_topic,
                "device_class": "enum", "options": list(STATES),
            })
            add("sensor", f"{base}_overall", {
                "name": f"{label} overall velocity", "device": device, "state_topic": p_topic,
                "value_template": "{{ value_json.overall.velocity_mm_s }}", "unit_of_measurement": "mm/s",
                "state_class": "measurement", "suggested_display_precision": 2,
            })
            add("sensor", f"{base}_zone", {
                "name": f"{label} ISO zone", "device": device, "state_topic": p_topic,
                "value_template": "{{ value_json.overall.iso_zone }}",
            })
            add("binary_sensor", f"{base}_attention", {
                "name": f"{label} needs attention", "device": device, "state_topic": p_topic,
                "value_template": "{{ 'ON' if value_json.state in ['warning', 'alarm'] else 'OFF' }}",
                "device_class": "problem",
            })
            add("binary_sensor", f"{base}_sensor_fault", {
                "name": f"{label} sensor fault", "device": device, "state_topic": p_topic,
                "value_template": "{{ 'OFF' if value_json.sensor.ok else 'ON' }}",
                "device_class": "problem", "entity_category": "diagnostic",
            })
    return out


def removal_messages(config: Config, topic_prefix: str,
                     discovery_prefix: str = DEFAULT_DISCOVERY_PREFIX) -> list[tuple[str, bytes]]:
    """Empty retained payloads on the same topics: the hub forgets the entities."""
    return [(topic, b"") for topic, _ in discovery_messages(config, topic_prefix, discovery_prefix)]


def publish_discovery(link, config: Config, topic_prefix: str,
                      discovery_prefix: str = DEFAULT_DISCOVERY_PREFIX) -> int:
    """Publish every discovery config through ``link.publish(topic, payload, retain=True)``."""
    messages = discovery_messages(config, topic_prefix, discovery_prefix)
    for topic, payload in messages:
        link.publish(topic, payload, retain=True)
    return len(messages)
