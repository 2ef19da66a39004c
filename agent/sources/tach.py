"""Running speed from a once-per-revolution pulse channel (a tach probe, an optical key-phasor).

Edges are rising threshold crossings with hysteresis (a Schmitt trigger): the detector arms when the
signal falls to ``threshold_v - hysteresis_v`` and fires when it next reaches ``threshold_v``, so noise
on a slow edge gives one edge, not a burst. The crossing is placed between the two samples that
straddle the threshold by linear interpolation, which keeps the speed exact well below one sample of
jitter per revolution.

Speed over the edges of the last ``window_s`` seconds::

    rpm = 60 * fs_hz / (mean_interval_samples * pulses_per_rev)

The mean is robust to a missing pulse (an interval close to k times the median counts as k intervals)
and to a spurious edge (intervals that are no whole multiple of the median, within 25 %, are left out).
``rpm()`` is None with fewer than two edges, or when the last edge is older than ``timeout_s`` (or
2.5 intervals): the machine stopped, or the probe is unplugged.

Feed it the tach channel of consecutive chunks; call :meth:`reset` on a chunk with ``gap=True``.
"""

from __future__ import annotations

from collections import deque

import numpy as np


class Tachometer:
    def __init__(self, fs_hz: float, threshold_v: float, pulses_per_rev: int = 1, *,
                 hysteresis_v: float | None = None, window_s: float = 2.0, timeout_s: float | None = None) -> None:
        if pulses_per_rev < 1:
            raise ValueError(f"pulses_per_rev = {pulses_per_rev}: must be at least 1")
        self.fs_hz = float(fs_hz)
        self.threshold_v = float(threshold_v)
        self.hysteresis_v = float(hysteresis_v) if hysteresis_v is not None else max(0.1 * abs(threshold_v), 0.02)
        if self.hysteresis_v <= 0:
            raise ValueError(f"hysteresis_v = {hysteresis_v}: must be positive")
        self.pulses_per_rev = int(pulses_per_rev)
        self.window_s = float(window_s)
        self.timeout_s = float(timeout_s) if timeout_s is not None else float(window_s)
        self.reset()

    def reset(self) -> None:
        """Forget edges and trigger state (after a gap in the stream)."""
        self._n_seen = 0                    # samples fed so far
        self._state = 0                     # +1 fired (above), -1 armed (below), 0 unknown
        self._last_sample: float | None = None
        self._edges: deque[float] = deque()  # edge positions in samples since reset

    def feed(self, samples: np.ndarray) -> int:
        """Process the next samples of the pulse channel (1-D, volts); returns the new edge count."""
        x = np.asarray(samples, dtype=np.float64).ravel()
        n = x.size
        if n == 0:
            return 0
        level = np.zeros(n, dtype=np.int8)
        level[x >= self.threshold_v] = 1
        level[x <= self.threshold_v - self.hysteresis_v] = -1
        # Schmitt trigger: carry the last decided level forward through the undecided samples.
        decided = np.where(level != 0, np.arange(n), -1)
        np.maximum.accumulate(decided, out=decided)
        state = np.where(decided >= 0, level[np.maximum(decided, 0)], self._state).astype(np.int8)
        previous = np.concatenate(([self._state], state[:-1]))
        rising = np.flatnonzero((previous == -1) & (state == 1))
        before = np.concatenate(([self._last_sample if self._last_sample is not None else x[0]], x[:-1]))
        for i in rising:
            lo, hi = before[i], x[i]
            frac = (self.threshold_v - lo) / (hi - lo) if hi > lo else 1.0
            self._edges.append(self._n_seen + i - 1 + min(max(frac, 0.0), 1.0))
        self._state = int(state[-1])
        self._last_sample = float(x[-1])
        self._n_seen += n
        horizon = self._n_seen - self.window_s * self.fs_hz
        while len(self._edges) > 2 and self._edges[1] < horizon:
            self._edges.popleft()
        return int(rising.size)

    @property
    def edges(self) -> np.ndarray:
        """Edge positions (samples since the last reset) within the window."""
        return np.asarray(self._edges, dtype=np.float64)

    def interval_samples(self) -> float | None:
        """Robust mean samples between pulses, or None (see the module docstring)."""
        edges = self.edges
        if edges.size < 2:
            return None
        intervals = np.diff(edges)
        median = float(np.median(intervals))
        if median <= 0:
            return None
        multiple = np.rint(intervals / median)
        keep = (multiple >= 1) & (np.abs(intervals / np.maximum(multiple, 1) - median) < 0.25 * median)
        if not np.any(keep):
            return None
        mean = float(intervals[keep].sum() / multiple[keep].sum())
        since_last = self._n_seen - edges[-1]
        if since_last > max(self.timeout_s * self.fs_hz, 2.5 * mean):
            return None  # pulses stopped: machine at rest or probe unplugged
        return mean

    def rpm(self) -> float | None:
        mean = self.interval_samples()
        if mean is None:
            return None
        return 60.0 * self.fs_hz / (mean * self.pulses_per_rev)


def rpm_from_pulses(signal: np.ndarray, fs_hz: float, threshold_v: float, pulses_per_rev: int = 1, *,
                    hysteresis_v: float | None = None) -> float | None:
    """Speed over a whole pulse record (1-D, volts); None when it holds fewer than two pulses."""
    return pulses_in_record(signal, fs_hz, threshold_v, pulses_per_rev, hysteresis_v=hysteresis_v)[0]


def pulses_in_record(signal: np.ndarray, fs_hz: float, threshold_v: float, pulses_per_rev: int = 1, *,
                     hysteresis_v: float | None = None) -> tuple[float | None, np.ndarray]:
    """Speed over a whole pulse record (as :func:`rpm_from_pulses`) and the pulse times in seconds from the
    record's first sample (for order tracking, :mod:`rotorwatch.analysis.ordertrack`)."""
    x = np.asarray(signal).ravel()
    duration_s = max(x.size / fs_hz, 1e-9)
    tach = Tachometer(fs_hz, threshold_v, pulses_per_rev, hysteresis_v=hysteresis_v,
                      window_s=duration_s, timeout_s=duration_s)
    tach.feed(x)
    return tach.rpm(), tach.edges / fs_hz
