"""The MQTT link: our connection to a broker, through paho-mqtt 2.x (callback API version 2).

The connection is made in the background (``connect_async`` + ``loop_start``), so a broker that is
away never blocks start-up; paho reconnects with back-off (``reconnect_delay_set``). A refused login
(``reason_code.is_failure`` on CONNACK) is logged once, clearly, and retried with the same back-off.
The last will marks the agent ``offline`` (retained) if the process dies or the link drops.

Publishing belongs to the :class:`~rotorwatch.publishers.mqtt.outbox.Outbox`: :meth:`MqttLink.publish`
and :meth:`MqttLink.publish_record` hand messages to it, it owns paho's ``on_publish`` and every
message id. The link owns the connection callbacks (it tells the outbox of each connect and
disconnect first), the subscriptions (commands, speed topics) and the clean stop.

Thread rules: ``publish`` may be called from any thread; the callbacks run on paho's network thread
and only count, log, route speed readings and queue commands (``on_command``), never block.
"""

from __future__ import annotations

import logging
import os
import ssl
import threading
from collections.abc import Callable
from pathlib import Path

import paho.mqtt.client as mqtt
from paho.mqtt.enums import CallbackAPIVersion
from paho.mqtt.packettypes import PacketTypes
from paho.mqtt.reasoncodes import ReasonCode

from ...errors import RotorwatchError
from ...logs import RepeatLimiter, fields
from ...selfstats import SelfStats
from ...settings.service import MqttSettings
from ...settings.storage import ForwardingSettings, SpoolSettings
from ...storage.spool import Spool
from .outbox import Outbox
from .payloads import availability_payload
from .topics import Topics

log = logging.getLogger(__name__)


def read_password(settings: MqttSettings, base_dir: Path) -> str | None:
    """The broker password from ``password_file`` (first line) or ``password_env``; never logged."""
    if settings.password_file is not None:
        p = Path(settings.password_file)
        p = p if p.is_absolute() else base_dir / p
        try:
            text = p.read_text(encoding="utf-8")
        except FileNotFoundError:
            raise RotorwatchError(f"mqtt.password_file = {str(p)!r}: no such file") from None
        except (OSError, UnicodeDecodeError) as e:
            raise RotorwatchError(f"mqtt.password_file = {str(p)!r}: cannot read: {getattr(e, 'strerror', None) or e}") from None
        lines = text.splitlines()
        if not lines or not lines[0]:
            raise RotorwatchError(f"mqtt.password_file = {str(p)!r}: the first line (the password) is empty")
        return lines[0]
    if settings.password_env is not None:
        value = os.environ.get(settings.password_env)
        if not value:
            raise RotorwatchError(f"mqtt.password_env = {settings.password_env!r}: the environment variable is not set or empty")
        return value
    return None


class _Client(mqtt.Client):
    """paho's client, keeping the error of the last failed (re)connect: paho's ``on_connect_fail``
    does not say why, and a TLS certificate the daemon refuses must not read as "not reachable"."""

    last_connect_error: BaseException | None = None

    def reconnect(self):  # called by paho's network thread for every attempt
        try:
            rc = super().reconnect()
        except OSError as e:
            self.last_connect_error = e
            raise
        self.last_connect_error = None
        return rc


