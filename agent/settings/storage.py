"""Settings of local storage: the publish spool and how it drains, the trend store, snapshots.

These models are meant to sit under ``[storage]`` in the configuration file, next to ``state_dir``::

    [storage]
    state_dir = "/var/lib/rotorwatch"
    [storage.spool]          # bounds of the store-and-forward spool
    # max_bytes = 67108864
    # max_records = 200000
    # durability = "power_loss"
    # write = "unsent"
    # memory_hold_s = 2.0
    [storage.forwarding]     # how the spool drains into MQTT
    # in_flight_window = 20
    # backlog_rate_per_s = 200.0
    [storage.trends]
    # retention_days = 90.0
    # max_rows = 4000000
    # min_interval_s = 60.0
    # flush_interval_s = 300.0
    [storage.snapshots]
    # quota_bytes = 536870912
    # on_transition_to = ["warning", "alarm"]
    # daily_at_utc = "03:00"
    # transition_share = 0.5
    # on_request_burst = 3
    # on_request_interval_s = 600.0

Models are strict (unknown keys are errors) and frozen; validation does no I/O.
"""

from __future__ import annotations

from typing import Literal

from pydantic import BaseModel, ConfigDict, Field, model_validator

MIB = 1024 * 1024


class _Model(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class SpoolSettings(_Model):
    """Bounds and durability of the publish spool (``spool.sqlite`` in the state directory).

    ``max_bytes`` bounds the stored topics and payloads (the file itself is larger by sqlite's page
    overhead, typically 10-30 %); ``max_records`` bounds the row count. When either is reached the
    full policy of :class:`rotorwatch.storage.spool.Spool` makes room, counting what it drops.

    ``durability``: ``power_loss`` (sqlite ``synchronous=FULL``: every committed record survives a power
    cut) or ``process_crash`` (``synchronous=NORMAL``: records survive a crash or kill of the agent,
    but the last records before a power cut may be lost; fewer flash writes).

    ``write``: ``unsent`` (default) keeps records in memory while the broker is connected and
    acknowledging, and writes to the spool only what is unacknowledged when the link drops, after
    ``memory_hold_s``, or at a stop (a batch per transaction): a power cut or ``kill -9`` may lose up to
    ``memory_hold_s`` of records plus the in-flight window. ``every_record`` writes each record before
    it is sent (nothing appended is lost, about 5 GB a day of writes for four points; see
    deploy/data-guarantees.md, "Disk wear").
    """

    max_bytes: int = Field(64 * MIB, ge=64 * 1024)
    max_records: int = Field(200_000, ge=100)
    durability: Literal["power_loss", "process_crash"] = "power_loss"
    write: Literal["unsent", "every_record"] = "unsent"
    memory_hold_s: float = Field(2.0, ge=0.1, le=60.0, allow_inf_nan=False)


class ForwardingSettings(_Model):
    """How the spool drains into the broker (see :mod:`rotorwatch.publishers.mqtt.spool_lanes`).

    ``in_flight_window``: records published and not yet acknowledged, at most. ``backlog_rate_per_s``
    bounds the replay of what piled up during an outage; live records are not rate-bounded.
    ``live_reserve`` window slots are kept free for live records while a backlog drains.
    """

    in_flight_window: int = Field(20, ge=1, le=1000)
    backlog_rate_per_s: float = Field(200.0, gt=0, allow_inf_nan=False)
    live_reserve: int = Field(4, ge=0)

    @model_validator(mode="after")
    def _reserve_below_window(self) -> ForwardingSettings:
        if self.live_reserve >= self.in_flight_window:
            raise ValueError(
                f"live_reserve ({self.live_reserve}) must be below in_flight_window ({self.in_flight_window}) "
                "so the backlog can drain"
            )
        return self


class TrendSettings(_Model):
    """The trend store (``trends.sqlite``): per-update values kept by age and by row count.

    ``min_interval_s`` stores at most one row per series (machine, point, value) in that interval
    (0: every update; MQTT carries the full rate). Pruning by age runs every ``prune_interval_s``; the
    row bound holds at once. Rows wait in memory and are committed together every ``flush_interval_s``
    (0: at every update): fewer, larger writes spare flash; a kill or power cut loses at most that
    much of the trend (it was also published). Sizing: rows per day = series x 86400 / min_interval_s, about 57 bytes
    per row on disk (measured); the defaults keep 90 days of 30 series in 4 million rows (~230 MB).
    """

    retention_days: float = Field(90.0, gt=0, allow_inf_nan=False)
    max_rows: int = Field(4_000_000, ge=1000)
    min_interval_s: float = Field(60.0, ge=0, allow_inf_nan=False)
    prune_interval_s: float = Field(3600.0, gt=0, allow_inf_nan=False)
    flush_interval_s: float = Field(300.0, ge=0, le=3600, allow_inf_nan=False)


class SnapshotSettings(_Model):
    """Evidence snapshots (``snapshots/``): when they are taken and how much disk they may use.

    A snapshot is taken when a value, point or machine enters one of ``on_transition_to``, once a day at
    ``daily_at_utc`` (``HH:MM``, UTC; absent: never) and on request. Every transition is kept except a
    repeat: the same value (or point, or machine) entering the same state again within
    ``min_interval_s`` of its last snapshot (a flapping value). Times are the data's (sped-up simulated
    or replayed input counts in its own time; see :mod:`rotorwatch.storage.snapshot_policy`).

    ``quota_bytes`` bounds the folder. ``transition_share`` of it is reserved for transition evidence:
    on-request and daily snapshots never use that share and never evict transition evidence (only newer
    transition evidence does, oldest first, with a warning). On-request snapshots are limited per
    machine to ``on_request_burst`` at once, then one per ``on_request_interval_s`` (monotonic clock);
    requests over the limit are refused with a reply. See :mod:`rotorwatch.storage.snapshot_quota`.
    """

    quota_bytes: int = Field(512 * MIB, ge=MIB)
    on_transition_to: tuple[Literal["warning", "alarm", "sensor_fault"], ...] = ("warning", "alarm")
    min_interval_s: float = Field(600.0, ge=0, allow_inf_nan=False)
    daily_at_utc: str | None = Field("03:00", pattern=r"^([01][0-9]|2[0-3]):[0-5][0-9]$")
    transition_share: float = Field(0.5, ge=0.1, le=0.9, allow_inf_nan=False)
    on_request_burst: int = Field(3, ge=1, le=100)
    on_request_interval_s: float = Field(600.0, ge=0, allow_inf_nan=False)
    # every update's evidence (reason "schedule", detail "every update"): a short diagnostic run, or a
    # record to replay later with `rotorwatch replay --history <state_dir>`; mind the quota
    every_update: bool = False
