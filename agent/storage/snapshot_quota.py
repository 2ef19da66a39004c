"""How evidence snapshots share their disk quota, and how often one may be asked for.

Two classes of snapshot share ``quota_bytes``:

- **transition evidence** (``reason = "transition"``): what a value, point or machine looked like when
  it entered warning, alarm or sensor fault. It is what an investigation needs and what nobody can ask
  for again afterwards.
- **the others**: on-request (``command``) and daily (``schedule``) snapshots.

The rule (:func:`evictions`):

1. The others may hold at most ``quota - max(T, reserved)`` bytes, where ``T`` is what transition
   evidence holds and ``reserved = transition_share x quota``. So they never use the reserved share,
   nor the room transition evidence already took beyond it. When they hold more, the oldest of them
   go first (the one just saved last, only when it alone is larger than that room). An on-request or
   daily snapshot therefore never evicts transition evidence, however many are asked for.
2. Transition evidence may grow past its share into the whole quota (evicting the others, by rule 1).
   When it alone passes the quota, the oldest transition snapshots are deleted, each with a warning,
   until it fits; the one just saved is always kept.

On-request snapshots are also rate limited per machine (:class:`RequestLimiter`): a token bucket of
``on_request_burst`` snapshots that refills one every ``on_request_interval_s``, on the monotonic
clock (a wall-clock step neither opens nor closes it). A flood of requests thus writes at most
``burst`` snapshots at once and one per interval after that; the rest are refused with a count.
"""

from __future__ import annotations

import logging
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

log = logging.getLogger(__name__)


def evictions(infos: Sequence[Any], quota_bytes: int, reserved_bytes: int,
              keep: str | None = None) -> tuple[list[Any], list[Any]]:
    """(others to delete, transition snapshots to delete) so that ``infos`` keep the rule above.

    ``infos``: objects with ``id``, ``reason``, ``time_s``, ``size_bytes`` and optionally ``seq``
    (:class:`~rotorwatch.storage.snapshots.SnapshotInfo`).

    ``keep``: the id of the snapshot just saved. Transition evidence is kept even when it alone is
    larger than the quota; an on-request or daily snapshot only when it alone fits the others' room.
    """
    def oldest_first(i: Any) -> tuple[bool, int, float, str]:  # saving order: a clock step does not reorder
        return (i.id == keep, getattr(i, "seq", 0), i.time_s, i.id)

    trans = sorted((i for i in infos if i.reason == "transition"), key=oldest_first)
    others = sorted((i for i in infos if i.reason != "transition"), key=oldest_first)
    held_t = sum(i.size_bytes for i in trans)
    gone_t: list[Any] = []
    for info in trans:
        if held_t <= quota_bytes:
            break
        if info.id == keep:
            continue
        gone_t.append(info)
        held_t -= info.size_bytes
    room = quota_bytes - max(held_t, reserved_bytes)
    held_o = sum(i.size_bytes for i in others)
    gone_o: list[Any] = []
    for info in others:
        if held_o <= room:
            break
        gone_o.append(info)
        held_o -= info.size_bytes
    return gone_o, gone_t


@dataclass
class _Bucket:
    tokens: float
    at_s: float
    refused: int = 0


class RequestLimiter:
    """Per-machine token bucket for on-request snapshots (see the module docstring).

    ``allow(machine_id)`` -> (allowed, requests refused since the last allowed one).
    """

    def __init__(self, burst: int = 3, interval_s: float = 600.0, *,
                 clock: Callable[[], float] = time.monotonic) -> None:
        if burst < 1 or interval_s < 0:
            raise ValueError(f"on-request snapshots burst={burst}, interval_s={interval_s}: out of range")
        self.burst = int(burst)
        self.interval_s = float(interval_s)
        self._clock = clock
        self._buckets: dict[str, _Bucket] = {}

    def allow(self, machine_id: str) -> tuple[bool, int]:
        now = self._clock()
        b = self._buckets.setdefault(machine_id, _Bucket(float(self.burst), now))
        if self.interval_s == 0:
            b.tokens = float(self.burst)
        elif now > b.at_s:
            b.tokens = min(float(self.burst), b.tokens + (now - b.at_s) / self.interval_s)
        b.at_s = max(b.at_s, now)
        if b.tokens >= 1.0:
            b.tokens -= 1.0
            refused, b.refused = b.refused, 0
            return True, refused
        b.refused += 1
        return False, b.refused

    def wait_s(self, machine_id: str) -> float:
        """Seconds until the next on-request snapshot of ``machine_id`` would be allowed."""
        b = self._buckets.get(machine_id)
        if b is None or b.tokens >= 1.0:
            return 0.0
        return (1.0 - b.tokens) * self.interval_s
