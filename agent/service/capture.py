"""The capture thread: reads the source and copies its frames into the per-channel ring buffers.

It does nothing else, so analysis can never hold it up: per chunk it copies each channel in use into
its :class:`~rotorwatch.service.ring.Ring`, advances the source clock, counts and wakes the analysis
loop (an ``Event.set``, which never blocks). A slow analysis only means that old samples get
overwritten before anyone reads them.

Faults, all reported through :attr:`Capture.status` and counted in :class:`SelfStats`, never raised:

- the source cannot be opened (``SourceUnavailable``, a missing device or file): retried with
  exponential back-off (``backoff_min_s`` doubling to ``backoff_max_s``);
- the source delivers nothing for longer than ``stall_after_s`` (wall clock): ``stalled``; the source
  is closed and reopened with back-off;
- ``read()`` raises (a device unplugged): closed and reopened with back-off;
- the input ends (a scenario or a recording without ``loop``): ``ended``, and it stays ended (it is not
  started again, so a finished simulation never turns back into a healthy machine unannounced); a raw
  stream that ends is reopened after ``backoff_max_s``;
- a chunk with ``gap`` set: the rings restart filling, so no window splices the two sides of a gap;
- a chunk with ``overflow`` set (samples lost in the driver or on a full queue): counted, and its mapped
  start time kept in :attr:`Capture.last_overflow_s`, so the daemon reports every window that holds
  the discontinuity as a sensor fault (``overflow``) instead of analyzing it.

Clock: chunk times are on the source clock (``Chunk.t0_s``). :class:`SourceClock` maps them onto a
time line that never runs backwards: for simulated input (scenario seconds from 0) it anchors the
scenario's start at the wall time of the first chunk, and after a reopen that restarts a scenario or
recording it re-anchors so the mapped time carries on from where it was.
"""

from __future__ import annotations

import logging
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from ..errors import RotorwatchError
from ..logs import RepeatLimiter, fields
from ..selfstats import SelfStats
from ..settings.models import Acquisition
from .ring import Ring

log = logging.getLogger(__name__)

POSIX_PLAUSIBLE_S = 1e9  # chunk times below this are not wall-clock (a scenario clock from 0)
FINITE_SOURCES = ("simulated", "recording")  # inputs that end for good (without acquisition.loop)


@dataclass(frozen=True)
class CaptureStatus:
    state: str  # starting | running | stalled | unavailable | ended | stopped (see Capture._run)
    reason: str
    since_s: float  # time.monotonic() of the change


class SourceClock:
    """Source time -> a continuous, never-decreasing time line (POSIX seconds)."""

    def __init__(self, anchor_to_wall: bool, wall: Callable[[], float] = time.time):
        self._anchor_to_wall = anchor_to_wall
        self._wall = wall
        self._offset: float | None = None
        self.last_end_s: float | None = None  # mapped time just after the newest sample

    def map(self, t0_s: float, duration_s: float, new_run: bool) -> float:
        """Mapped start time of a chunk. ``new_run``: the chunk follows a reopen or a gap."""
        if self._offset is None:
            self._offset = (self._wall() - t0_s) if (self._anchor_to_wall and t0_s < POSIX_PLAUSIBLE_S) else 0.0
        mapped = t0_s + self._offset
        if self.last_end_s is not None and mapped < self.last_end_s - 1e-6:
            if new_run or mapped < self.last_end_s - 1.0:
                # a restarted scenario or recording: carry on from where the time line was
                self._offset += self.last_end_s - mapped
                mapped = self.last_end_s
        self.last_end_s = mapped + duration_s
        return mapped


