"""The capture thread with a scripted source (a real Source subclass): gaps reset the rings, a source
that goes quiet is reported stalled and reopened, a failing read or open is retried, and the source
clock never runs backwards."""

from __future__ import annotations

import threading
import time

import numpy as np

from rotorwatch.errors import SourceUnavailable
from rotorwatch.selfstats import SelfStats
from rotorwatch.service.capture import Capture, SourceClock
from rotorwatch.service.ring import Ring
from rotorwatch.settings.models import Acquisition
from rotorwatch.sources.base import Chunk, Source

FS = 1000.0


class ScriptedSource(Source):
    """Plays a list of steps: ("chunk", t0, values, gap) | ("quiet",) | ("fail",)."""

    kind = "scripted"

    def __init__(self, steps):
        super().__init__(FS, 2, 100)
        self.steps = list(steps)

    def _open(self):
        pass

    def _read(self, timeout_s):
        if not self.steps:
            time.sleep(timeout_s)
            return None
        step = self.steps.pop(0)
        if step[0] == "quiet":
            time.sleep(timeout_s)
            return None
        if step[0] == "fail":
            raise SourceUnavailable("scripted source: device unplugged")
        _, t0, values, gap = step
        frames = np.stack([values, -values], axis=1).astype(np.float32)
        return Chunk(t0_s=t0, frames=frames, gap=gap)

    def _close(self):
        pass


def run_capture(opens, *, seconds=1.5, stall_after_s=0.3, source="stdin"):
    stats = SelfStats()
    rings = {0: Ring(1000), 1: Ring(1000)}
    wake = threading.Event()
    acq = Acquisition(source=source, sample_rate_hz=FS, channels=2, block_frames=100)
    queue = list(opens)

    def open_fn():
        item = queue.pop(0) if queue else ScriptedSource([])
        if isinstance(item, Exception):
            raise item
        return item

    cap = Capture(acq, None, rings, stats, open_fn, stall_after_s=stall_after_s, wake=wake,
                  backoff_min_s=0.05, backoff_max_s=0.1, read_timeout_s=0.02)
    cap.start()
    time.sleep(seconds)
    cap.stop()
    return cap, rings, stats


def chunk(t0, start, n=100, gap=False):
    return ("chunk", t0, np.arange(start, start + n, dtype=float), gap)


def test_frames_reach_the_rings_per_channel():
    cap, rings, stats = run_capture([ScriptedSource([chunk(1e9, 0), chunk(1e9 + 0.1, 100)])], seconds=0.3)
    np.testing.assert_array_equal(rings[0].latest(200), np.arange(200))
    np.testing.assert_array_equal(rings[1].latest(200), -np.arange(200))
    assert rings[0].end_time_s == 1e9 + 0.2
    assert stats.counter("samples_captured") == 400


def test_gap_restarts_the_window():
    cap, rings, stats = run_capture([ScriptedSource([chunk(1e9, 0), chunk(1e9 + 5.0, 500, gap=True)])], seconds=0.3)
    assert rings[0].latest(101) is None  # nothing from before the gap
    np.testing.assert_array_equal(rings[0].latest(100), np.arange(500, 600))
    assert stats.counter("input_gaps") == 1
    assert cap.run_id == 2  # the first run, then the one after the gap


def test_quiet_source_is_stalled_and_reopened():
    first = ScriptedSource([chunk(1e9, 0)] + [("quiet",)] * 1000)
    second = ScriptedSource([chunk(1e9 + 10, 0)])
    cap, rings, stats = run_capture([first, second], seconds=1.0, stall_after_s=0.2)
    assert stats.counter("source_stalls") >= 1
    assert stats.counter("source_reopens") >= 2
    assert rings[0].end_time_s == 1e9 + 10.1  # data from the reopened source arrived


def test_failing_open_and_read_are_retried():
    cap, rings, stats = run_capture([SourceUnavailable("no such device"), ScriptedSource([("fail",)]),
                                     ScriptedSource([chunk(1e9, 0)])], seconds=1.0)
    assert stats.counter("source_reopens") >= 3
    np.testing.assert_array_equal(rings[0].latest(100), np.arange(100))


def test_source_clock_anchors_simulated_time_and_never_runs_backwards():
    clock = SourceClock(anchor_to_wall=True, wall=lambda: 1_700_000_000.0)
    assert clock.map(0.0, 1.0, new_run=True) == 1_700_000_000.0  # scenario t=0 -> wall time at start
    assert clock.map(1.0, 1.0, new_run=False) == 1_700_000_001.0
    assert clock.map(3600.0, 1.0, new_run=True) == 1_700_003_600.0  # a sped-up jump forward is kept
    # the scenario restarts from 0 (a reopen, a loop): the time line carries on from where it was
    assert clock.map(0.0, 1.0, new_run=True) == 1_700_003_601.0
    assert clock.map(1.0, 1.0, new_run=False) == 1_700_003_602.0
    live = SourceClock(anchor_to_wall=False)
    assert live.map(1_800_000_000.0, 0.5, new_run=True) == 1_800_000_000.0  # POSIX chunk times stay
