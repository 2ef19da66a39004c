"""Settings of the running service: MQTT, the metrics endpoint, the status page and local storage.

Secrets (broker passwords) are never written in the file itself: they are read from a file or an
environment variable named here, at connect time. Relative file paths (CA, client certificate, password
file, metrics TLS files) are taken relative to the configuration file's folder.

Validation does no I/O: files named here are opened when the daemon connects, and a missing one is
reported then as a one-line error.
"""

from __future__ import annotations

from typing import Literal

from pydantic import BaseModel, ConfigDict, Field, model_validator

from .storage import ForwardingSettings, SnapshotSettings, SpoolSettings, TrendSettings


class _Model(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class MqttSettings(_Model):
    """The MQTT broker the daemon publishes to.

    Topics live under ``<topic_prefix>/<site.agent_id>/`` (see deploy/mqtt-topics.md). ``qos`` is used
    for every publish and subscription. The connection runs in the background: a missing broker never
    blocks start-up; reconnect attempts back off from ``reconnect_min_s`` to ``reconnect_max_s``.
    ``delivery = "spool"`` (default) keeps states, metrics and events in the durable spool
    (``[storage.spool]``) until the broker acknowledges them; with ``"memory"`` up to
    ``max_queued_messages`` QoS 1 messages wait in paho's memory while the broker is away (0: no limit).
    """

    host: str = Field("127.0.0.1", min_length=1)
    port: int = Field(1883, ge=1, le=65535)
    topic_prefix: str = Field("rotorwatch", pattern=r"^[A-Za-z0-9_.-]+(/[A-Za-z0-9_.-]+)*$")
    client_id: str | None = Field(None, min_length=1, max_length=128, description="default: rotorwatch-<agent_id>")
    protocol: Literal["5", "3.1.1"] = "5"
    keepalive_s: int = Field(30, ge=5, le=3600)
    qos: Literal[0, 1] = 1
    metrics_interval_s: float = Field(10.0, gt=0, allow_inf_nan=False)
    reconnect_min_s: float = Field(1.0, gt=0, le=3600, allow_inf_nan=False)
    reconnect_max_s: float = Field(60.0, gt=0, le=3600, allow_inf_nan=False)
    max_queued_messages: int = Field(1000, ge=0, le=1_000_000)
    delivery: Literal["spool", "memory"] = Field(
        "spool", description="spool: states, metrics and events go through the durable publish spool in the "
                             "state folder (they survive outages and restarts, with seq numbers); "
                             "memory: only paho's in-memory queue")
    username: str | None = Field(None, min_length=1)
    password_file: str | None = Field(None, min_length=1)
    password_env: str | None = Field(None, pattern=r"^[A-Za-z_][A-Za-z0-9_]*$")
    tls: bool = False
    ca_file: str | None = Field(None, min_length=1, description="CA certificate(s) the broker's certificate must chain to")
    client_cert_file: str | None = Field(None, min_length=1)
    client_key_file: str | None = Field(None, min_length=1)
    discovery_prefix: str | None = Field(
        None, pattern=r"^[A-Za-z0-9_.-]+(/[A-Za-z0-9_.-]+)*$",
        description="publish retained discovery configs for automation hubs under this prefix "
                    "(the open convention's usual one is 'homeassistant'); absent: off")

    @model_validator(mode="after")
    def _consistent(self) -> MqttSettings:
        if self.password_file is not None and self.password_env is not None:
            raise ValueError("give at most one of password_file or password_env")
        if (self.password_file is not None or self.password_env is not None) and self.username is None:
            raise ValueError("a password (password_file or password_env) needs username")
        if (self.client_cert_file is None) != (self.client_key_file is None):
            raise ValueError("client_cert_file and client_key_file go together: give both or neither")
        if not self.tls:
            for name in ("ca_file", "client_cert_file", "client_key_file"):
                if getattr(self, name) is not None:
                    raise ValueError(f"{name} is set but tls = false: set tls = true to use it")
        if self.reconnect_min_s > self.reconnect_max_s:
            raise ValueError(
                f"reconnect_min_s ({self.reconnect_min_s:g}) must not exceed reconnect_max_s ({self.reconnect_max_s:g})"
            )
        return self


class MetricsSettings(_Model):
    """The Prometheus endpoint (``/metrics``). ``port = 0`` picks a free port (tests); the bound port is
    logged. With ``tls_cert_file`` and ``tls_key_file`` it serves HTTPS."""

    bind: str = Field("127.0.0.1", min_length=1)
    port: int = Field(9717, ge=0, le=65535)
    tls_cert_file: str | None = Field(None, min_length=1)
    tls_key_file: str | None = Field(None, min_length=1)

    @model_validator(mode="after")
    def _tls_pair(self) -> MetricsSettings:
        if (self.tls_cert_file is None) != (self.tls_key_file is None):
            raise ValueError("tls_cert_file and tls_key_file go together: give both or neither")
        return self


class StatusPageSettings(_Model):
    """The built-in read-only status page. ``token_file`` (a secret of at least 16 characters) turns on
    its acknowledge and snapshot buttons, which then need ``Authorization: Bearer <token>``."""

    bind: str = Field("127.0.0.1", min_length=1)
    port: int = Field(8717, ge=0, le=65535)
    token_file: str | None = Field(None, min_length=1)


class StorageSettings(_Model):
    """Local storage: where the agent keeps its state, and the knobs of each store in it
    (see rotorwatch.settings.storage for the spool, forwarding, trends and snapshot tables)."""

    state_dir: str = Field("var/rotorwatch", min_length=1, description="baselines, spool, trends and snapshots live here")
    spool: SpoolSettings = SpoolSettings()
    forwarding: ForwardingSettings = ForwardingSettings()
    trends: TrendSettings = TrendSettings()
    snapshots: SnapshotSettings = SnapshotSettings()
