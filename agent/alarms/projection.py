"""Time to a level: a robust straight line through a value's recent trend, projected to its levels.

Each value with levels keeps the updates of its last ``window_hours`` (:class:`TrendWindow`, thinned to at
most ``max_points``; the daemon seeds it from the trend store at start). At every update the window is fitted
by the Theil-Sen estimator (:func:`theil_sen`: the median of the slopes between every pair of points, Theil
1950, Sen 1968; the line passes through the medians of time and value, scipy's ``method="separate"``), with
Sen's confidence interval of the slope (Sen 1968, eq. 2.6: ranks of the sorted pairwise slopes from the
normal approximation, ties corrected). It is numpy only, so the daemon loads no scipy.stats; the tests
check it against ``scipy.stats.theilslopes``.

The projection (:func:`project`), for a level L above the fitted value now:

- the crossing of the fitted line, ``t = t_med + (L - v_med) / slope``;
- its interval: the earliest time the steepest slope of the interval (plus z times the robust scatter of
  the values about the line, 1.4826 x their MAD) reaches L, and the latest the shallowest slope (minus that
  scatter) does. The slope interval covers the trend; the scatter covers that an update's reading, not the
  line, is what crosses the level;
- "not rising" when the low end of the slope interval is not above zero: no rise at that confidence;
- "reached" when the fitted value is already at or above L.

A straight line is what the window supports: a value that accelerates crosses before its projection made
early (the demo's outer-race band, README), which is why the window is short by default (24 h).
"""

from __future__ import annotations

import functools
import math
from collections import deque
from dataclasses import dataclass
from statistics import NormalDist

import numpy as np

from ..settings.models import ProjectionSettings

DAY_S = 86400.0
MAD_TO_SIGMA = 1.4826  # 1 / Phi^-1(3/4): MAD -> standard deviation of a normal sample (common practice)


@dataclass(frozen=True)
class TheilSen:
    """A Theil-Sen line ``y = intercept + slope x`` and Sen's confidence interval of the slope."""

    slope: float
    intercept: float
    low_slope: float
    high_slope: float


def _tie_term(values: np.ndarray) -> float:
    _, counts = np.unique(values, return_counts=True)
    k = counts[counts > 1].astype(float)
    return float(np.sum(k * (k - 1) * (2 * k + 5)))


def theil_sen(y, x, confidence: float = 0.95) -> TheilSen:
    """The Theil-Sen line of ``y`` over ``x`` with Sen's interval of the slope at ``confidence``
    (the arguments and results of ``scipy.stats.theilslopes(y, x, confidence)``). Raises ValueError when
    every ``x`` is the same.

    Only three order statistics of the pairwise slopes are needed (the median and the interval's two
    ends), so they are found by one partition instead of a sort: the same values, a few times faster at
    the window sizes used (the judge fits every value with levels at every update)."""
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    n = y.size
    i, j = _pairs(n)
    dx = x[j] - x[i]
    dy = y[j] - y[i]
    keep = dx != 0  # each pair once; (-a)/(-b) == a/b exactly, so the order of a pair does not matter
    if not np.any(keep):
        raise ValueError("all x are equal: no slope")
    slopes = dy[keep] / dx[keep]
    nt = slopes.size
    alpha = 1.0 - confidence if confidence > 0.5 else confidence
    z = NormalDist().inv_cdf(alpha / 2.0)
    sigsq = (n * (n - 1) * (2 * n + 5) - _tie_term(x) - _tie_term(y)) / 18.0
    mid = nt // 2
    middle = [mid] if nt % 2 else [mid - 1, mid]
    ends: list[int] = []
    if sigsq >= 0:
        sigma = math.sqrt(sigsq)
        ends = [max(int(np.round((nt + z * sigma) / 2.0)) - 1, 0), min(int(np.round((nt - z * sigma) / 2.0)), nt - 1)]
    part = np.partition(slopes, sorted(set(middle + ends)))
    slope = float(np.mean(part[middle]))  # np.median's own rule: the mean of the middle one or two
    intercept = float(np.median(y) - slope * np.median(x))
    if not ends:
        return TheilSen(slope, intercept, math.nan, math.nan)
    return TheilSen(slope, intercept, float(part[ends[0]]), float(part[ends[1]]))


@functools.lru_cache(maxsize=8)
def _pairs(n: int) -> tuple[np.ndarray, np.ndarray]:
    """Index arrays (i, j) of every pair i < j of ``n`` points (kept per window size)."""
    i, j = np.triu_indices(n, 1)
    i.setflags(write=False)
    j.setflags(write=False)
    return i, j


@dataclass(frozen=True)
class LevelEta:
    """When a value's trend reaches one of its levels."""

    level: str  # warning | alarm
    level_value: float
    status: str  # rising (times set) | reached | not_rising
    time_s: float | None = None  # the fitted line's crossing, POSIX seconds
    earliest_s: float | None = None  # the interval (module docstring)
    latest_s: float | None = None


@dataclass(frozen=True)
class Projection:
    """The fit of one value's window and its times to the value's levels."""

    status: str  # rising | not_rising | too_few (fewer than min_points updates in the window)
    time_s: float  # the update the projection was made at
    points: int
    span_s: float
    slope_per_day: float | None = None  # value units per day
    slope_low_per_day: float | None = None
    slope_high_per_day: float | None = None
    levels: tuple[LevelEta, ...] = ()

    def eta(self, level: str) -> LevelEta | None:
        return next((e for e in self.levels if e.level == level), None)


