"""Settings of the running service: MQTT, the metrics endpoint, the status page and local storage.

Secrets (broker passwords) are never written in the file itself: they are read from a file or an
environment variable named here, at connect time.
"""

from __future__ import annotations

from typing import Literal

from pydantic import BaseModel, ConfigDict, Field


class _Model(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class MqttSettings(_Model):
    host: str = "127.0.0.1"
    port: int = Field(1883, ge=1, le=65535)
    topic_prefix: str = Field("rotorwatch", pattern=r"^[A-Za-z0-9_./-]+$")
    client_id: str | None = None
    keepalive_s: int = Field(30, ge=5, le=3600)
    qos: Literal[0, 1] = 1
    metrics_interval_s: float = Field(10.0, gt=0)
    username: str | None = None
    password_file: str | None = None
    password_env: str | None = None
    tls: bool = False
    ca_file: str | None = None
    client_cert_file: str | None = None
    client_key_file: str | None = None


class MetricsSettings(_Model):
    bind: str = "127.0.0.1"
    port: int = Field(9717, ge=0, le=65535)
    tls_cert_file: str | None = None
    tls_key_file: str | None = None


class StatusPageSettings(_Model):
    bind: str = "127.0.0.1"
    port: int = Field(8717, ge=0, le=65535)


class StorageSettings(_Model):
    state_dir: str = Field("var/rotorwatch", description="baselines, spool, trends and snapshots live here")
