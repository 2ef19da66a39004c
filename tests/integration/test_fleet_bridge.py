"""deploy/fleet: two boxes' local brokers bridged to one site broker, all real mosquitto on loopback.

Each box runs ``deploy/fleet/mosquitto-edge-bridge.conf`` (the template, values filled in as
configuration management would) and a real rotorwatch MQTT link + publisher that publishes to it. On
the site broker: two consumers in one MQTT 5 shared subscription group (``$share/fleet/...``) must get
every state message of both agents exactly once between them; a command published upstream must reach
its box only; and events published while the site broker is down must arrive after it returns (the
bridge's persistent QoS 1 session queues them).
"""

from __future__ import annotations

import importlib.util
import json
import os
import threading
from pathlib import Path

import paho.mqtt.client as mqtt
import pytest
from paho.mqtt.packettypes import PacketTypes
from paho.mqtt.properties import Properties

from components import MosquittoBroker, MqttListener, make_mosquitto_broker, wait_until
from rotorwatch.publishers.mqtt.link import MqttLink
from rotorwatch.publishers.mqtt.sink import UpdatePublisher
from rotorwatch.selfstats import SelfStats
from rotorwatch.settings.service import MqttSettings

pytestmark = pytest.mark.integration

REPO = Path(__file__).resolve().parents[2]
TEMPLATE = REPO / "deploy" / "fleet" / "mosquitto-edge-bridge.conf"
PREFIX = "rotorwatch"


