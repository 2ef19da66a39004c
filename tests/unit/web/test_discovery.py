"""MQTT discovery configs: topic layout of the open discovery convention, unique ids, and templates that
point at fields the daemon's real state payloads have."""

from __future__ import annotations

import json
import re

import pytest

from rotorwatch.alarms.records import STATES
from rotorwatch.publishers.mqtt import discovery, payloads
from rotorwatch.publishers.mqtt.topics import Topics

from . import helpers

# <discovery_prefix>/<component>/<node_id>/<object_id>/config, ids of [a-zA-Z0-9_-] (the convention)
TOPIC = re.compile(r"^homeassistant/(sensor|binary_sensor)/([A-Za-z0-9_-]+)/([A-Za-z0-9_-]+)/config$")
FIELD = re.compile(r"value_json\.([a-z_]+(?:\.[a-z_]+)*)")


@pytest.fixture()
def config():
    return helpers.demo_config()


def messages(config):
    return [(t, json.loads(p)) for t, p in discovery.discovery_messages(config, "rotorwatch")]


def test_topics_follow_the_convention_and_ids_are_unique(config):
    msgs = messages(config)
    # per machine: state + speed; per point: state, overall, zone, attention, sensor fault
    assert len(msgs) == 2 + 5 * len(config.machines[0].points)
    for topic, body in msgs:
        m = TOPIC.match(topic)
        assert m, topic
        assert m.group(2) == "rotorwatch_halden-ef3"
        assert body["unique_id"].endswith(m.group(3))
    ids = [b["unique_id"] for _, b in msgs]
    assert len(set(ids)) == len(ids)


def test_entities_read_the_daemons_topics(config):
    topics = Topics("rotorwatch", config.site.agent_id)
    for _, body in messages(config):
        assert body["availability_topic"] == topics.availability
        assert body["payload_available"] == "online" and body["payload_not_available"] == "offline"
        assert body["state_topic"] in {topics.machine_state("ef3"), topics.point_state("ef3", "de-h"),
                                       topics.point_state("ef3", "nde-h")}
        assert body["device"]["identifiers"] == ["rotorwatch_halden-ef3_ef3"]
        if body.get("device_class") == "enum":
            assert body["options"] == list(STATES)


def _walk(payload: dict, path: str):
    node = payload
    for key in path.split("."):
        assert isinstance(node, dict) and key in node, f"payload has no {path!r}"
        node = node[key]
    return node


def test_templates_name_fields_the_real_payloads_have(config):
    update, _ = helpers.machine_update(config, 1_767_225_600.0, fault=0.8)
    machine = config.machines[0]
    bodies = {Topics("rotorwatch", config.site.agent_id).machine_state("ef3"):
              payloads.machine_state_payload(update, config.site.agent_id, machine)}
    for pid, pu in update.points.items():
        bodies[Topics("rotorwatch", config.site.agent_id).point_state("ef3", pid)] = \
            json.loads(payloads.encode(payloads.point_state_payload(update, pu, config.site.agent_id, machine)))
    seen = {}
    for _, body in messages(config):
        fields = FIELD.findall(body["value_template"])
        assert fields, body["value_template"]
        for path in fields:
            seen[(body["name"], path)] = _walk(bodies[body["state_topic"]], path)
    de = "fan drive-end bearing, horizontal"
    assert seen[(f"{de} state", "state")] == "alarm"
    assert seen[(f"{de} overall velocity", "overall.velocity_mm_s")] == pytest.approx(
        update.points["de-h"].result.overall_velocity_mm_s, rel=1e-5)
    assert seen[(f"{de} ISO zone", "overall.iso_zone")] == update.points["de-h"].result.iso_zone
    assert seen[(f"{de} sensor fault", "sensor.ok")] is True
    assert seen[("shaft speed", "rpm")] == 1482.0


def test_removal_clears_the_same_topics(config):
    shown = [t for t, _ in discovery.discovery_messages(config, "rotorwatch", "hub")]
    gone = discovery.removal_messages(config, "rotorwatch", "hub")
    assert [t for t, _ in gone] == shown and all(p == b"" for _, p in gone)
    assert all(t.startswith("hub/") for t in shown)