class TrendWindow:
    """The (time, value) samples of one value over the last ``window_s``, about ``max_points`` of them (at
    most two more): a sample closer than ``window_s / max_points`` to the one before the newest replaces the
    newest, so the kept samples are that far apart within one update's interval."""

    def __init__(self, settings: ProjectionSettings):
        self.window_s = settings.window_hours * 3600.0
        self.spacing_s = self.window_s / settings.max_points
        self.samples: deque[tuple[float, float]] = deque()

    def add(self, time_s: float, value: float) -> None:
        if not math.isfinite(value):
            return
        s = self.samples
        if s and time_s <= s[-1][0]:
            return  # not newer than the newest: seeded rows overlap the first updates
        if len(s) >= 2 and time_s - s[-2][0] < self.spacing_s:
            s[-1] = (time_s, value)
        else:
            s.append((time_s, value))
        while s and s[0][0] < time_s - self.window_s:
            s.popleft()


def project(window: TrendWindow, settings: ProjectionSettings, now_s: float,
            levels: dict[str, float | None]) -> Projection:
    """Fit ``window`` and project it to ``levels`` (``{"warning": L or None, "alarm": ...}``)."""
    s = window.samples
    n = len(s)
    span = s[-1][0] - s[0][0] if n else 0.0
    if n < settings.min_points or span <= 0:
        return Projection("too_few", now_s, n, span)
    t = np.fromiter((a for a, _ in s), float, n)
    v = np.fromiter((b for _, b in s), float, n)
    t_ref = t[-1]
    x_days = (t - t_ref) / DAY_S  # days before the newest sample: well-scaled slopes
    fit = theil_sen(v, x_days, settings.confidence)
    x_med, v_med = float(np.median(x_days)), float(np.median(v))
    resid = v - (v_med + fit.slope * (x_days - x_med))
    scatter = MAD_TO_SIGMA * float(np.median(np.abs(resid - np.median(resid))))
    z = NormalDist().inv_cdf(0.5 + settings.confidence / 2.0)
    rising = math.isfinite(fit.low_slope) and fit.low_slope > 0
    now_days = (now_s - t_ref) / DAY_S
    fitted_now = v_med + fit.slope * (now_days - x_med)
    etas = []
    for name in ("warning", "alarm"):
        level = levels.get(name)
        if level is None or not math.isfinite(level):
            continue
        if fitted_now >= level:
            etas.append(LevelEta(name, level, "reached"))
        elif not rising:
            etas.append(LevelEta(name, level, "not_rising"))
        else:
            def at(slope: float, shift: float, level: float = level) -> float:
                return t_ref + DAY_S * (x_med + (level - v_med + shift) / slope)

            etas.append(LevelEta(name, level, "rising", at(fit.slope, 0.0),
                                 max(now_s, at(fit.high_slope, -z * scatter)), at(fit.low_slope, z * scatter)))
    return Projection("rising" if rising else "not_rising", now_s, n, span, fit.slope, fit.low_slope,
                      fit.high_slope, tuple(etas))


def describe(p: Projection | None, unit: str = "") -> str:
    """One line for people: ``rising 0.004 m/s^2/d: warning reached, alarm in 6.2 d (4.1 d-9.0 d)``."""
    if p is None:
        return "-"
    if p.status == "too_few":
        return f"too few updates to fit ({p.points})"
    parts = []
    for e in p.levels:
        if e.status == "rising":
            parts.append(f"{e.level} in {_days(e.time_s - p.time_s)} ({_days(e.earliest_s - p.time_s)}-"  # type: ignore[operator]
                         f"{_days(e.latest_s - p.time_s)})")  # type: ignore[operator]
        else:
            parts.append(f"{e.level} {e.status.replace('_', ' ')}")
    rate = f"{p.slope_per_day:.3g} {unit}/d".replace(" /d", "/d") if p.slope_per_day is not None else ""
    head = "rising" if p.status == "rising" else "not rising"
    return f"{head} {rate}".strip() + (": " + ", ".join(parts) if parts else "")


def _days(seconds: float) -> str:
    """A duration for people: hours below two days, else days."""
    s = max(0.0, seconds)
    if s < 2 * DAY_S:
        return f"{s / 3600.0:.1f} h"
    d = s / DAY_S
    return f"{d:.1f} d" if d < 100 else f"{d:.0f} d"


def as_json(p: Projection | None, num=float, iso=None) -> dict | None:
    """A JSON-ready projection: times as seconds from the update (``in_s``, ``in_low_s``, ``in_high_s``) and,
    with ``iso`` (POSIX seconds -> text), the crossing's date (``at``). ``num`` rounds numbers (MQTT's
    :func:`~rotorwatch.publishers.mqtt.payloads.num`)."""
    if p is None:
        return None
    levels = {}
    for e in p.levels:
        row: dict = {"status": e.status, "level": num(e.level_value)}
        if e.status == "rising":
            row.update({"in_s": num(e.time_s - p.time_s), "in_low_s": num(e.earliest_s - p.time_s),  # type: ignore[operator]
                        "in_high_s": num(e.latest_s - p.time_s)})  # type: ignore[operator]
            if iso is not None:
                row["at"] = iso(e.time_s)
        levels[e.level] = row
    return {"status": p.status, "points": p.points, "span_s": num(p.span_s),
            "slope_per_day": None if p.slope_per_day is None else num(p.slope_per_day),
            "slope_interval_per_day": (None if p.slope_low_per_day is None
                                       else [num(p.slope_low_per_day), num(p.slope_high_per_day)]),
            **levels}
