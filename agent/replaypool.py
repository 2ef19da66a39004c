"""A replay's updates: frames analyzed in worker processes, judged in time order in this one.

    source = ScenarioFrames(renderer, fs_hz, window_s)       # or a history's frames, or any FrameSource
    for frame, update in replay_updates(pipeline, source, fs_hz, start_s, workers=2):
        ...

A :class:`FrameSource` reads update ``i`` the same in any process and any order (a scenario's snapshot is a
function of its time, a history's element a file). With ``workers`` > 1 each worker process reads an
update and runs the order-independent part of the pipeline on it
(:class:`~rotorwatch.pipeline.UpdateAnalysis`); this process takes the outcomes in time order and runs the
sequential part (:meth:`~rotorwatch.pipeline.MachinePipeline.judge`: baselines, alarms, states, evidence).

The analysis of a point whose demodulation band is searched depends on what was learned before (the band
kept at the first learning update, the review schedule). A worker analyzes with the plan the pipeline
forecasts when the update is handed out (:meth:`~rotorwatch.pipeline.MachinePipeline.forecast`); the
judge checks it against the actual plan and analyzes again, here, a point whose forecast was wrong (the
few updates in flight when a band is kept). The updates are therefore identical to a run of
:meth:`~rotorwatch.pipeline.MachinePipeline.step` one after the other (``workers`` = 1), record by record.

At most two updates per worker are in flight; a worker count above the number of updates is cut to it.
"""

from __future__ import annotations

import multiprocessing
from collections import deque
from collections.abc import Generator, Iterable, Iterator, Mapping, Sequence
from typing import Any, Protocol, runtime_checkable

from .alarms.records import MachineUpdate
from .alarms.sensor_checks import SensorLimits
from .heap import hold_freed_memory
from .pipeline import BandPlan, MachinePipeline, PointOutcome, UpdateAnalysis, UpdateInput
from .replay import Frame
from .settings.models import Machine


@runtime_checkable
class FrameSource(Protocol):
    """Updates read by index: ``frame(i)`` is the same in any process and order; ``check`` runs in order."""

    elapsed_s: Sequence[float]  # each update's time from the start, known before it is read

    def frame(self, i: int) -> tuple[Frame, Any]:
        """Update ``i`` and what :meth:`check` needs of it."""
        ...

    def usable(self, meta: Any) -> bool:
        """False when update ``i`` cannot be analyzed as read (its :meth:`check` then says why)."""
        ...

    def check(self, i: int, meta: Any) -> None:
        """Raises :class:`~rotorwatch.errors.InputError` when update ``i`` does not fit the ones before."""
        ...


# ------------------------------------------------------------------------------------------ workers
_source: FrameSource | None = None
_analysis: UpdateAnalysis | None = None
_fs_hz = 0.0
_start_s = 0.0


def _init(source: FrameSource, machine: Machine, keep_spectra: bool, limits: SensorLimits, fs_hz: float,
          start_s: float) -> None:
    global _source, _analysis, _fs_hz, _start_s
    hold_freed_memory()  # inherited through fork, not through spawn
    _source, _analysis, _fs_hz, _start_s = source, UpdateAnalysis(machine, keep_spectra, limits), fs_hz, start_s


def _work(i: int, plans: dict[str, BandPlan]) -> tuple[Frame, Any, dict[str, PointOutcome] | None]:
    """Update ``i`` read and analyzed; its samples stay here once analyzed (the judge reads them again
    in the rare case it needs them: :class:`_ReadAgain`)."""
    assert _source is not None and _analysis is not None
    frame, meta = _source.frame(i)
    if not _source.usable(meta):
        return frame, meta, None
    outcomes = _analysis.update(_input(frame, _fs_hz, _start_s), plans)
    return Frame(frame.elapsed_s, {}, frame.rpm, frame.tach_pulses_s), meta, outcomes


class _ReadAgain(Mapping[str, Any]):
    """The blocks of update ``i``, read again from the source on first use (a wrong forecast)."""

    def __init__(self, source: FrameSource, i: int):
        self._source, self._i = source, i
        self._blocks: Mapping[str, Any] | None = None

    def _read(self) -> Mapping[str, Any]:
        if self._blocks is None:
            self._blocks = self._source.frame(self._i)[0].blocks_v
        return self._blocks

    def __getitem__(self, key: str) -> Any:
        return self._read()[key]

    def __iter__(self) -> Iterator[str]:
        return iter(self._read())

    def __len__(self) -> int:
        return len(self._read())


def _input(frame: Frame, fs_hz: float, start_s: float) -> UpdateInput:
    return UpdateInput(start_s + frame.elapsed_s, frame.blocks_v, fs_hz, frame.rpm, None, frame.tach_pulses_s)


# ------------------------------------------------------------------------------------------- replay
def _in_order(pipeline: MachinePipeline, frames: Iterable[Frame], fs_hz: float,
              start_s: float) -> Iterator[tuple[Frame, MachineUpdate]]:
    for frame in frames:
        yield frame, pipeline.step(start_s + frame.elapsed_s, frame.blocks_v, rpm=frame.rpm, fs_hz=fs_hz,
                                   tach_pulses_s=frame.tach_pulses_s)


def _read(source: FrameSource) -> Iterator[Frame]:
    for i in range(len(source.elapsed_s)):
        frame, meta = source.frame(i)
        source.check(i, meta)
        yield frame


def replay_updates(pipeline: MachinePipeline, source: FrameSource | Iterable[Frame], fs_hz: float, start_s: float,
                   workers: int = 1) -> Generator[tuple[Frame, MachineUpdate], None, None]:
    """``(frame, update)`` of every update of ``source`` in time order; ``workers`` > 1 analyzes a
    :class:`FrameSource` in that many processes (a plain iterable of frames is read and analyzed here).
    A frame analyzed in a worker comes back without its samples (``blocks_v`` empty)."""
    if not isinstance(source, FrameSource):
        yield from _in_order(pipeline, source, fs_hz, start_s)
        return
    src = source
    n = len(src.elapsed_s)
    workers = min(workers, n)
    if workers <= 1:
        yield from _in_order(pipeline, _read(src), fs_hz, start_s)
        return
    times = [start_s + t for t in src.elapsed_s]
    ctx = multiprocessing.get_context("fork" if "fork" in multiprocessing.get_all_start_methods() else "spawn")
    args = (src, pipeline.machine, pipeline.keep_spectra, pipeline.sensor_limits, fs_hz, start_s)
    with ctx.Pool(workers, initializer=_init, initargs=args) as pool:
        pending: deque[tuple[int, Any]] = deque()

        def hand_out(i: int) -> None:
            # the plan forecast from the judged updates over the ones still in flight
            plans = pipeline.forecast([times[k] for k, _ in pending] + [times[i]])[-1]
            pending.append((i, pool.apply_async(_work, (i, plans))))

        nxt = 0
        while nxt < n and len(pending) < 2 * workers:
            hand_out(nxt)
            nxt += 1
        while pending:
            i, job = pending.popleft()
            frame, meta, outcomes = job.get()
            src.check(i, meta)
            inp = _input(frame, fs_hz, start_s)
            if outcomes is None:  # read, not analyzed: its check above said why, or it is analyzed here
                outcomes = pipeline.analysis.update(inp, pipeline.forecast([inp.time_s])[0])
            else:
                inp.blocks_v = _ReadAgain(src, i)
            update = pipeline.judge(inp, outcomes)
            if nxt < n:
                hand_out(nxt)
                nxt += 1
            yield frame, update
