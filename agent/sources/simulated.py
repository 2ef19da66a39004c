"""A simulator scenario streamed as if it were a sound interface.

The scenario (``acquisition.scenario``, a scenario TOML relative to the configuration file) is rendered
chunk by chunk by :class:`rotorwatch.simulators.render.ScenarioRenderer` in volts at the input, and
handed out at the pace a device would deliver it: a chunk is due once its last frame would have been
captured (``time.monotonic()``, see :mod:`rotorwatch.sources.pacing`). ``pace=False`` hands chunks
out as fast as they are consumed (tests, batch replays).

The clock is the scenario's: ``t0_s`` is seconds since the scenario's start (``start_s`` of the first
chunk, 0 by default), and :attr:`clock` says ``"scenario"``.

``speedup``: the scenario clock runs that many times faster than the wall clock, while samples still
flow at real-time pace and at the configured rate. It works in *segments*: ``segment_s`` seconds of
signal are streamed continuously (so every analysis window inside a segment sees an unbroken, physically
consistent signal), then the scenario clock jumps ahead by ``(speedup - 1) * segment_s`` and the first
chunk of the next segment carries ``gap=True`` (analysis resets its filter state there, as after lost
samples). On average the scenario clock advances ``speedup`` seconds per wall second: a 30-day scenario
played with ``speedup = 1440`` is over in 30 minutes, showing the fault grow one segment at a time.
Choose ``segment_s`` at least as long as the longest analysis window (the daemon passes it; the default
is ``acquisition.update_interval_s``). With ``speedup = 1`` there are no jumps: one unbroken stream.

At the scenario's end the source has :attr:`ended` (or, with ``acquisition.loop``, starts over at 0 with
a gap).
"""

from __future__ import annotations

import logging
import math
from collections.abc import Iterator
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from ..errors import ConfigError, InputError
from .base import Chunk, Source, as_frames, resolve_path
from .pacing import Pacer

if TYPE_CHECKING:
    from rotorwatch.simulators.render import ScenarioRenderer

log = logging.getLogger(__name__)


