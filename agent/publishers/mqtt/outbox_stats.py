"""The outbox's figures (:meth:`rotorwatch.publishers.mqtt.outbox.Outbox.stats`)."""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class OutboxStats:
    connected: bool
    in_flight: int  # spool records and memory messages handed to paho, not yet acknowledged
    queued: int  # memory messages waiting for the link
    published: int  # client.publish() calls (including those again after a reconnect)
    acked: int  # acknowledged: spool records deleted and memory messages done
    rejected: int  # PUBACKs with a failure reason code
    held_over: int  # messages in flight when the link dropped (handed again after the reconnect)
    retain_downgraded: int
    connects: int
    backlog_active: bool
    backlog_through_seq: int | None
    unsent: int = 0  # records waiting in memory (queued or in flight), not in the spool
    spilled: int = 0  # records written to the spool from memory
    spills: int = 0  # spool transactions that wrote them
