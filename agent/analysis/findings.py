"""Bearing findings: which defect lines stand out in the squared-envelope spectrum (SES).

The decision rule, for each defect (BPFO, BPFI, BSF, FTF) of each bearing of the machine (the point's
own bearing first: a sensor also hears its neighbour) at the speed used:

1. Expected rate f0 = defect order x shaft frequency. For BSF two series are tried, BSF and 2 x BSF (a
   spalled element strikes both races once per spin, so its impact rate is 2 x BSF; Randall & Antoni
   2011, from memory); the finding is still named BSF (``series`` says which).
2. Fundamental: the highest line within f0 +/- tolerance (the band's ``tolerance_pct``, default 3 %: slip
   of 1-2 % plus speed uncertainty, common practice) that is a local maximum (not the skirt of a line
   outside the window) and that can be evidence (rule 5); its frequency is refined by parabolic
   interpolation (``measured_hz``).
3. Floor: the median of the SES within +/- max(25 % of f0, 30 lines) around each line examined. The
   ratio peak / floor is the line's prominence.
4. Harmonics h = 2..H (H = the band's ``harmonics``, default 3): the highest line within h x f1
   +/- max(2 lines, 0.5 %) that can be evidence. Sidebands: f1 +/- the modulating frequency, 1x shaft
   for BPFO and BPFI (load zone, rotating inner ring), FTF for BSF (the element travels with the cage).
5. Lines that are not evidence: a line within 2 lines of an integer shaft order (shaft modulation, not
   a bearing); with the machine's ``line_frequency_hz`` set, a line within max(2 lines, 0.5 %) of a
   multiple of 2 x the line frequency (2xLF and its harmonics are electrical: magnetic forces in the
   motor pulse at twice the supply frequency; the 0.5 % covers the usual drift of the mains, from
   memory); and a line claimed by an accepted finding of another defect (rule 8).
6. A defect is a *finding* when its fundamental stands >= 4 x its floor (12 dB) AND at least one other
   line of its family confirms it: one harmonic or sideband >= 5 x its floor (14 dB), or two >= 3.5 x
   (10.9 dB). One lone line is never enough. The thresholds come from measured null distributions
   (``tests/bench/bench_findings.py`` prints them): in the least-averaged SES the analysis
   produces (two half-overlapping envelope segments per update), noise alone lifts one of the four
   harmonic and sideband windows of a lone line to 2.5 x in one update in four (the earlier rule),
   to 5 x in 1 of 10 000, and two of them to 3.5 x in none of 10 000.
7. Prominence of a finding (``prominence_db``): 20 lg of the root-sum-square of the peak / floor ratios of
   the fundamental and of the harmonics >= 3.5 x: how far the defect's lines stand over the local floor,
   a signal-to-noise figure that ranks findings and is not a measure of how large the defect is.
   Severity (``severity_m_s2``): the RMS, in m/s^2 of the envelope, of the defect's lines in the envelope
   spectrum above the local floor: sqrt(sum over its fundamental, harmonics and sidebands that count as
   evidence of max(P_line - P_floor, 0)), with P_line the power within +/- 2 lines of the line (a
   Hann-windowed line's main lobe) and P_floor the median power density around it over the same width.
   It grows with the impacts' amplitude in the demodulation band (common practice: analysts trend the
   envelope amplitude at the defect frequencies), so it is comparable between updates of one point with
   one demodulation band, not between bands or machines.
8. Findings are accepted strongest first (when defects of several bearings, or of several kinds,
   claim the same line, the one whose kinematic frequency it matches most closely takes it; ties go to
   the point's own bearing), re-reading the rest after each: an accepted finding claims its harmonics
   h x f1 and the lines of its modulation family, each within 2 lines:
   BPFO: h x f1 + k x 1x + j x FTF (|k|, |j| <= 2: load zone and cage) and the cage-rate lines j x f1 / n
   (BPFO = n x FTF; uneven elements repeat once per cage turn); BPFI: h x f1 + k x 1x (|k| <= 5, the
   rotating defect's sideband family) and the lines j x f1 / n (ring-to-cage rate); BSF: h x f1 +/- 1, 2 x
   FTF and the cage-rate lines j x FTF (the element travels with the cage); FTF: its harmonics. A
   claimed line is no evidence for another defect: the others' fundamentals, harmonics and sidebands
   are searched among the lines left. (For the university rig's bearing, FTF = 0.398 x shaft, so BPFO +
   1x + 2 FTF falls within 0.4 % of BPFI: without this rule a strong outer-race fault would also report a
   weak inner-race one; BPFO + 1x falls inside the 2 x BSF window and BPFI - 3x inside the BSF window.)

``defect_prominence`` (every defect, finding or not) is the same peak / floor ratio of the highest line in
the defect's window that can be evidence for it (rule 5, after the findings have claimed their lines), so
a line that belongs to another defect's family is not reported as this defect's prominence.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, replace

import numpy as np

from .plan import DefectPlan
from .result import EvidenceLine, Finding

FUNDAMENTAL_RATIO = 4.0  # 12 dB
SUPPORT_ONE_RATIO = 5.0  # 14 dB: one harmonic or sideband this high confirms a fundamental
SUPPORT_TWO_RATIO = 3.5  # 10.9 dB: or two this high
FLOOR_HALF_WIDTH_FRACTION = 0.25
FLOOR_MIN_HALF_WIDTH_LINES = 30
HARMONIC_TOLERANCE = 0.005
HARMONIC_MIN_LINES = 2
EXPLAINED_LINES = 2
ELECTRICAL_TOLERANCE = 0.005  # 2xLF lines: the mains drifts by a few tenths of a percent (from memory)
LINE_HALF_WIDTH_LINES = 2  # a Hann-windowed line's main lobe: +/- 2 lines hold its power


def ratio_db(ratio: float) -> float:
    """20 lg of an amplitude ratio (a ratio of 0 gives -inf)."""
    return 20.0 * math.log10(ratio) if ratio > 0 else -math.inf


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

    @property
    def key(self) -> str:
        return f"{self.name}:{self.bearing}"


Allowed = Callable[[float], bool]


class SesReader:
    """Peak and floor look-ups in one SES (uniform lines 0, df, 2 df, ...)."""

    def __init__(self, ses: np.ndarray, df_hz: float):
        self.a = np.asarray(ses, dtype=float)
        self.df = df_hz
        self.n = self.a.size

    def covers(self, hz: float) -> bool:
        return hz / self.df < self.n - 2

    def floor(self, hz: float, half_width_hz: float) -> float:
        return _median_around(self.a, self.df, hz, half_width_hz)

    def _refine(self, i: int) -> float:
        y0, y1, y2 = self.a[i - 1], self.a[i], self.a[i + 1]
        den = y0 - 2 * y1 + y2
        shift = 0.5 * (y0 - y2) / den if den < 0 else 0.0
        return float((i + shift) * self.df)

    def peak(self, lo_hz: float, hi_hz: float, floor_half_width_hz: float,
             allowed: Allowed | None = None) -> LineCheck | None:
        """Highest local maximum within [lo_hz, hi_hz] that ``allowed`` accepts, or None."""
        lo = max(int(math.ceil(lo_hz / self.df)), 1)
        hi = min(int(math.floor(hi_hz / self.df)), self.n - 2)
        if hi < lo:
            lo = hi = min(max(int(round(0.5 * (lo_hz + hi_hz) / self.df)), 1), self.n - 2)
        # a bin rising out of the window is another line's skirt; a few lines at a time, so plain Python
        seg = self.a[lo - 1: hi + 2].tolist()
        local = [j for j in range(1, len(seg) - 1) if seg[j] >= seg[j - 1] and seg[j] >= seg[j + 1]]
        # highest first; equal heights the later first (a stable ascending sort, reversed)
        for j in reversed(sorted(local, key=seg.__getitem__)):
            i = lo + j - 1
            hz = self._refine(i)
            if allowed is None or allowed(hz):
                return LineCheck(found_hz=hz, peak=float(self.a[i]), floor=self.floor(hz, floor_half_width_hz))
        return None

    def near(self, hz: float, half_width_hz: float, floor_half_width_hz: float,
             allowed: Allowed | None = None) -> LineCheck:
        half = max(half_width_hz, HARMONIC_MIN_LINES * self.df)
        found = self.peak(hz - half, hz + half, floor_half_width_hz, allowed)
        return found if found is not None else LineCheck(hz, 0.0, self.floor(hz, floor_half_width_hz))


def _median_around(a: np.ndarray, df: float, hz: float, half_width_hz: float) -> float:
    lo = max(int((hz - half_width_hz) / df), 1)
    hi = min(int((hz + half_width_hz) / df) + 1, a.size)
    if hi <= lo:
        return 0.0
    seg = a[lo:hi]
    mid = seg.size // 2  # the upper median: np.partition is several times cheaper than np.median here
    return float(np.partition(seg, mid)[mid])


class Evidence:
    """Which lines can be evidence: not on a shaft order, not an electrical line (2xLF and harmonics, when
    the line frequency is known), not claimed by an accepted finding of another defect."""

    def __init__(self, shaft_hz: float, df_hz: float, line_frequency_hz: float | None = None):
        self.shaft_hz = shaft_hz
        self.guard_hz = EXPLAINED_LINES * df_hz
        self.twice_lf_hz = 2.0 * line_frequency_hz if line_frequency_hz else 0.0
        self.claims: list[tuple[str, np.ndarray]] = []

    def electrical(self, hz: float) -> bool:
        """True for a line on 2xLF or one of its harmonics (within max(2 lines, 0.5 %))."""
        if self.twice_lf_hz <= 0 or hz < 0.5 * self.twice_lf_hz:
            return False
        k = round(hz / self.twice_lf_hz)
        return abs(hz - k * self.twice_lf_hz) <= max(self.guard_hz, ELECTRICAL_TOLERANCE * hz)

    def counts(self, hz: float, owner: str | None = None) -> bool:
        """May the line at ``hz`` be evidence for defect ``owner`` ("BPFO:<bearing>")?"""
        if self.shaft_hz > 0 and abs(hz - self.shaft_hz * round(hz / self.shaft_hz)) <= self.guard_hz:
            return False
        if self.electrical(hz):
            return False
        return not any(key != owner and np.any(np.abs(lines - hz) <= self.guard_hz) for key, lines in self.claims)

    def allowed_for(self, owner: str) -> Allowed:
        return lambda hz: self.counts(hz, owner)

    def claim(self, c: Candidate, defects: tuple[DefectPlan, ...], top_hz: float) -> None:
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
        self.claims.append((c.key, np.asarray(lines, dtype=float).ravel()))


def _floor_half_width(f0: float, df: float) -> float:
    return max(FLOOR_HALF_WIDTH_FRACTION * f0, FLOOR_MIN_HALF_WIDTH_LINES * df)


def _series(reader: SesReader, d: DefectPlan, name: str, series: str, f0: float,
            modulation_hz: float | None, allowed: Allowed, fundamental_only: bool = False) -> Candidate | None:
    if not reader.covers(f0 * (1 + d.tolerance)):
        return None
    floor_hw = _floor_half_width(f0, reader.df)
    fund = reader.peak(f0 * (1 - d.tolerance), f0 * (1 + d.tolerance), floor_hw, allowed)
    if fund is None:
        return None
    if fundamental_only:
        return Candidate(name, d.bearing_id, series, f0, fund, (), ())
    f1 = fund.found_hz
    harmonics = []
    for h in range(2, d.harmonics + 1):
        if not reader.covers(h * f1 * (1 + HARMONIC_TOLERANCE)):
            break
        harmonics.append(reader.near(h * f1, HARMONIC_TOLERANCE * h * f1, floor_hw, allowed))
    sidebands = []
    if modulation_hz:
        for sign in (-1.0, 1.0):
            at = f1 + sign * modulation_hz
            if at > 2 * reader.df and reader.covers(at):
                sidebands.append(reader.near(at, HARMONIC_TOLERANCE * at, floor_hw, allowed))
    return Candidate(name, d.bearing_id, series, f0, fund, tuple(harmonics), tuple(sidebands))


def _defect_series(d: DefectPlan, shaft_hz: float, ftf_of: dict[str, float]) -> list[tuple[str, float, float | None]]:
    """(series name, expected Hz, modulating Hz) of one defect: BSF is searched at BSF and at 2 x BSF."""
    f0 = d.order * shaft_hz
    if d.name == "bsf":
        mod = ftf_of.get(d.bearing_id, 0.0) * shaft_hz
        return [("BSF", f0, mod), ("2xBSF", 2 * f0, mod)]
    return [(d.name.upper(), f0, shaft_hz if d.name in ("bpfo", "bpfi") else None)]


def candidates(ses: np.ndarray, df_hz: float, shaft_hz: float, defects: tuple[DefectPlan, ...],
               evidence: Evidence | None = None, skip: frozenset[str] | set[str] = frozenset(),
               only: frozenset[str] | set[str] | None = None, fundamental_only: bool = False) -> list[Candidate]:
    """Every defect series read from the SES (BSF as two series: BSF and 2xBSF), each among the lines
    that can be evidence for it; defects whose key is in ``skip`` are left out, and with ``only`` all
    but those."""
    reader = SesReader(ses, df_hz)
    evidence = evidence if evidence is not None else Evidence(shaft_hz, df_hz)
    out = []
    ftf_of = {d.bearing_id: d.order for d in defects if d.name == "ftf"}
    for d in defects:
        key = f"{d.name.upper()}:{d.bearing_id}"
        if key in skip or (only is not None and key not in only):
            continue
        allowed = evidence.allowed_for(key)
        for series, f0, mod in _defect_series(d, shaft_hz, ftf_of):
            c = _series(reader, d, d.name.upper(), series, f0, mod, allowed, fundamental_only)
            if c is not None:
                out.append(c)
    return out


@dataclass(frozen=True)
class Verdict:
    candidate: Candidate
    passes: bool
    prominence: float  # root-sum-square of the ratios of the fundamental and of the confirming harmonics
    harmonics_found: int
    sidebands_found: int


def judge(c: Candidate) -> Verdict:
    """Rule 6 on one candidate (its lines were already searched among those that can be evidence)."""
    fund = c.fundamental
    others = [x.ratio for x in c.harmonics + c.sidebands]
    confirmed = (any(r >= SUPPORT_ONE_RATIO for r in others)
                 or sum(r >= SUPPORT_TWO_RATIO for r in others) >= 2)
    ok = fund.ratio >= FUNDAMENTAL_RATIO and confirmed
    support_h = [x.ratio for x in c.harmonics if x.ratio >= SUPPORT_TWO_RATIO]
    support_s = [x for x in c.sidebands if x.ratio >= SUPPORT_TWO_RATIO]
    prominence = math.sqrt(fund.ratio**2 + sum(r**2 for r in support_h))
    return Verdict(c, ok, float(prominence), 1 + len(support_h), len(support_s))


def _severity(c: Candidate, envelope_psd: np.ndarray | None, df_hz: float) -> float:
    """RMS (m/s^2) of the candidate's lines in the envelope spectrum above the local floor (rule 7)."""
    if envelope_psd is None:
        return math.nan
    psd = np.asarray(envelope_psd, dtype=float)
    floor_hw = _floor_half_width(c.expected_hz, df_hz)
    power = 0.0
    for line in (c.fundamental, *c.harmonics, *c.sidebands):
        if line.peak <= 0:
            continue  # no line found in that window
        i = int(round(line.found_hz / df_hz))
        lo, hi = max(i - LINE_HALF_WIDTH_LINES, 1), min(i + LINE_HALF_WIDTH_LINES + 1, psd.size)
        if hi <= lo:
            continue
        p_line = float(psd[lo:hi].sum()) * df_hz
        p_floor = _median_around(psd, df_hz, line.found_hz, floor_hw) * (hi - lo) * df_hz
        power += max(p_line - p_floor, 0.0)
    return math.sqrt(power)


