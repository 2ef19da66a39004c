"""Shaft findings from the velocity spectrum: unbalance, misalignment, mechanical looseness.

The patterns are the trade's classic ones, as tabulated in ISO 13373-3:2015 (vibration condition
monitoring, guidelines for vibration diagnosis) and in Scheffer & Girdhar, *Practical Machinery Vibration
Analysis and Predictive Maintenance* (2004), ch. 6-7; the numeric thresholds below are common practice as
remembered from those texts (from memory) or our own choice, and each says which. On a machine with a belt
or gear drive each shaft's orders are read, and the finding names the shaft.
"""

from __future__ import annotations

from ..result import EvidenceLine, Finding
from .base import Context, Shaft, confidence, finding, mm_s
from .lines import Line, VelocityLines, rss

LOW_HARMONIC_SHARE = 0.5  # unbalance: 2x and 3x each at most half of 1x (common practice, from memory)
DOMINANT_POWER_SHARE = 0.5  # unbalance: 1x holds at least half of the overall velocity's power (our choice)
STEADY_CHANGE = 0.25  # unbalance: 1x differs by at most 25 % between the window's halves (our choice)
STEADY_HIGH_CONFIDENCE = 0.10  # within 10 %: a steady 1x, as unbalance gives (common practice)
MISALIGN_2X_SHARE = 0.5  # misalignment: 2x at least half of 1x (common practice, from memory)
LOOSE_SERIES = 5  # looseness: at least five of 2x..10x stand out (common practice: "many harmonics")
LOOSE_HALF_ORDERS = 2  # ... or at least two of 0.5x, 1.5x, 2.5x, 3.5x (common practice)
LOOSE_MIN_SHARE = 0.05  # a harmonic counts when it also reaches 5 % of the point's A/B boundary (our choice)
SERIES_ORDERS = tuple(range(2, 11))
HALF_ORDERS = (0.5, 1.5, 2.5, 3.5)


def orders(v: VelocityLines, shaft: Shaft, ks) -> list[Line]:
    prefix = "" if shaft.role == "shaft" else f"{shaft.role} "
    return [v.line(f"{prefix}{k:g}x", k * shaft.hz) for k in ks]


def _steady(ctx: Context, shaft: Shaft) -> float | None:
    """Relative change of 1x between the window's halves, or None when not known."""
    halves = ctx.halves(shaft.hz) if ctx.halves is not None else None
    if halves is None:
        return None
    a, b = (h.line("1x", shaft.hz).rms_mm_s for h in halves)
    return abs(a - b) / max(a, b) if max(a, b) > 0 else None


def unbalance(ctx: Context, shaft: Shaft) -> Finding | None:
    """Unbalance (ISO 13373-3, Scheffer & Girdhar 2004 ch. 6; thresholds from memory or ours): on a radial
    point, 1x stands out, reaches the significance level (module :mod:`.base`), holds at least half of the
    overall velocity's power, 2x and 3x are each at most half of 1x (low harmonics), and 1x is steady: it
    differs by at most 25 % between the window's two halves. Confidence: high when 1x is steady within
    10 % and the speed was measured, medium when one of the two, else low."""
    if not ctx.radial:
        return None
    one, two, three = orders(ctx.lines, shaft, (1, 2, 3))
    if not one.stands_out or one.rms_mm_s < ctx.significant_mm_s:
        return None
    if two.rms_mm_s > LOW_HARMONIC_SHARE * one.rms_mm_s or three.rms_mm_s > LOW_HARMONIC_SHARE * one.rms_mm_s:
        return None
    if one.rms_mm_s ** 2 < DOMINANT_POWER_SHARE * ctx.overall_mm_s ** 2:
        return None
    change = _steady(ctx, shaft)
    if change is not None and change > STEADY_CHANGE:
        return None
    signs = int(change is not None and change <= STEADY_HIGH_CONFIDENCE) + int(ctx.measured_speed)
    steady = "" if change is None else f", steady within {100 * change:.0f} % over the window"
    extra = () if change is None else (EvidenceLine("1x change between halves", shaft.hz, shaft.hz, change, "ratio"),)
    return finding(
        "unbalance", "shaft", one, [one, two, three], conf=confidence(signs, 2), extra=extra,
        rule="1x radial dominant, 2x and 3x at most half of it, 1x steady (ISO 13373-3; Scheffer & Girdhar 2004)",
        sentence=(f"Unbalance of {shaft.words} likely: 1x at {one.found_hz:.2f} Hz is {mm_s(one.rms_mm_s)}, "
                  f"{100 * one.rms_mm_s ** 2 / max(ctx.overall_mm_s ** 2, 1e-12):.0f} % of the overall velocity's power, "
                  f"with low harmonics (2x {mm_s(two.rms_mm_s)}){steady}."),
    )


