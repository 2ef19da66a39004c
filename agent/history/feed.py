"""A history's elements as replay frames, decoded once each, in the worker processes that analyze them.

Decoding (reading a file, parsing text, converting units) does not depend on the order of the
elements: :class:`HistoryFrames` reads element ``i`` the same in any process, so with ``--workers`` > 1
each worker decodes an element and analyzes it (:mod:`rotorwatch.replaypool`); the alarm logic runs in
the replaying process, in time order, exactly as the daemon runs it. :func:`decoded` decodes alone (the
benchmark's figure for the decoding's share).

The rate of every element is checked here: all elements at one rate (mixed rates are an error), and that
rate equal to ``acquisition.sample_rate_hz`` unless the history allows analyzing at the data's rate.
"""

from __future__ import annotations

import multiprocessing
from collections import deque
from collections.abc import Iterator
from dataclasses import dataclass
from typing import Any

from ..errors import InputError
from ..replay import Frame
from .decode import Decoded
from .readers import History

_worker_history: History | None = None


def _init(history: History) -> None:
    global _worker_history
    _worker_history = history


def _decode(i: int) -> Decoded:
    assert _worker_history is not None
    return _worker_history.decode(i)


class RateCheck:
    """Every element at one rate, and that rate the configuration's unless the data's rate is allowed."""

    def __init__(self, history: History, config_rate_hz: float):
        self.history = history
        self.config_rate_hz = float(config_rate_hz)
        self.fs_hz: float | None = None
        self.first: str = ""
        self.n_columns: int | None = None
        self.columns_from: str = ""

    def __call__(self, name: str, d: Decoded | ElementMeta) -> None:
        if d.n_columns is not None:
            if self.n_columns is None:
                self.n_columns, self.columns_from = d.n_columns, name
            elif d.n_columns != self.n_columns:
                raise InputError(f"{name}: has {d.n_columns} column(s) where {self.columns_from} has {self.n_columns}")
        if d.fs_hz is None:
            return
        if self.fs_hz is None:
            if abs(d.fs_hz - self.config_rate_hz) > 1e-6 * self.config_rate_hz and not self.history.spec.data_rate:
                raise InputError(
                    f"{name}: sampled at {d.fs_hz:g} Hz, the configuration's acquisition.sample_rate_hz is "
                    f"{self.config_rate_hz:g} Hz: resample the history, correct the configuration, or give "
                    f"--data-rate to analyze at the data's rate")
            self.fs_hz, self.first = d.fs_hz, name
        elif abs(d.fs_hz - self.fs_hz) > 1e-9 * self.fs_hz:
            raise InputError(f"{name}: sampled at {d.fs_hz:g} Hz where {self.first} is at {self.fs_hz:g} Hz: "
                             "a history has one rate (mixed rates)")


def decoded(history: History, workers: int = 1) -> Iterator[tuple[int, Decoded]]:
    """``(index, decoded element)`` in time order; with ``workers`` > 1 decoded in worker processes."""
    n = len(history.elements)
    if workers <= 1 or n < 2:
        for i in range(n):
            yield i, history.decode(i)
        return
    ctx = multiprocessing.get_context("fork" if "fork" in multiprocessing.get_all_start_methods() else "spawn")
    with ctx.Pool(workers, initializer=_init, initargs=(history,)) as pool:
        pending: deque[tuple[int, Any]] = deque()
        nxt = 0
        while nxt < n and len(pending) < 2 * workers:
            pending.append((nxt, pool.apply_async(_decode, (nxt,))))
            nxt += 1
        while pending:
            i, job = pending.popleft()
            if nxt < n:
                pending.append((nxt, pool.apply_async(_decode, (nxt,))))
                nxt += 1
            yield i, job.get()


@dataclass(frozen=True)
class ElementMeta:
    """What the checks across elements need of a decoded element (its samples travel in the frame)."""

    name: str
    fs_hz: float | None
    n_columns: int | None


class HistoryFrames:
    """A history's elements as replay frames by index (a :class:`~rotorwatch.replaypool.FrameSource`):
    elapsed seconds from its first element, volts per point. Decoding is the same in any process; the
    checks across elements (one rate, one column count) run in time order in the replaying process.
    Element 0 is decoded when opened, to learn the rate the history is analyzed at (:attr:`fs_hz`)."""

    def __init__(self, history: History, config_rate_hz: float, check: RateCheck | None = None):
        self.history = history
        self.rate_check = check or RateCheck(history, config_rate_hz)
        t0 = history.start_unix_s
        self.elapsed_s = [e.time_s - t0 for e in history.elements]
        self._first = self._decode(0)
        self.check(0, self._first[1])
        self.fs_hz = self.rate_check.fs_hz or float(config_rate_hz)

    def _decode(self, i: int) -> tuple[Frame, ElementMeta]:
        d = self.history.decode(i)
        frame = Frame(self.elapsed_s[i], d.blocks_v if d.fs_hz is not None else {}, d.rpm)
        return frame, ElementMeta(self.history.elements[i].name, d.fs_hz, d.n_columns)

    def frame(self, i: int) -> tuple[Frame, ElementMeta]:
        if i == 0 and self._first is not None:
            return self._first
        return self._decode(i)

    def usable(self, meta: ElementMeta) -> bool:
        return meta.fs_hz is None or abs(meta.fs_hz - self.fs_hz) <= 1e-9 * self.fs_hz

    def check(self, i: int, meta: ElementMeta) -> None:
        self.rate_check(meta.name, meta)  # element 0 again: the same answer

    def __getstate__(self) -> dict:
        return {**self.__dict__, "_first": None}  # a worker decodes element 0 again if it needs it