def _described(f: Finding, c: Candidate) -> Finding:
    """The finding with its evidence lines (peak / floor ratios in the squared-envelope spectrum), the rule
    and a sentence: the same evidence model as the shaft, drive, flow and electrical findings."""
    label = c.series if c.series != "2xBSF" else "2x BSF"
    lines = [EvidenceLine(label, c.expected_hz, c.fundamental.found_hz, c.fundamental.ratio, "ratio",
                          c.fundamental.ratio)]
    for h, x in enumerate(c.harmonics, start=2):
        lines.append(EvidenceLine(f"{h}x {label}", h * c.fundamental.found_hz, x.found_hz, x.ratio, "ratio", x.ratio))
    for x in c.sidebands:
        lines.append(EvidenceLine(f"{label} sideband", x.found_hz, x.found_hz, x.ratio, "ratio", x.ratio))
    words = {"BPFO": "outer race", "BPFI": "inner race", "BSF": "rolling element", "FTF": "cage"}[f.name]
    sentence = (f"Bearing {f.bearing}: {words} defect likely ({f.name}): its line at {f.measured_hz:.2f} Hz "
                f"(expected {f.expected_hz:.2f} Hz) stands {f.prominence_db:.0f} dB over the envelope floor, with "
                f"{f.harmonics_found - 1} harmonics and {f.sidebands_found} sidebands confirming it.")
    return replace(f, evidence=tuple(lines), sentence=sentence,
                   confidence="high" if f.harmonics_found >= 2 and f.sidebands_found >= 1 else "medium",
                   rule="envelope line 12 dB over its floor, confirmed by its harmonics or sidebands "
                        "(thresholds from measured null distributions; rotorwatch.analysis.findings)")


