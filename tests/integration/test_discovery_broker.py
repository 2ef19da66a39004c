"""MQTT discovery configs on a real mosquitto: published retained, a late hub gets them, and the removal
messages clear them."""

from __future__ import annotations

from pathlib import Path

import pytest

from rotorwatch.publishers.mqtt import discovery
from rotorwatch.settings.loading import load_config


@pytest.fixture()
def config():
    return load_config(Path(__file__).resolve().parents[2] / "config" / "demo-fan.toml")


@pytest.mark.integration
def test_published_configs_are_retained_on_a_real_broker(config, mosquitto_broker, tmp_path):
    from components import MqttListener, wait_until
    from rotorwatch.publishers.mqtt.link import MqttLink
    from rotorwatch.selfstats import SelfStats
    from rotorwatch.settings.service import MqttSettings

    settings = MqttSettings(host=mosquitto_broker.host, port=mosquitto_broker.port, client_id="rw-discovery-test")
    link = MqttLink(settings, config.site.agent_id, tmp_path, SelfStats())
    link.start()
    try:
        assert link.wait_connected(10.0)
        prefix = f"hub-{tmp_path.name}"  # private prefix: the session broker is shared
        n = discovery.publish_discovery(link, config, "rotorwatch", prefix)
        assert n == 12 and link.flush(5.0)
        with MqttListener(mosquitto_broker, [f"{prefix}/#"], client_id="late-hub") as hub:
            assert wait_until(lambda: len(hub.messages) >= n, 10.0)
            assert all(m.retain for m in hub.messages)
            assert {m.topic for m in hub.messages} == {t for t, _ in discovery.discovery_messages(config, "rotorwatch", prefix)}
        for topic, payload in discovery.removal_messages(config, "rotorwatch", prefix):
            link.publish(topic, payload, retain=True)
        assert link.flush(5.0)
        with MqttListener(mosquitto_broker, [f"{prefix}/#"], client_id="later-hub") as hub:
            assert not wait_until(lambda: hub.messages, 1.0)  # nothing retained any more
    finally:
        link.stop()