def misalignment(ctx: Context, shaft: Shaft) -> Finding | None:
    """Misalignment (ISO 13373-3; Scheffer & Girdhar 2004 ch. 6): 2x stands out and reaches at least half of
    1x (common practice, from memory), the lines 1x..3x together reach the significance level, and the
    series stops early (fewer than five of 2x..10x stand out: a longer series is looseness). Corroborating
    signs for the confidence: 3x stands out; 2x above 1x. With axial and radial points on the machine the
    pipeline checks the axial content across points (:func:`rotorwatch.analysis.diagnosis.across_points`)."""
    lines = orders(ctx.lines, shaft, (1, 2, 3))
    one, two, three = lines
    if not two.stands_out or two.rms_mm_s < MISALIGN_2X_SHARE * one.rms_mm_s:
        return None
    if rss(lines) < ctx.significant_mm_s or _series_count(ctx, shaft) >= LOOSE_SERIES:
        return None
    signs = int(three.stands_out) + int(two.rms_mm_s > one.rms_mm_s)
    where = "axial" if not ctx.radial else "radial"
    return finding(
        "misalignment", "shaft", two, [two, one, three], conf=confidence(signs, 2),
        rule="2x at least half of 1x, harmonics to 3x, axial against radial when both are measured "
             "(ISO 13373-3; Scheffer & Girdhar 2004)",
        sentence=(f"Misalignment at {shaft.words} likely: 2x at {two.found_hz:.2f} Hz is {mm_s(two.rms_mm_s)} "
                  f"({100 * two.rms_mm_s / max(one.rms_mm_s, 1e-12):.0f} % of 1x) on this {where} point"
                  f"{', with 3x ' + mm_s(three.rms_mm_s) if three.stands_out else ''}."),
    )


def _counted(ctx: Context, x: Line) -> bool:
    return x.stands_out and x.rms_mm_s >= LOOSE_MIN_SHARE * ctx.significant_mm_s


def _series_count(ctx: Context, shaft: Shaft) -> int:
    return sum(_counted(ctx, x) for x in _series(ctx, shaft))


def _series(ctx: Context, shaft: Shaft) -> list[Line]:
    blades = ctx.machine.blades or 0
    ks = [k for k in SERIES_ORDERS if not (blades and k % blades == 0)]  # blade pass is a flow line
    return orders(ctx.lines, shaft, ks)


def looseness(ctx: Context, shaft: Shaft) -> Finding | None:
    """Mechanical looseness (ISO 13373-3; Scheffer & Girdhar 2004 ch. 6: "many harmonics of 1x, often half
    orders, a raised floor"): at least five of 2x..10x stand out (each also reaching 5 % of the A/B
    boundary; orders that are blade pass are left out), or at least two of the half orders 0.5x, 1.5x, 2.5x,
    3.5x do; and 1x with the lines that stand out reaches the significance level. Counts from common
    practice (from memory). Confidence: high with both a long series and half orders."""
    one = orders(ctx.lines, shaft, (1,))[0]
    series = [x for x in _series(ctx, shaft) if _counted(ctx, x)]
    halves = [x for x in orders(ctx.lines, shaft, HALF_ORDERS) if _counted(ctx, x)]
    long_series, half = len(series) >= LOOSE_SERIES, len(halves) >= LOOSE_HALF_ORDERS
    if not (long_series or half):
        return None
    lines = [one, *series, *halves]
    if rss(lines) < ctx.significant_mm_s:
        return None
    main = max(series + halves, key=lambda x: x.rms_mm_s)
    parts = []
    if series:
        parts.append(f"{len(series)} harmonics of 1x up to {max(x.expected_hz for x in series) / shaft.hz:.0f}x")
    if halves:
        parts.append("half orders " + ", ".join(x.label for x in halves))
    return finding(
        "looseness", "shaft", main, lines, conf=confidence(int(long_series) + int(half), 2),
        rule="a long series of 1x harmonics and/or half orders (ISO 13373-3; Scheffer & Girdhar 2004)",
        sentence=(f"Mechanical looseness at {shaft.words} likely: {' and '.join(parts)} stand out, "
                  f"{mm_s(rss(lines))} together."),
    )


def shaft_findings(ctx: Context) -> list[Finding]:
    out: list[Finding] = []
    for shaft in ctx.shafts():
        loose = looseness(ctx, shaft)
        found = [loose] if loose is not None else [unbalance(ctx, shaft), misalignment(ctx, shaft)]
        out += [f for f in found if f is not None]
    return out