def decide(ses: np.ndarray, df_hz: float, shaft_hz: float, defects: tuple[DefectPlan, ...], *,
           evidence: Evidence | None = None, envelope_psd: np.ndarray | None = None) -> list[Finding]:
    """Apply the rule: strongest passing candidate first, re-reading the rest after each acceptance.

    ``evidence`` (updated in place with the accepted findings' claims) decides which lines count.
    """
    return _decide(ses, df_hz, shaft_hz, defects, evidence if evidence is not None else Evidence(shaft_hz, df_hz),
                   envelope_psd)[0]


def _decide(ses: np.ndarray, df_hz: float, shaft_hz: float, defects: tuple[DefectPlan, ...], evidence: Evidence,
            envelope_psd: np.ndarray | None) -> tuple[list[Finding], list[Candidate]]:
    """The findings, and the candidates of the defects that are not findings as read after the last
    claim (their prominences)."""
    top_hz = ses.size * df_hz
    settled: set[str] = set()
    findings: list[Finding] = []
    while True:
        cands = candidates(ses, df_hz, shaft_hz, defects, evidence, settled)
        verdicts = [judge(c) for c in cands]
        passing = [v for v in verdicts if v.passes]
        if not passing:
            return findings, cands
        best = max(passing, key=lambda v: v.prominence)
        # Defects of different bearings (or kinds) may claim the same line: the one whose kinematic
        # frequency the line matches most closely takes it (ties: the earlier, i.e. the point's bearing).
        f_best = best.candidate.fundamental.found_hz
        rivals = [v for v in passing if abs(v.candidate.fundamental.found_hz - f_best) <= evidence.guard_hz]
        best = min(rivals, key=lambda v: abs(v.candidate.fundamental.found_hz / v.candidate.expected_hz - 1.0))
        c = best.candidate
        findings.append(_described(Finding(
            name=c.name,
            bearing=c.bearing,
            expected_hz=float(c.expected_hz),
            measured_hz=float(c.fundamental.found_hz),
            prominence_db=ratio_db(best.prominence),
            harmonics_found=best.harmonics_found,
            series=c.series,
            sidebands_found=best.sidebands_found,
            severity_m_s2=_severity(c, envelope_psd, df_hz),
        ), c))
        settled.add(c.key)  # the other series of the same defect (BSF / 2xBSF) is settled too
        evidence.claim(c, defects, top_hz)