def _load_helpers():
    """The status-page tests' hand-built records of the demo fan (tests/unit/web/helpers.py)."""
    spec = importlib.util.spec_from_file_location("rw_demo_records", REPO / "tests" / "unit" / "web" / "helpers.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


helpers = _load_helpers()


def render_bridge(values: dict) -> str:
    text = TEMPLATE.read_text()
    for key, value in values.items():
        text = text.replace("{{ " + key + " }}", str(value))
    unfilled = [ln for ln in text.splitlines() if "{{" in ln and not ln.lstrip().startswith("#")]
    assert not unfilled, f"template values left unfilled: {unfilled}"
    if os.geteuid() == 0:
        text = "user root\n" + text  # as root mosquitto would drop to user 'mosquitto' (shared recipes)
    return text


def edge_broker(root: Path, agent_id: str, upstream: MosquittoBroker) -> MosquittoBroker:
    broker = MosquittoBroker(workdir=root / agent_id)
    data = broker.workdir / "bridge-data"
    data.mkdir(exist_ok=True)
    broker.config_path.write_text(render_bridge({
        "local_port": broker.port, "state_dir": data, "agent_id": agent_id, "prefix": PREFIX,
        "upstream_host": upstream.host, "upstream_port": upstream.port,
    }))
    return broker.start()


class Agent:
    """The daemon's real MQTT side (MqttLink + UpdatePublisher) for one box."""

    def __init__(self, config, broker: MosquittoBroker, workdir: Path) -> None:
        self.config = config
        self.commands: list[bytes] = []
        settings = MqttSettings(host=broker.host, port=broker.port, topic_prefix=PREFIX, reconnect_min_s=0.2,
                                reconnect_max_s=1.0)
        self.link = MqttLink(settings, config.site.agent_id, workdir, SelfStats(), on_command=self.commands.append)
        self.link.start()
        assert self.link.wait_connected(10.0), f"agent {config.site.agent_id} did not connect to its box broker"
        self.publisher = UpdatePublisher(self.link, config)
        self.publisher.publish_info()

    def stop(self) -> None:
        self.link.stop()


def with_agent_id(config, agent_id: str):
    return config.model_copy(update={"site": config.site.model_copy(update={"agent_id": agent_id})})


class DurableConsumer:
    """An MQTT 5 client with a persistent session (clean_start False, session expiry 1 h)."""

    def __init__(self, broker: MosquittoBroker, client_id: str, topic: str) -> None:
        self.broker, self.topic = broker, topic
        self.messages: list = []
        self.lock = threading.Lock()
        self.subscribed = threading.Event()
        self.client = mqtt.Client(mqtt.CallbackAPIVersion.VERSION2, client_id=client_id, protocol=mqtt.MQTTv5)
        self.client.on_connect = lambda c, u, f, rc, p: c.subscribe(topic, qos=1)
        self.client.on_subscribe = lambda *a: self.subscribed.set()
        self.client.on_message = self._on_message

    def _on_message(self, client, userdata, msg) -> None:
        with self.lock:
            self.messages.append(msg)

    def connect(self) -> DurableConsumer:
        props = Properties(PacketTypes.CONNECT)
        props.SessionExpiryInterval = 3600
        self.subscribed.clear()
        self.client.connect(self.broker.host, self.broker.port, keepalive=10, clean_start=False, properties=props)
        self.client.loop_start()
        assert self.subscribed.wait(10.0)
        return self

    def close(self) -> None:
        self.client.disconnect()
        self.client.loop_stop()


def payloads_on(listener, suffix: str) -> list[dict]:
    return [json.loads(m.payload) for m in list(listener.messages) if m.topic.endswith(suffix) and m.payload]


def test_two_boxes_bridged_to_a_site_broker(tmp_path):
    site = make_mosquitto_broker(tmp_path / "site")
    edges, agents, listeners = [], [], []
    try:
        # consumers first: a shared-subscription group of two, and a plain watcher of the bridges
        group = [MqttListener(site, [f"$share/fleet/{PREFIX}/+/machine/#"], client_id=f"worker-{i}").connect()
                 for i in range(2)]
        watch = MqttListener(site, [f"{PREFIX}/+/uplink", f"{PREFIX}/+/info"], client_id="watcher").connect()
        listeners += [*group, watch]
        archive = DurableConsumer(site, "archiver", f"{PREFIX}/+/events").connect()

        base = helpers.demo_config()
        for agent_id in ("halden-ef3", "halden-p12"):
            edge = edge_broker(tmp_path / "edges", agent_id, site)
            edges.append(edge)
            # the bridge announces itself upstream (notifications): wait for it before publishing
            up = wait_until(lambda agent_id=agent_id: any(m.topic == f"{PREFIX}/{agent_id}/uplink" and m.payload == b"1"
                                        for m in list(watch.messages)), 15.0, 0.05)
            assert up, f"bridge of {agent_id} did not connect; log:\n{edge.log_path.read_text()[-2000:]}"
            agents.append(Agent(with_agent_id(base, agent_id), edge, tmp_path))

        for i, agent in enumerate(agents):
            update, _ = helpers.machine_update(agent.config, 1000.0 + i, fault=0.8 if i == 0 else 0.0)
            agent.publisher.publish_update(update, metrics=False)
            assert agent.link.flush(5.0)

        # every machine and point state of both agents, exactly once across the group
        want = {f"{PREFIX}/{a}/machine/ef3/{tail}" for a in ("halden-ef3", "halden-p12")
                for tail in ("state", "point/de-h/state", "point/nde-h/state")}
        got = lambda: [m.topic for w in group for m in list(w.messages)]  # noqa: E731
        assert wait_until(lambda: set(got()) >= want, 15.0, 0.05), f"missing: {want - set(got())}"
        assert sorted(got()) == sorted(want), "a shared subscription delivered a message twice"
        states = {json.loads(m.payload)["agent"]: json.loads(m.payload)["state"]
                  for w in group for m in w.messages if m.topic.endswith("/machine/ef3/state")}
        assert states == {"halden-ef3": "alarm", "halden-p12": "normal"}
        assert wait_until(lambda: {p.get("agent") for p in payloads_on(watch, "/info")} >= {"halden-ef3", "halden-p12"}, 10.0)

        # retained states cross the bridge retained: a late (plain) subscriber sees them at once
        with MqttListener(site, [f"{PREFIX}/halden-ef3/machine/ef3/state"], client_id="late") as late:
            msg = late.wait_for(f"{PREFIX}/halden-ef3/machine/ef3/state", 10.0)
            assert msg is not None and msg.retain and json.loads(msg.payload)["state"] == "alarm"

        # a command published on the site broker reaches its own box, and only that one
        operator = mqtt.Client(mqtt.CallbackAPIVersion.VERSION2, client_id="operator", protocol=mqtt.MQTTv5)
        operator.connect(site.host, site.port, keepalive=10)
        operator.loop_start()
        try:
            operator.publish(f"{PREFIX}/halden-p12/command", b'{"command": "ping", "id": "c-1"}', qos=1).wait_for_publish(5)
        finally:
            operator.disconnect()
            operator.loop_stop()
        assert wait_until(lambda: agents[1].commands, 10.0), "command did not come down the bridge"
        assert agents[1].commands == [b'{"command": "ping", "id": "c-1"}'] and agents[0].commands == []

        # site broker outage: events published meanwhile wait in the bridge and arrive afterwards
        archive.close()
        site.stop()
        outage_events = [helpers.event(2000.0 + k, "warning", "alarm") for k in range(3)]
        agents[0].publisher.publish_events(outage_events)
        assert agents[0].link.flush(5.0)  # accepted by the box's own broker
        site.start()
        archive.connect()
        arrived = wait_until(lambda: len([m for m in list(archive.messages) if m.topic == f"{PREFIX}/halden-ef3/events"]) >= 3,
                             30.0, 0.1)
        assert arrived, f"queued events lost; box log:\n{edges[0].log_path.read_text()[-2000:]}"
        times = [json.loads(m.payload)["time_s"] for m in archive.messages if m.topic == f"{PREFIX}/halden-ef3/events"]
        assert times == [2000.0, 2001.0, 2002.0]
        archive.close()
    finally:
        for agent in agents:
            agent.stop()
        for listener in listeners:
            try:
                listener.close()
            except Exception:
                pass
        for edge in edges:
            edge.stop()
        site.stop()
