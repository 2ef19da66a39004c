"""A preallocated ring buffer of one channel's samples, written by capture and read by analysis.

The capture thread calls :meth:`Ring.write` with every chunk (a copy into the preallocated array, at
most two slices, no allocation); the analysis thread calls :meth:`Ring.latest` for the last ``n``
samples (a copy, so analysis never holds the lock while it works). The lock is held only for those
copies, so a slow analysis never blocks capture: if analysis falls behind, old samples are simply
overwritten and the next window is the newest one.

A gap in the input (the source reports lost frames) makes the ring forget what it holds
(:meth:`reset`): a window must never splice samples from both sides of a gap.
"""

from __future__ import annotations

import threading

import numpy as np


class Ring:
    def __init__(self, capacity: int, dtype: type = np.float32):
        if capacity < 1:
            raise ValueError(f"ring capacity must be at least 1 sample, got {capacity}")
        self.capacity = int(capacity)
        self._buf: np.ndarray = np.zeros(self.capacity, dtype=dtype)
        self._head = 0  # index of the next sample to write
        self._filled = 0  # valid samples since the last reset (<= capacity)
        self.total = 0  # samples ever written
        self.end_time_s: float | None = None  # source time just after the newest sample
        self._lock = threading.Lock()

    def write(self, samples: np.ndarray, end_time_s: float | None = None) -> None:
        """Append ``samples`` (1-D). Only the last ``capacity`` of an oversized write are kept."""
        x = np.asarray(samples).reshape(-1)
        n = x.shape[0]
        with self._lock:
            self.total += n
            if end_time_s is not None:
                self.end_time_s = end_time_s
            if n == 0:
                return
            if n >= self.capacity:
                self._buf[:] = x[n - self.capacity:]
                self._head = 0
                self._filled = self.capacity
                return
            first = min(n, self.capacity - self._head)
            self._buf[self._head:self._head + first] = x[:first]
            rest = n - first
            if rest:
                self._buf[:rest] = x[first:]
            self._head = (self._head + n) % self.capacity
            self._filled = min(self.capacity, self._filled + n)

    def latest(self, n: int) -> np.ndarray | None:
        """A copy of the newest ``n`` samples in time order, or None while fewer are held."""
        return self.latest_with_time(n)[0]

    def latest_with_time(self, n: int) -> tuple[np.ndarray | None, float | None]:
        """The newest ``n`` samples and the source time just after the last of them, read together."""
        if n < 1 or n > self.capacity:
            raise ValueError(f"window of {n} samples does not fit a ring of {self.capacity}")
        with self._lock:
            end = self.end_time_s
            if self._filled < n:
                return None, end
            start = (self._head - n) % self.capacity
            if start + n <= self.capacity:
                return self._buf[start:start + n].copy(), end
            return np.concatenate((self._buf[start:], self._buf[:self._head])), end

    @property
    def filled(self) -> int:
        with self._lock:
            return self._filled

    def reset(self) -> None:
        """Forget the held samples (after a gap); capacity and the total count stay."""
        with self._lock:
            self._filled = 0
            self._head = 0