class Capture:
    """Owns the source in its own thread. ``rings`` maps input channel -> ring buffer."""

    def __init__(self, acquisition: Acquisition, config_dir: Path, rings: dict[int, Ring], stats: SelfStats,
                 open_fn: Callable[[], object], *, stall_after_s: float, wake: threading.Event,
                 backoff_min_s: float = 0.5, backoff_max_s: float = 30.0, read_timeout_s: float | None = None):
        self.acquisition = acquisition
        self.config_dir = config_dir
        self.rings = rings
        self.stats = stats
        self._open_fn = open_fn
        self.stall_after_s = stall_after_s
        self.backoff_min_s = backoff_min_s
        self.backoff_max_s = backoff_max_s
        fs = acquisition.sample_rate_hz
        block_s = acquisition.block_frames / fs / (acquisition.speedup if acquisition.source == "recording" else 1.0)
        self.read_timeout_s = read_timeout_s if read_timeout_s is not None else min(0.25, max(2.5 * block_s, 0.02))
        self._wake = wake
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None
        self._lock = threading.Lock()
        self._status = CaptureStatus("starting", "opening the source", time.monotonic())
        self.clock = SourceClock(anchor_to_wall=acquisition.source == "simulated")
        self._limiter = RepeatLimiter(300.0)
        self.fs_hz = fs
        self.chunks = 0
        self.run_id = 0  # incremented whenever continuity breaks (reopen, gap): analysis re-bases its schedule
        self.last_data_monotonic: float | None = None
        self._last_overflow_s: float | None = None  # mapped time of the newest overflowed chunk's first frame
        self.overflows = 0
        self.source: Any = None

    # -- status ----------------------------------------------------------------------------------
    @property
    def status(self) -> CaptureStatus:
        with self._lock:
            return self._status

    def _set_status(self, state: str, reason: str) -> None:
        with self._lock:
            changed = state != self._status.state
            if changed:
                self._status = CaptureStatus(state, reason, time.monotonic())
        if changed:
            self.stats.source_up.set(1 if state == "running" else 0)
            self._wake.set()
            level = logging.INFO if state in ("running", "stopped", "ended") else logging.WARNING
            ok, held = self._limiter.allow(f"status:{state}") if level == logging.WARNING else (True, 0)
            if ok:
                log.log(level, f"source {state}", extra=fields(kind=self.acquisition.source, reason=reason,
                                                               repeats=held or None))

    @property
    def source_time_s(self) -> float | None:
        """Mapped time just after the newest sample (None before the first chunk)."""
        with self._lock:
            return self.clock.last_end_s

    @property
    def last_overflow_s(self) -> float | None:
        """Mapped time where samples were last lost (the first frame after the loss), or None."""
        with self._lock:
            return self._last_overflow_s

    # -- thread ----------------------------------------------------------------------------------
    def start(self) -> None:
        self._thread = threading.Thread(target=self._run, name="capture", daemon=True)
        self._thread.start()

    def stop(self, timeout_s: float = 5.0) -> None:
        self._stop.set()
        if self._thread is not None:
            self._thread.join(timeout_s)
            if self._thread.is_alive():
                log.warning("capture thread did not stop in time", extra=fields(timeout_s=timeout_s))
        self._set_status("stopped", "daemon stopping")

    def end_reason(self) -> str:
        """Why the input ended, in the words of its kind."""
        kind = self.acquisition.source
        if kind == "simulated":
            return "the simulated scenario has ended (acquisition.loop = false); the last state is held"
        if kind == "recording":
            return "the recording has ended (acquisition.loop = false); the last state is held"
        return "the input stream has ended; waiting for it to come back"

    def _close_source(self) -> None:
        src, self.source = self.source, None
        if src is not None:
            try:
                src.close()  # bounded by the source contract
            except Exception as e:  # noqa: BLE001 - closing must never take the thread down
                log.warning("error closing the source", extra=fields(error=str(e)))

    def _run(self) -> None:
        delay = self.backoff_min_s
        new_run = True
        try:
            while not self._stop.is_set():
                if self.source is None:
                    self.stats.source_reopens.inc()
                    try:
                        src = self._open_fn()
                        src.start()  # type: ignore[attr-defined]
                    except (RotorwatchError, OSError, ValueError) as e:
                        self._set_status("unavailable", str(e).splitlines()[0] if str(e) else type(e).__name__)
                        self._stop.wait(delay)
                        delay = min(delay * 2, self.backoff_max_s)
                        continue
                    self.source = src
                    new_run = True
                    self.last_data_monotonic = time.monotonic()
                    # the status turns "running" with the first chunk, so a source that opens but
                    # delivers nothing (a stalled sensor) does not flap between running and stalled
                    if self.status.state == "unavailable":
                        self._set_status("starting", "source opened, waiting for samples")
                try:
                    chunk = self.source.read(self.read_timeout_s)
                except (RotorwatchError, OSError, ValueError) as e:
                    self._set_status("unavailable", f"read failed: {str(e).splitlines()[0] if str(e) else type(e).__name__}")
                    self._close_source()
                    self._stop.wait(delay)
                    delay = min(delay * 2, self.backoff_max_s)
                    continue
                now = time.monotonic()
                if chunk is None:
                    if getattr(self.source, "ended", False):
                        self._set_status("ended", self.end_reason())
                        self._close_source()
                        if self.acquisition.source in FINITE_SOURCES:
                            self._stop.wait()  # a scenario or a recording is over: never start it again unasked
                            break
                        self._stop.wait(self.backoff_max_s)  # a raw stream's writer may come back
                        continue
                    if self.last_data_monotonic is not None and now - self.last_data_monotonic > self.stall_after_s:
                        self.stats.source_stalls.inc()
                        self._set_status("stalled", f"no samples for {now - self.last_data_monotonic:.1f} s")
                        self._close_source()
                        self._stop.wait(delay)
                        delay = min(delay * 2, self.backoff_max_s)
                    continue
                self._take(chunk, new_run)
                new_run = False
                self.last_data_monotonic = now
                if self.status.state != "running":
                    self._set_status("running", "samples flowing")
                delay = self.backoff_min_s
        finally:
            self._close_source()

    def _take(self, chunk, new_run: bool) -> None:
        frames = chunk.frames
        n = frames.shape[0]
        if chunk.overflow:
            self.stats.input_overflows.inc()
        if chunk.gap or new_run:
            if chunk.gap:
                self.stats.input_gaps.inc()
            for ring in self.rings.values():
                ring.reset()
            self.run_id += 1
        duration = n / self.fs_hz
        with self._lock:
            t0 = self.clock.map(chunk.t0_s, duration, new_run or chunk.gap)
            if chunk.overflow:
                self._last_overflow_s = t0
                self.overflows += 1
        end = t0 + duration
        for ch, ring in self.rings.items():
            ring.write(frames[:, ch], end)
        self.stats.samples_captured.inc(n * len(self.rings))
        self.chunks += 1
        self._wake.set()
