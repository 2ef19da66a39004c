"""Real-time pacing for inputs that could deliver faster than a device would (simulation, files).

A paced source hands out a chunk only once its last frame "would have been captured": the chunk that
ends at frame ``k`` is due at ``start + k / (fs_hz * rate)`` on ``time.monotonic()``. ``rate`` is 1 for
real time; a recording played with ``speedup`` uses ``rate = speedup``. A consumer that falls more than
``max_lag_s`` behind gets the due chunks at once up to that lag and the schedule is then re-based, so a
pause (a debugger, a suspended VM) never ends in a long burst.
"""

from __future__ import annotations

import time


class Pacer:
    def __init__(self, fs_hz: float, rate: float = 1.0, max_lag_s: float = 1.0) -> None:
        if not rate > 0:
            raise ValueError(f"rate = {rate!r}: must be positive")
        self.frames_per_s = fs_hz * rate
        self.max_lag_s = max_lag_s
        self._start = time.monotonic()
        self._frames = 0  # frames handed out since the (re)base

    def restart(self) -> None:
        self._start = time.monotonic()
        self._frames = 0

    def due_s(self, n_frames: int) -> float:
        """Monotonic time at which the next ``n_frames`` are complete."""
        return self._start + (self._frames + n_frames) / self.frames_per_s

    def wait(self, n_frames: int, timeout_s: float) -> bool:
        """Sleep until the next ``n_frames`` are due; False (after sleeping ``timeout_s``) if they are
        not due within the timeout."""
        now = time.monotonic()
        due = self.due_s(n_frames)
        if due - now > timeout_s:
            if timeout_s > 0:
                time.sleep(timeout_s)
            return False
        if due > now:
            time.sleep(due - now)
        elif now - due > self.max_lag_s:
            self._start = now - (self._frames + n_frames) / self.frames_per_s
        return True

    def advance(self, n_frames: int) -> None:
        self._frames += n_frames