class SimulatedSource(Source):
    kind = "simulated"
    clock = "scenario"

    def __init__(self, scenario: Any, fs_hz: float, channels: int, block_frames: int, *,
                 pace: bool = True, speedup: float = 1.0, segment_s: float | None = None,
                 start_s: float = 0.0, loop: bool = False, name: str = "") -> None:
        super().__init__(fs_hz, channels, block_frames)
        if not speedup >= 1.0:
            raise ValueError(f"speedup = {speedup!r}: must be at least 1")
        self.scenario = scenario
        self.pace = pace
        self.speedup = float(speedup)
        self.loop = loop
        self.start_s = float(start_s)
        self.name = name or getattr(scenario, "name", "") or "scenario"
        seg = segment_s if segment_s is not None else 0.0
        # whole blocks per segment, at least one
        self.segment_blocks = max(1, math.ceil(seg * fs_hz / block_frames - 1e-9)) if seg > 0 else 1
        self.duration_s = float(getattr(scenario, "duration_s", math.inf) or math.inf)
        self._renderer: ScenarioRenderer | None = None
        self._stream: Iterator | None = None
        self._pacer: Pacer | None = None
        self._t_next = self.start_s       # scenario time of the next frame
        self._blocks_in_segment = 0
        self._gap_next = False

    @property
    def segment_s(self) -> float:
        return self.segment_blocks * self.block_frames / self.fs_hz

    def _make_renderer(self) -> ScenarioRenderer:
        from rotorwatch.simulators.render import ScenarioRenderer

        return ScenarioRenderer(self.scenario)

    def _begin_stream(self, at_s: float) -> None:
        if self._renderer is None:
            self._renderer = self._make_renderer()
        self._stream = iter(self._renderer.stream(self.fs_hz, self.block_frames, start_s=at_s, channels=self.channels))
        self._t_next = at_s
        self._blocks_in_segment = 0

    def check(self) -> None:
        machine = getattr(self.scenario, "machine", None)
        if machine is not None:
            used = [(p.sensor.channel, f"point {p.id!r}") for p in machine.points]
            if machine.speed.mode == "tach":
                used.append((machine.speed.tach_channel, "the tach"))
            for ch, who in used:
                if ch >= self.channels:
                    raise InputError(f"simulated scenario {self.name!r}: {who} of machine {machine.id!r} uses "
                                     f"input channel {ch} but acquisition.channels = {self.channels}")
        if self.start_s >= self.duration_s:
            raise InputError(f"simulated source: start_s = {self.start_s:g} s is past the scenario's end "
                             f"({self.duration_s:g} s)")

    def _open(self) -> None:
        self.check()
        self._begin_stream(self.start_s)
        self._pacer = Pacer(self.fs_hz) if self.pace else None
        self._gap_next = self.stats.restarts > 0

    def _next_block(self) -> tuple[float, np.ndarray] | None:
        """Scenario time and frames of the next block (None at the scenario's end)."""
        if self._blocks_in_segment >= self.segment_blocks and self.speedup > 1.0:
            jump_to = self._t_next + (self.speedup - 1.0) * self.segment_s
            if jump_to >= self.duration_s and not self.loop:
                return None
            self._begin_stream(jump_to if jump_to < self.duration_s else 0.0)
            self._gap_next = True
        if self._t_next >= self.duration_s - 0.5 / self.fs_hz:
            if not self.loop:
                return None
            self._begin_stream(0.0)
            self._gap_next = True
        stream = self._stream
        if stream is None:
            return None
        try:
            t0, frames = next(stream)
        except StopIteration:
            return None
        frames = as_frames(frames, self.channels, f"simulated scenario {self.name!r}")
        remaining = int(round((self.duration_s - float(t0)) * self.fs_hz)) if math.isfinite(self.duration_s) else None
        if remaining is not None and remaining < frames.shape[0]:
            frames = frames[:max(remaining, 0)]
        self._blocks_in_segment += 1
        self._t_next = float(t0) + frames.shape[0] / self.fs_hz
        return float(t0), frames

    def _read(self, timeout_s: float) -> Chunk | None:
        if self._ended or self._stream is None:
            return None
        if self._pacer is not None and not self._pacer.wait(self.block_frames, timeout_s):
            return None
        block = self._next_block()
        if block is None or block[1].shape[0] == 0:
            self._ended = True
            log.info("simulated scenario %r ended at t=%.1f s", self.name, self._t_next)
            return None
        t0, frames = block
        if self._pacer is not None:
            self._pacer.advance(frames.shape[0])
        gap, self._gap_next = self._gap_next, False
        return Chunk(t0_s=t0, frames=frames, gap=gap)

    def _close(self) -> None:
        self._stream = None

    def _where(self) -> str:
        extra = f" speedup={self.speedup:g} segment={self.segment_s:g}s" if self.speedup > 1 else ""
        return f"scenario={self.name!r}{extra}"


def load(path: Path):
    from rotorwatch.simulators.scenario import load_scenario

    return load_scenario(path)


def from_settings(acquisition: Any, config_dir: Path | None = None, *, pace: bool = True,
                  segment_s: float | None = None, full_scale_v: Any = None, **options: Any) -> SimulatedSource:
    if not acquisition.scenario:
        raise ConfigError(["acquisition.scenario: source 'simulated' needs the path of a scenario file"])
    path = resolve_path(acquisition.scenario, config_dir)
    scenario = load(path)
    if segment_s is None:
        segment_s = acquisition.update_interval_s
    return SimulatedSource(scenario, acquisition.sample_rate_hz, acquisition.channels, acquisition.block_frames,
                           pace=pace, speedup=acquisition.speedup, segment_s=segment_s, loop=acquisition.loop,
                           name=str(path.name), **options)
