"""The MQTT publisher (deploy/mqtt-topics.md is the contract for topics and payloads).

- :mod:`.sink`: :class:`MqttSink`, the publisher, and :class:`UpdatePublisher`, when what is published;
- :mod:`.link`: :class:`MqttLink`, the connection (TLS, login, will, subscriptions, commands in);
- :mod:`.outbox`: :class:`Outbox`, the one owner of publishing and message ids (spool or memory);
- :mod:`.spool_lanes`: the spool's backlog and live lanes after an outage;
- :mod:`.payloads`, :mod:`.topics`, :mod:`.discovery`: what goes out, where, and the hub discovery configs.
"""

from .sink import MqttSink

__all__ = ["MqttSink"]
