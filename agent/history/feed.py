"""A history's elements as replay frames, decoded once each, ahead of the analysis in worker processes.

Decoding (reading a file, parsing text, converting units) does not depend on the order of the
elements, so ``workers`` processes decode ahead of the analysis (at most two elements per worker in
flight). The analysis and the alarm logic run in this process, in time order, exactly as the daemon
runs them: baselines, the kept envelope band and the delays depend on the updates before.

The rate of every element is checked here: all elements at one rate (mixed rates are an error), and that
rate equal to ``acquisition.sample_rate_hz`` unless the history allows analyzing at the data's rate.
"""

from __future__ import annotations

import multiprocessing
from collections import deque
from collections.abc import Iterator
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

    def __call__(self, name: str, d: Decoded) -> None:
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


def history_frames(history: History, config_rate_hz: float, workers: int = 1,
                   check: RateCheck | None = None) -> Iterator[Frame]:
    """Replay frames of ``history``: elapsed seconds from its first element, volts per point."""
    check = check or RateCheck(history, config_rate_hz)
    t0 = history.start_unix_s
    for i, d in decoded(history, workers):
        e = history.elements[i]
        check(e.name, d)
        yield Frame(e.time_s - t0, d.blocks_v if d.fs_hz is not None else {}, d.rpm)
