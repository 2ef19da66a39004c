"""Is every machine updating? The rule behind ``/healthz`` (status page and metrics endpoint alike).

A machine is fresh while its latest update is younger than ``stale_after_updates`` update intervals
of wall time (the interval divided by ``acquisition.speedup``), and never stale sooner than
``min_stale_s``.
"""

from __future__ import annotations

from collections.abc import Mapping

from ..settings.models import Config

STALE_AFTER_UPDATES = 3.0
MIN_STALE_S = 15.0


def freshness(config: Config, received_s: float | None, now: float, stale_after_updates: float = STALE_AFTER_UPDATES,
              min_stale_s: float = MIN_STALE_S) -> tuple[float | None, bool]:
    """(age in seconds or None before the first update, whether it is stale)."""
    if received_s is None:
        return None, True
    age = max(0.0, now - received_s)
    acq = config.acquisition
    limit = max(min_stale_s, stale_after_updates * acq.update_interval_s / acq.speedup)
    return age, age > limit


def health(config: Config, received_s: Mapping[str, float | None], now: float,
           stale_after_updates: float = STALE_AFTER_UPDATES, min_stale_s: float = MIN_STALE_S) -> tuple[bool, str]:
    """(healthy, reason): healthy when every configured machine has published recently."""
    waiting, stale = [], []
    for m in config.machines:
        age, is_stale = freshness(config, received_s.get(m.id), now, stale_after_updates, min_stale_s)
        if age is None:
            waiting.append(m.id)
        elif is_stale:
            stale.append(f"{m.id} ({age:.0f} s)")
    if waiting:
        return False, "waiting for the first update of " + ", ".join(waiting)
    if stale:
        return False, "no recent update from " + ", ".join(stale)
    return True, "ok"
