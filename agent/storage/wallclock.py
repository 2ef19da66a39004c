"""Is the wall clock synchronised? (Linux ``adjtimex``: the kernel's own "clock unsynchronised" state.)

A box without a real-time clock boots at a wrong date and steps when NTP (systemd-timesyncd, chrony)
syncs. Until then its wall-clock times are not to be trusted. :func:`synchronized` asks the kernel:
``adjtimex`` with no change returns ``TIME_ERROR`` (5) while the clock is unsynchronised (the
``STA_UNSYNC`` status bit that NTP daemons clear once they discipline the clock). It answers None where
the call is not available (not Linux, or a sandbox that refuses it). Stored records carry the answer
(snapshot sidecars: ``clock_synchronized``) so a reader can tell times taken before the sync, and
:class:`ClockWatch` gives published records their ``clock`` flag (unsynchronised, or just stepped).
"""

from __future__ import annotations

import ctypes
import ctypes.util
import logging
import time
from collections.abc import Callable

log = logging.getLogger(__name__)

TIME_ERROR = 5
_TIMEX_BYTES = 512  # struct timex is 208 bytes on x86-64 and aarch64; room to spare
_CACHE_S = 60.0
_cache: tuple[float, bool | None] | None = None


def _query() -> bool | None:
    try:
        libc = ctypes.CDLL(ctypes.util.find_library("c") or "libc.so.6", use_errno=True)
        buf = ctypes.create_string_buffer(_TIMEX_BYTES)  # modes = 0: read only
        state = libc.adjtimex(buf)
    except (OSError, AttributeError):
        return None
    if state < 0:
        return None
    return state != TIME_ERROR


def synchronized(monotonic: float | None = None) -> bool | None:
    """True when the kernel says the wall clock is synchronised, False when it says it is not, None
    when it cannot tell. Asked at most once a minute."""
    global _cache
    now = time.monotonic() if monotonic is None else monotonic
    if _cache is None or now - _cache[0] >= _CACHE_S or now < _cache[0]:
        _cache = (now, _query())
    return _cache[1]


#: A wall clock that moves this much more or less than the monotonic clock between two looks has stepped.
STEP_TOLERANCE_S = 2.0
#: Records are flagged ``stepped`` this long (monotonic) after a step.
STEP_FLAG_S = 600.0


class ClockWatch:
    """What a published record says about its ``ts``: ``"stepped"`` for ``STEP_FLAG_S`` after the wall
    clock was seen to step (between two looks it moved more than ``STEP_TOLERANCE_S`` apart from the
    monotonic clock: an NTP sync on a box without a real-time clock, a manual ``date -s``),
    ``"unsynchronized"`` while the kernel says the clock is not synchronised (:func:`synchronized`),
    else None (nothing to say). Each step is logged once as a warning."""

    def __init__(self, monotonic: Callable[[], float] = time.monotonic,
                 sync: Callable[[float], bool | None] | None = None) -> None:
        self._monotonic = monotonic
        self._sync = sync or synchronized
        self._last: tuple[float, float] | None = None  # (wall, monotonic) at the last look
        self._stepped_until = float("-inf")
        self.steps = 0

    def __call__(self, wall_s: float) -> str | None:
        mono = self._monotonic()
        if self._last is not None:
            step = (wall_s - self._last[0]) - (mono - self._last[1])
            if abs(step) > STEP_TOLERANCE_S:
                self.steps += 1
                self._stepped_until = mono + STEP_FLAG_S
                log.warning("wall clock stepped by %+.1f s (the monotonic clock did not): published records "
                            "carry \"clock\": \"stepped\" for %.0f s; seq keeps their order", step, STEP_FLAG_S)
        self._last = (wall_s, mono)
        if mono < self._stepped_until:
            return "stepped"
        return "unsynchronized" if self._sync(mono) is False else None