def assess(ses: np.ndarray, df_hz: float, shaft_hz: float, defects: tuple[DefectPlan, ...], *,
           envelope_psd: np.ndarray | None = None,
           line_frequency_hz: float | None = None) -> tuple[list[Finding], dict[str, float]]:
    """Findings of one update (empty when nothing stands out clearly) and the prominence of every
    defect's fundamental (peak / floor of the highest line in its window that can be evidence for it,
    the better BSF series), keyed ``"BPFO:<bearing>"``, whether it passed or not: a trendable measure of
    how close each defect is to a finding. ``envelope_psd`` (the PSD of the envelope on the SES's lines)
    gives the findings' severity; ``line_frequency_hz`` keeps 2xLF and its harmonics out of the evidence."""
    if shaft_hz <= 0 or not defects:
        return [], {}
    ses = np.asarray(ses, dtype=float)
    evidence = Evidence(shaft_hz, df_hz, line_frequency_hz)
    findings, rest = _decide(ses, df_hz, shaft_hz, defects, evidence, envelope_psd)
    # the findings' own fundamentals, read again after every claim (a later finding may claim them)
    found = {f"{f.name}:{f.bearing}" for f in findings}
    if found:
        rest = rest + candidates(ses, df_hz, shaft_hz, defects, evidence, only=found, fundamental_only=True)
    # 0.0: no line at all (no local maximum that can be evidence) within the defect's window
    prominence: dict[str, float] = {f"{d.name.upper()}:{d.bearing_id}": 0.0 for d in defects}
    for c in rest:
        prominence[c.key] = max(prominence.get(c.key, 0.0), float(c.fundamental.ratio))
    return findings, prominence


def find_defects(ses: np.ndarray, df_hz: float, shaft_hz: float, defects: tuple[DefectPlan, ...],
                 line_frequency_hz: float | None = None) -> list[Finding]:
    """Findings of one update (empty when nothing stands out clearly)."""
    return assess(ses, df_hz, shaft_hz, defects, line_frequency_hz=line_frequency_hz)[0]
