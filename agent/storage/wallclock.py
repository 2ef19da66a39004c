"""Is the wall clock synchronised? (Linux ``adjtimex``: the kernel's own "clock unsynchronised" state.)

A box without a real-time clock boots at a wrong date and steps when NTP (systemd-timesyncd, chrony)
syncs. Until then its wall-clock times are not to be trusted. :func:`synchronized` asks the kernel:
``adjtimex`` with no change returns ``TIME_ERROR`` (5) while the clock is unsynchronised (the
``STA_UNSYNC`` status bit that NTP daemons clear once they discipline the clock). It answers None where
the call is not available (not Linux, or a sandbox that refuses it). Stored records carry the answer
(snapshot sidecars: ``clock_synchronized``) so a reader can tell times taken before the sync.
"""

from __future__ import annotations

import ctypes
import ctypes.util
import time

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
