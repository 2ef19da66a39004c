"""Bearing findings: which defect lines stand out in the squared-envelope spectrum (SES).

The decision rule, for each defect (BPFO, BPFI, BSF, FTF) of each bearing of the machine (the point's
own bearing first: a sensor also hears its neighbour) at the speed used:

1. Expected rate f0 = defect order x shaft frequency. For BSF two series are tried, BSF and 2 x BSF (a
   spalled element strikes both races once per spin, so its impact rate is 2 x BSF; Randall & Antoni
   2011, from memory); the finding is still named BSF (``series`` says which).
2. Fundamental: the highest bin within f0 +/- tolerance (the band's ``tolerance_pct``, default 3 %: slip
   of 1-2 % plus speed uncertainty, common practice) that is also a local maximum (not the skirt of a
   line outside the window); ``found_hz`` is refined by parabolic interpolation.
3. Floor: the median of the SES within +/- max(25 % of f0, 30 lines) around each line examined. The
   ratio peak / floor is the line's prominence.
4. Harmonics h = 2..H (H = the band's ``harmonics``, default 3): the highest bin within h x found_hz
   +/- max(2 lines, 0.5 %). Sidebands: found_hz +/- the modulating frequency, 1x shaft for BPFO and BPFI
   (load zone, rotating inner ring), FTF for BSF (the element travels with the cage).
5. Lines that are not evidence: a line within 2 lines of an integer shaft order (shaft modulation, not a
   bearing), and a line already explained by a stronger finding (below).
6. A defect is a *finding* when its fundamental stands >= 4 x its floor (12 dB) AND it has support: at
   least one harmonic or one sideband >= 2.5 x its floor (8 dB). One lone line is never enough. For
   Gaussian noise the SES lines are exponentially distributed in power, so a 4 x amplitude excursion
   somewhere in a window of 30 lines has a chance near 1e-3 per update even with a single average, and
   the support condition cuts it further.
7. strength = root-sum-square of the prominences of the fundamental and of the harmonics that count as
   support.
8. Findings are accepted strongest first (when defects of several bearings, or of several kinds,
   claim the same line, the one whose kinematic frequency it matches most closely takes it; ties go to
   the point's own bearing), re-evaluating the rest after each: an accepted finding
   explains its harmonics h x f1 and the lines of its modulation family, each within 2 lines:
   BPFO: h x f1 + k x 1x + j x FTF (|k|, |j| <= 2: load zone and cage) and the cage-rate lines j x f1 / n
   (BPFO = n x FTF; uneven elements repeat once per cage turn); BPFI: h x f1 + k x 1x (|k| <= 5, the
   rotating defect's sideband family) and the lines j x f1 / n (ring-to-cage rate); BSF: h x f1 +/- 1, 2 x
   FTF and the cage-rate lines j x FTF (the element travels with the cage); FTF: its harmonics. One line is one finding. (For the university rig's bearing, FTF = 0.398 x
   shaft, so BPFO + 1x + 2 FTF falls within 0.4 % of BPFI: without this rule a strong outer-race fault
   would also report a weak inner-race one.)
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .plan import DefectPlan
from .result import Finding

FUNDAMENTAL_RATIO = 4.0
SUPPORT_RATIO = 2.5
FLOOR_HALF_WIDTH_FRACTION = 0.25
FLOOR_MIN_HALF_WIDTH_LINES = 30
HARMONIC_TOLERANCE = 0.005
HARMONIC_MIN_LINES = 2
EXPLAINED_LINES = 2


@dataclass(frozen=True)
class LineCheck:
    """One examined line: where it was found and how far it stands over its floor."""

    found_hz: float
    peak: float
    floor: float

    @property
    def ratio(self) -> float:
        return self.peak / self.floor if self.floor > 0 else (math.inf if self.peak > 0 else 0.0)


@dataclass(frozen=True)
class Candidate:
    name: str
    bearing: str
    series: str
    expected_hz: float
    fundamental: LineCheck
    harmonics: tuple[LineCheck, ...]
    sidebands: tuple[LineCheck, ...]


class SesReader:
    """Peak and floor look-ups in one SES (uniform lines 0, df, 2 df, ...)."""

    def __init__(self, ses: np.ndarray, df_hz: float):
        self.a = np.asarray(ses, dtype=float)
        self.df = df_hz
        self.n = self.a.size

    def covers(self, hz: float) -> bool:
        return hz / self.df < self.n - 2

    def floor(self, hz: float, half_width_hz: float) -> float:
        lo = max(int((hz - half_width_hz) / self.df), 1)
        hi = min(int((hz + half_width_hz) / self.df) + 1, self.n)
        if hi <= lo:
            return 0.0
        seg = self.a[lo:hi]
        mid = seg.size // 2  # the upper median: np.partition is several times cheaper than np.median here
        return float(np.partition(seg, mid)[mid])

    def peak(self, lo_hz: float, hi_hz: float, floor_half_width_hz: float) -> LineCheck | None:
        """Highest local maximum within [lo_hz, hi_hz], or None when the window holds none."""
        lo = max(int(math.ceil(lo_hz / self.df)), 1)
        hi = min(int(math.floor(hi_hz / self.df)), self.n - 2)
        if hi < lo:
            lo = hi = min(max(int(round(0.5 * (lo_hz + hi_hz) / self.df)), 1), self.n - 2)
        seg = self.a[lo - 1: hi + 2]
        mid = seg[1:-1]
        local = (mid >= seg[:-2]) & (mid >= seg[2:])  # a bin rising out of the window is another line's skirt
        if not local.any():
            return None
        i = lo + int(np.argmax(np.where(local, mid, -np.inf)))
        y0, y1, y2 = self.a[i - 1], self.a[i], self.a[i + 1]
        den = y0 - 2 * y1 + y2
        shift = 0.5 * (y0 - y2) / den if den < 0 else 0.0
        hz = (i + shift) * self.df
        return LineCheck(found_hz=float(hz), peak=float(y1), floor=self.floor(hz, floor_half_width_hz))

    def near(self, hz: float, half_width_hz: float, floor_half_width_hz: float) -> LineCheck:
        half = max(half_width_hz, HARMONIC_MIN_LINES * self.df)
        found = self.peak(hz - half, hz + half, floor_half_width_hz)
        return found if found is not None else LineCheck(hz, 0.0, self.floor(hz, floor_half_width_hz))


def _series(reader: SesReader, d: DefectPlan, name: str, series: str, f0: float, shaft_hz: float,
            modulation_hz: float | None) -> Candidate | None:
    if not reader.covers(f0 * (1 + d.tolerance)):
        return None
    floor_hw = max(FLOOR_HALF_WIDTH_FRACTION * f0, FLOOR_MIN_HALF_WIDTH_LINES * reader.df)
    fund = reader.peak(f0 * (1 - d.tolerance), f0 * (1 + d.tolerance), floor_hw)
    if fund is None:
        return None
    f1 = fund.found_hz
    harmonics = []
    for h in range(2, d.harmonics + 1):
        if not reader.covers(h * f1 * (1 + HARMONIC_TOLERANCE)):
            break
        harmonics.append(reader.near(h * f1, HARMONIC_TOLERANCE * h * f1, floor_hw))
    sidebands = []
    if modulation_hz:
        for sign in (-1.0, 1.0):
            at = f1 + sign * modulation_hz
            if at > 2 * reader.df and reader.covers(at):
                sidebands.append(reader.near(at, HARMONIC_TOLERANCE * at, floor_hw))
    return Candidate(name, d.bearing_id, series, f0, fund, tuple(harmonics), tuple(sidebands))


def candidates(ses: np.ndarray, df_hz: float, shaft_hz: float, defects: tuple[DefectPlan, ...]) -> list[Candidate]:
    """Every defect series read from the SES (BSF as two series: BSF and 2xBSF)."""
    reader = SesReader(ses, df_hz)
    out = []
    ftf_of = {d.bearing_id: d.order for d in defects if d.name == "ftf"}
    for d in defects:
        f0 = d.order * shaft_hz
        name = d.name.upper()
        if d.name == "bsf":
            mod = ftf_of.get(d.bearing_id, 0.0) * shaft_hz
            tries = [_series(reader, d, name, "BSF", f0, shaft_hz, mod),
                     _series(reader, d, name, "2xBSF", 2 * f0, shaft_hz, mod)]
        else:
            mod = shaft_hz if d.name in ("bpfo", "bpfi") else None
            tries = [_series(reader, d, name, name, f0, shaft_hz, mod)]
        out.extend(c for c in tries if c is not None)
    return out


@dataclass(frozen=True)
class Verdict:
    candidate: Candidate
    passes: bool
    strength: float
    harmonics_found: int
    sidebands_found: int


class _Evidence:
    """Which lines still count as evidence: not on a shaft order, not explained by an accepted finding."""

    def __init__(self, shaft_hz: float, df_hz: float):
        self.shaft_hz = shaft_hz
        self.guard_hz = EXPLAINED_LINES * df_hz
        self.explained: list[np.ndarray] = []

    def counts(self, hz: float) -> bool:
        if self.shaft_hz > 0 and abs(hz - self.shaft_hz * round(hz / self.shaft_hz)) <= self.guard_hz:
            return False
        return not any(np.any(np.abs(e - hz) <= self.guard_hz) for e in self.explained)

    def explain(self, c: Candidate, defects: tuple[DefectPlan, ...], top_hz: float) -> None:
        f1, fr = c.fundamental.found_hz, self.shaft_hz
        h = np.arange(1, int(top_hz / f1) + 2)[:, None] * f1
        orders = {d.name: d.order for d in defects if d.bearing_id == c.bearing}
        ftf = orders.get("ftf", 0.0)
        n_elements = int(round(orders["bpfo"] / ftf)) if ftf > 0 and "bpfo" in orders else 0
        cage = ftf * fr
        if c.name == "BPFI":
            # rotating defect: 1x sideband family; uneven elements: lines at the ring-cage rate f1 / n
            lines = (h + np.arange(-5, 6)[None, :] * fr).ravel()
            if n_elements >= 2:
                lines = np.concatenate([lines, np.arange(1, int(top_hz * n_elements / f1) + 2) * f1 / n_elements])
        elif c.name == "BPFO":
            # load zone and cage: h x f1 + k x 1x + j x FTF; uneven elements: lines at the cage rate f1 / n
            mix = (np.arange(-2, 3)[:, None] * fr + np.arange(-2, 3)[None, :] * cage).ravel()
            lines = (h + mix[None, :]).ravel()
            if n_elements >= 2:
                lines = np.concatenate([lines, np.arange(1, int(top_hz * n_elements / f1) + 2) * f1 / n_elements])
        elif c.name == "BSF":
            # the element travels with the cage: FTF sidebands and the cage-rate lines themselves
            lines = (h + np.arange(-2, 3)[None, :] * cage).ravel()
            if cage > 0:
                lines = np.concatenate([lines, np.arange(1, int(top_hz / cage) + 2) * cage])
        else:
            lines = h
        self.explained.append(np.asarray(lines, dtype=float).ravel())

    def judge(self, c: Candidate) -> Verdict:
        fund = c.fundamental
        support_h = [x for x in c.harmonics if x.ratio >= SUPPORT_RATIO and self.counts(x.found_hz)]
        support_s = [x for x in c.sidebands if x.ratio >= SUPPORT_RATIO and self.counts(x.found_hz)]
        ok = fund.ratio >= FUNDAMENTAL_RATIO and self.counts(fund.found_hz) and bool(support_h or support_s)
        strength = math.sqrt(fund.ratio**2 + sum(x.ratio**2 for x in support_h))
        return Verdict(c, ok, float(strength), 1 + len(support_h), len(support_s))


def decide(cands: list[Candidate], shaft_hz: float, df_hz: float, defects: tuple[DefectPlan, ...] = (),
           top_hz: float = 0.0) -> list[Finding]:
    """Apply the rule: strongest passing candidate first, re-judging the rest after each acceptance."""
    evidence = _Evidence(shaft_hz, df_hz)
    remaining = list(cands)
    findings: list[Finding] = []
    while remaining:
        verdicts = [evidence.judge(c) for c in remaining]
        passing = [v for v in verdicts if v.passes]
        if not passing:
            break
        best = max(passing, key=lambda v: v.strength)
        # Defects of different bearings (or kinds) may claim the same line: the one whose kinematic
        # frequency the line matches most closely takes it (ties: the earlier, i.e. the point's bearing).
        f_best = best.candidate.fundamental.found_hz
        rivals = [v for v in passing if abs(v.candidate.fundamental.found_hz - f_best) <= evidence.guard_hz]
        best = min(rivals, key=lambda v: abs(v.candidate.fundamental.found_hz / v.candidate.expected_hz - 1.0))
        c = best.candidate
        findings.append(Finding(
            name=c.name,
            bearing=c.bearing,
            frequency_hz=float(c.expected_hz),
            found_hz=float(c.fundamental.found_hz),
            strength=best.strength,
            harmonics_found=best.harmonics_found,
            series=c.series,
            sidebands_found=best.sidebands_found,
        ))
        # The other series of the same defect (BSF / 2xBSF) is settled too.
        remaining = [r for r in remaining if not (r.name == c.name and r.bearing == c.bearing)]
        evidence.explain(c, defects, top_hz)
    return findings


def assess(ses: np.ndarray, df_hz: float, shaft_hz: float,
           defects: tuple[DefectPlan, ...]) -> tuple[list[Finding], dict[str, float]]:
    """Findings of one update (empty when nothing stands out clearly) and the prominence of every
    defect's fundamental (peak / floor, the better BSF series), keyed ``"BPFO:<bearing>"``, whether it
    passed or not: a trendable measure of how close each defect is to a finding."""
    if shaft_hz <= 0 or not defects:
        return [], {}
    cands = candidates(ses, df_hz, shaft_hz, defects)
    # 0.0: no line at all (no local maximum) within the defect's window
    prominence: dict[str, float] = {f"{d.name.upper()}:{d.bearing_id}": 0.0 for d in defects}
    for c in cands:
        key = f"{c.name}:{c.bearing}"
        prominence[key] = max(prominence.get(key, 0.0), float(c.fundamental.ratio))
    return decide(cands, shaft_hz, df_hz, defects, ses.size * df_hz), prominence


def find_defects(ses: np.ndarray, df_hz: float, shaft_hz: float, defects: tuple[DefectPlan, ...]) -> list[Finding]:
    """Findings of one update (empty when nothing stands out clearly)."""
    return assess(ses, df_hz, shaft_hz, defects)[0]