class MqttLink:
    def __init__(self, settings: MqttSettings, agent_id: str, base_dir: Path, stats: SelfStats,
                 on_command: Callable[[bytes], None] | None = None,
                 on_message: Callable[[str, bytes], object] | None = None,
                 extra_topics: list[str] | None = None, spool: Spool | None = None,
                 forwarding: ForwardingSettings | None = None, spool_settings: SpoolSettings | None = None):
        self.settings = settings
        self.agent_id = agent_id
        self.base_dir = base_dir
        self.stats = stats
        self.topics = Topics(settings.topic_prefix, agent_id)
        self._on_command = on_command
        self._on_message = on_message
        self._extra_topics = list(extra_topics or [])
        self._lock = threading.Lock()
        self._limiter = RepeatLimiter(300.0)
        self._connected = threading.Event()
        self._ever_connected = False
        self._stopping = False
        self._client: mqtt.Client | None = None
        self.last_failure: str | None = None
        self.spool = spool  # a rotorwatch.storage.spool.Spool, owned by the caller, or None
        self._forwarding = forwarding or ForwardingSettings.model_validate({})
        # the one owner of publishing: messages wait in it (memory or the spool) until the client exists
        self.outbox = Outbox.from_settings(None, settings, self._forwarding, spool, spool_settings, stats=stats)

    # -- life cycle ------------------------------------------------------------------------------
    def _path(self, name: str | None) -> str | None:
        if name is None:
            return None
        p = Path(name)
        return str(p if p.is_absolute() else self.base_dir / p)

    def build_client(self) -> mqtt.Client:
        s = self.settings
        protocol = mqtt.MQTTv5 if s.protocol == "5" else mqtt.MQTTv311
        client_id = s.client_id or f"rotorwatch-{self.agent_id}"
        clean_session = None if protocol == mqtt.MQTTv5 else True  # MQTT 5 has clean_start instead
        c = _Client(CallbackAPIVersion.VERSION2, client_id=client_id, protocol=protocol, clean_session=clean_session)
        if s.tls:
            ca, cert, key = self._path(s.ca_file), self._path(s.client_cert_file), self._path(s.client_key_file)
            for label, path in (("ca_file", ca), ("client_cert_file", cert), ("client_key_file", key)):
                if path is not None and not Path(path).is_file():
                    raise RotorwatchError(f"mqtt.{label} = {path!r}: no such file")
            try:
                c.tls_set(ca_certs=ca, certfile=cert, keyfile=key, cert_reqs=ssl.CERT_REQUIRED)
            except (ssl.SSLError, OSError, ValueError) as e:
                raise RotorwatchError(f"mqtt: cannot set up TLS with ca_file={ca!r} client_cert_file={cert!r}: {e}") from None
        if s.username is not None:
            c.username_pw_set(s.username, read_password(s, self.base_dir))
        c.will_set(self.topics.availability, availability_payload(False), qos=1, retain=True)
        c.reconnect_delay_set(min_delay=s.reconnect_min_s, max_delay=s.reconnect_max_s)  # type: ignore[arg-type]
        self.outbox.attach(c)
        c.on_connect = self._handle_connect
        c.on_connect_fail = self._handle_connect_fail
        c.on_disconnect = self._handle_disconnect
        c.on_publish = self.outbox.on_publish  # the one owner of message ids
        c.on_message = self._handle_message
        return c

    def start(self) -> None:
        """Set up the client (file and TLS problems raise one-line errors) and connect in the background."""
        self._client = self.build_client()
        self.stats.mqtt_connected.set(0)  # exposed from the start, not only after a first connect
        s = self.settings
        if s.protocol == "5":
            self._client.connect_async(s.host, s.port, keepalive=s.keepalive_s, clean_start=True)
        else:
            self._client.connect_async(s.host, s.port, keepalive=s.keepalive_s)
        self._client.loop_start()
        self.outbox.start()
        log.info("mqtt connecting in the background", extra=fields(
            host=s.host, port=s.port, tls=s.tls, user=s.username or "-", root=self.topics.root))

    @property
    def connected(self) -> bool:
        return self._connected.is_set()

    def wait_connected(self, timeout_s: float) -> bool:
        return self._connected.wait(timeout_s)

    def set_extra_topics(self, topics: list[str]) -> None:
        """Change the speed topics subscribed (after a reload)."""
        c = self._client
        with self._lock:
            old, self._extra_topics = self._extra_topics, list(topics)
        if c is None or not self.connected:
            return
        gone = [t for t in old if t not in topics]
        new = [t for t in topics if t not in old]
        if gone:
            c.unsubscribe(gone)
        if new:
            c.subscribe([(t, int(self.settings.qos)) for t in new])

    def stop(self, flush_timeout_s: float = 3.0) -> None:
        """Publish retained ``offline``, wait (bounded) for outstanding messages, disconnect."""
        c, outbox = self._client, self.outbox
        if c is None:
            return
        self._stopping = True
        delivered = False
        if self.connected:
            outbox.wait_drained(flush_timeout_s)  # what stays in the spool waits there for the next start
            queued = self.publish(self.topics.availability, availability_payload(False), retain=True)
            delivered = outbox.wait_sent(flush_timeout_s) and queued
        outbox.stop()
        try:
            if not delivered and self.settings.protocol == "5":
                # "offline" did not make it: MQTT 5 reason 0x04 asks the broker to publish the will
                c.disconnect(reasoncode=ReasonCode(PacketTypes.DISCONNECT, "Disconnect with will message"))
            else:
                c.disconnect()
        finally:
            c.loop_stop()
            self._client = None
            self._connected.clear()
            self.stats.mqtt_connected.set(0)
        log.info("mqtt disconnected", extra=fields(host=self.settings.host, port=self.settings.port))

    # -- publishing (through the outbox) -----------------------------------------------------------
    def publish(self, topic: str, payload: bytes, retain: bool = False) -> bool:
        """Queue one message in memory (availability, info, discovery, command results)."""
        return self.outbox.publish(topic, payload, retain=retain)

    def publish_record(self, kind: str, topic: str, body: dict, retain: bool = False) -> bool:
        """A state, metrics record or event: into the durable spool when there is one."""
        return self.outbox.publish_record(kind, topic, body, retain=retain)

    def flush(self, timeout_s: float) -> bool:
        """Wait until every memory message was acknowledged (QoS 1) or handed over (QoS 0)."""
        return self.outbox.wait_sent(timeout_s)

    @property
    def pending(self) -> int:
        return self.outbox.pending

    # -- callbacks (paho network thread) ---------------------------------------------------------
    def _handle_connect(self, client, userdata, flags, reason_code, properties) -> None:
        if reason_code.is_failure:
            self.stats.mqtt_connect_failures.inc()
            self.last_failure = str(reason_code)
            ok, held = self._limiter.allow(f"refused:{reason_code}")
            if ok:
                hint = " (check mqtt.username and the password)" if "authori" in str(reason_code).lower() \
                    or "password" in str(reason_code).lower() else ""
                log.error(f"mqtt broker refused the connection: {reason_code}{hint}; retrying with back-off",
                          extra=fields(host=self.settings.host, port=self.settings.port,
                                       user=self.settings.username or "-", repeats=held or None))
            return
        self.outbox.on_connect(client, userdata, flags, reason_code, properties)
        self._limiter.reset("connect-fail")
        self._limiter.reset("tls-fail")
        first = not self._ever_connected
        if not first:
            self.stats.mqtt_reconnects.inc()
        self._ever_connected = True
        self.last_failure = None
        self._connected.set()
        self.stats.mqtt_connected.set(1)
        log.info("mqtt connected" if first else "mqtt reconnected",
                 extra=fields(host=self.settings.host, port=self.settings.port))
        with self._lock:
            extra = list(self._extra_topics)
        client.subscribe([(self.topics.command, self.settings.qos)] + [(t, self.settings.qos) for t in extra])
        if not self._stopping:
            # the outbox sends the other retained messages again after a reconnect, this one first
            self.outbox.publish(self.topics.availability, availability_payload(True), retain=True, urgent=True)

    def _handle_connect_fail(self, client, userdata) -> None:
        self.stats.mqtt_connect_failures.inc()
        error = getattr(client, "last_connect_error", None)
        if isinstance(error, ssl.SSLError):
            # CA pinning at work, or a certificate that does not name the host: say so, not "not reachable"
            ok, held = self._limiter.allow("tls-fail")
            if ok:
                if isinstance(error, ssl.SSLCertVerificationError):
                    why = f"certificate verify failed: {error.verify_message}"
                else:
                    why = getattr(error, "reason", None) or str(error)
                log.error(f"mqtt TLS handshake with the broker failed: {why} (check mqtt.ca_file: the broker's "
                          "certificate must chain to it and name mqtt.host); retrying with back-off",
                          extra=fields(host=self.settings.host, port=self.settings.port, repeats=held or None))
            return
        ok, held = self._limiter.allow("connect-fail")
        if ok:
            log.warning("mqtt broker not reachable; retrying with back-off",
                        extra=fields(host=self.settings.host, port=self.settings.port,
                                     error=str(error).splitlines()[0] if error else None, repeats=held or None))

    def _handle_disconnect(self, client, userdata, disconnect_flags, reason_code, properties) -> None:
        self.outbox.on_disconnect(client, userdata, disconnect_flags, reason_code, properties)
        was = self._connected.is_set()
        self._connected.clear()
        self.stats.mqtt_connected.set(0)
        if was and not self._stopping:
            log.warning("mqtt connection lost; reconnecting with back-off",
                        extra=fields(host=self.settings.host, reason=str(reason_code)))
        elif not was and not self._stopping and self.last_failure is None:
            # closed before the broker accepted us (no CONNACK): with TLS 1.3 a broker that requires a
            # client certificate ends the handshake this way; otherwise paho would retry in silence
            self.stats.mqtt_connect_failures.inc()
            ok, held = self._limiter.allow("closed-before-connack")
            if ok:
                hint = " (a client certificate required? check mqtt.client_cert_file / client_key_file)" \
                    if self.settings.tls else ""
                log.error(f"mqtt broker closed the connection before accepting it{hint}; retrying with back-off",
                          extra=fields(host=self.settings.host, port=self.settings.port, reason=str(reason_code),
                                       repeats=held or None))

    def _handle_message(self, client, userdata, msg) -> None:
        try:
            if msg.topic == self.topics.command:
                if msg.retain:  # a stale retained command must not be replayed at every start
                    log.warning("ignored a retained command", extra=fields(topic=msg.topic))
                    return
                if self._on_command is not None:
                    self._on_command(bytes(msg.payload))
            elif self._on_message is not None:
                self._on_message(msg.topic, bytes(msg.payload))
        except Exception:  # a callback must never kill paho's network thread
            log.exception("error handling an incoming mqtt message", extra=fields(topic=msg.topic))
