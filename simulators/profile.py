"""A severity over time: piecewise constant, linear or exponential, with a closed-form integral.

A scenario's timeline turns into one :class:`Profile` per component and point: the healthy value until
the first change starts, then each change's ramp (linear, exponential or a step) towards its target,
holding the target afterwards. Past ``hold_after_s`` (the scenario's end) the profile holds its last
value, so a long-running simulated source keeps the final state.

The integral is closed-form so the shaft phase (the integral of speed) can be evaluated at any absolute
time without stepping through the days before it; rendering a snapshot at day 29 costs the same as at
day 0, and a stream cut into chunks equals one long render.

Exponential ramps follow ``v_a + (v_b - v_a) (exp(k x) - 1) / (exp(k) - 1)`` over the ramp's fraction
``x`` in [0, 1] with ``k = EXP_GROWTH``: slow at first, fast near the end, the way spall growth is
usually drawn (common practice, no single source).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Literal

import numpy as np

Shape = Literal["linear", "exponential", "step"]

EXP_GROWTH = 4.0  # k: an exponential ramp is at 12 % of its change half-way, 36 % at three quarters
_EXPM1_K = math.expm1(EXP_GROWTH)


@dataclass(frozen=True)
class Ramp:
    """One change: from the value at ``start_s`` to ``to_value`` at ``end_s``."""

    start_s: float
    end_s: float
    to_value: float
    shape: Shape = "linear"


@dataclass(frozen=True)
class _Piece:
    start_s: float
    end_s: float  # math.inf for the last piece
    v_a: float
    v_b: float
    kind: Literal["const", "linear", "exponential"]
    integral_at_start: float


def _formula(kind: str, a: float, b: float, va: float, vb: float, t: float) -> float:
    if kind == "const":
        return va
    x = (t - a) / (b - a)
    if kind == "linear":
        return va + (vb - va) * x
    return va + (vb - va) * math.expm1(EXP_GROWTH * x) / _EXPM1_K


class Profile:
    """A piecewise severity ``value(t)`` with ``integral(t) = int_0^t value``.

    ``ramps`` must not overlap (the scenario loader checks that); they are applied in time order, each
    starting from wherever the previous ones left the value. Times are seconds from scenario start;
    before 0 the initial value holds (and the integral runs negative).
    """

    def __init__(self, initial: float, ramps: list[Ramp] | tuple[Ramp, ...] = (), hold_after_s: float | None = None):
        ramps = sorted(ramps, key=lambda r: r.start_s)
        for earlier, later in zip(ramps, ramps[1:]):
            if later.start_s < earlier.end_s:
                raise ValueError(f"ramps overlap: one ends at {earlier.end_s:g} s, "
                                 f"the next starts at {later.start_s:g} s")
        # pieces as (start, formula end, v_a, v_b, kind); a piece covers [start, next piece's start)
        raw: list[tuple[float, float, float, float, str]] = []
        t, v = -math.inf, float(initial)
        for r in ramps:
            if r.start_s > t:
                raw.append((t, r.start_s, v, v, "const"))
            if r.shape == "step" or r.end_s <= r.start_s:
                t, v = r.start_s, float(r.to_value)
                continue
            raw.append((r.start_s, r.end_s, v, float(r.to_value), r.shape))
            t, v = r.end_s, float(r.to_value)
        raw.append((t, math.inf, v, v, "const"))
        if hold_after_s is not None:
            kept = [p for p in raw if p[0] < hold_after_s]
            last = kept[-1]
            if last[4] != "const":
                v_hold = _formula(last[4], last[0], last[1], last[2], last[3], hold_after_s)
                kept.append((hold_after_s, math.inf, v_hold, v_hold, "const"))
            raw = kept
        self._pieces: list[_Piece] = []
        acc = 0.0
        for i, (a, b, va, vb, kind) in enumerate(raw):
            if i == 1:
                acc = raw[0][2] * a  # the first piece is constant from -inf: int_0^a
            elif i > 1:
                acc += self._area(self._pieces[-1], a)
            self._pieces.append(_Piece(a, b, va, vb, kind, acc if i else math.nan))  # type: ignore[arg-type]
        self._starts = np.array([p.start_s for p in self._pieces[1:]], dtype=float)

    @staticmethod
    def _area(p: _Piece, t):
        """int from p.start_s to t of the piece's formula (t inside the piece; array or scalar)."""
        u = t - p.start_s
        if p.kind == "const":
            return p.v_a * u
        span = p.end_s - p.start_s
        dv = p.v_b - p.v_a
        if p.kind == "linear":
            return p.v_a * u + dv * u * u / (2.0 * span)
        x = u / span
        return p.v_a * u + dv / _EXPM1_K * (span * np.expm1(EXP_GROWTH * x) / EXP_GROWTH - u)

    # ------------------------------------------------------------------------------------ public API
    def value(self, t_s):
        """Severity at ``t_s`` (scalar or array of seconds)."""
        t = np.asarray(t_s, dtype=float)
        out = np.empty_like(t)
        for i, m in self._piece_masks(t):
            p = self._pieces[i]
            tm = t if m is None else t[m]
            if p.kind == "const":
                v = p.v_a
            else:
                x = (tm - p.start_s) / (p.end_s - p.start_s)
                if p.kind == "linear":
                    v = p.v_a + (p.v_b - p.v_a) * x
                else:
                    v = p.v_a + (p.v_b - p.v_a) * np.expm1(EXP_GROWTH * x) / _EXPM1_K
            if m is None:
                out[...] = v
            else:
                out[m] = v
        return float(out) if out.ndim == 0 else out

    def integral(self, t_s):
        """``int_0^t value(tau) dtau`` (scalar or array of seconds)."""
        t = np.asarray(t_s, dtype=float)
        out = np.empty_like(t)
        for i, m in self._piece_masks(t):
            p = self._pieces[i]
            tm = t if m is None else t[m]
            v = p.v_a * tm if i == 0 else p.integral_at_start + self._area(p, tm)
            if m is None:
                out[...] = v
            else:
                out[m] = v
        return float(out) if out.ndim == 0 else out

    def _piece_masks(self, t: np.ndarray):
        """(piece index, mask or None for 'all of t') for the pieces that ``t`` touches."""
        if t.size == 0:
            return []
        lo, hi = np.searchsorted(self._starts, [np.min(t), np.max(t)], side="right")
        if lo == hi:  # the common case: a block of samples inside one piece
            return [(int(lo), None)]
        idx = np.searchsorted(self._starts, t, side="right")
        return [(i, idx == i) for i in range(int(lo), int(hi) + 1)]

    def is_constant(self, t0_s: float, t1_s: float) -> bool:
        """True when the value cannot change anywhere in [t0_s, t1_s]."""
        i0, i1 = np.searchsorted(self._starts, [t0_s, t1_s], side="right")
        if i0 == i1:
            p = self._pieces[int(i0)]
            return p.kind == "const" or p.v_a == p.v_b
        return all(p.kind == "const" and p.v_a == self._pieces[int(i0)].v_a for p in self._pieces[int(i0):int(i1) + 1])

    @property
    def final_value(self) -> float:
        return self._pieces[-1].v_a

    @property
    def peak_value(self) -> float:
        """Largest value anywhere (ramps are monotonic, so the ends of each piece's coverage bound it)."""
        ends = [q.start_s for q in self._pieces[1:]] + [math.inf]
        best = -math.inf
        for p, end in zip(self._pieces, ends):
            v_end = p.v_b if p.kind == "const" or end >= p.end_s else _formula(p.kind, p.start_s, p.end_s, p.v_a, p.v_b, end)
            best = max(best, p.v_a, v_end)
        return best
