"""Flow findings: blade (vane) pass, and broadband sub-synchronous content of stall or recirculation.

The rotor with the blades is the driven shaft of a belt or gear drive, else the machine's shaft. A rise of
blade pass against the healthy machine is what the ``blade_pass`` band's relative levels alarm on (a
learned baseline); the finding names the pattern in the window: blade pass standing out over the shaft's
own 1x.
"""

from __future__ import annotations

from ..result import EvidenceLine, Finding
from .base import Context, Shaft, confidence, finding, mm_s
from .lines import Line, rss

BLADE_HARMONICS = (1, 2, 3)
SUB_LOW, SUB_HIGH = 0.1, 0.9  # sub-synchronous band, orders of the rotor (common practice, from memory)
SUB_SHARE_OF_1X = 0.5  # its RMS at least half of 1x (our choice)
BROADBAND_MAX_LINE_SHARE = 0.35  # no single line holds more than 35 % of the band's power (our choice)


def rotor(ctx: Context) -> Shaft:
    shafts = ctx.shafts()
    return shafts[-1]  # the driven shaft when there is a drive


def blade_pass(ctx: Context) -> Finding | None:
    """Blade or vane pass (ISO 13373-3; Scheffer & Girdhar 2004 ch. 7, common practice: a blade pass that
    rises over the rotor's 1x points to flow disturbance, a damaged or loose blade, a rub or a too small gap
    at the cutwater): blade pass stands out, exceeds the rotor's 1x, and blade pass with its 2nd and 3rd
    harmonics reaches the significance level. Confidence: high when a harmonic stands out too."""
    blades = ctx.machine.blades
    if not blades:
        return None
    shaft = rotor(ctx)
    lines = [ctx.lines.line("blade pass" if h == 1 else f"{h}x blade pass", h * blades * shaft.hz) for h in BLADE_HARMONICS]
    one = ctx.lines.line("1x", shaft.hz)
    bp = lines[0]
    if not bp.stands_out or bp.rms_mm_s <= one.rms_mm_s or rss(lines) < ctx.significant_mm_s:
        return None
    return finding(
        "blade_pass", "flow", bp, [*lines, one], conf=confidence(sum(x.stands_out for x in lines[1:]), 1),
        rule="blade pass above the rotor's 1x (ISO 13373-3; Scheffer & Girdhar 2004; common practice)",
        sentence=(f"Blade pass {bp.found_hz:.1f} Hz ({blades} x {shaft.hz:.2f} Hz) is {mm_s(bp.rms_mm_s)}, above "
                  f"the rotor's 1x ({mm_s(one.rms_mm_s)}): flow disturbance, a damaged or loose blade, or a small gap "
                  "at the cutwater."),
    )


def flow(ctx: Context) -> Finding | None:
    """Flow (rotating stall, recirculation, surge; Bloch & Budris, *Pump User's Handbook*, and Scheffer &
    Girdhar 2004, common practice from memory: random, broadband vibration below the running speed):
    the velocity between 0.1x and 0.9x of the rotor (the 0.5x line and belt pass lines left out, they are
    looseness and belt) reaches the significance level and at least half of the rotor's 1x, and it is
    broadband: no line holds more than 35 % of the band's power. Confidence: medium (a flow finding names
    a pattern; the cause needs the operating point, which rotorwatch does not know)."""
    shaft = rotor(ctx)
    leave = [0.5 * shaft.hz]
    d = ctx.machine.drive
    if d is not None and d.kind == "belt":
        from .drive import belt_pass_hz  # noqa: PLC0415

        fb = belt_pass_hz(d, ctx.shafts()[0].hz)
        leave += [h * fb for h in (1, 2, 3, 4)]
    power, peak_share = ctx.lines.band_power(SUB_LOW * shaft.hz, SUB_HIGH * shaft.hz, tuple(leave))
    rms = power ** 0.5
    one = ctx.lines.line("1x", shaft.hz)
    if rms < ctx.significant_mm_s or rms < SUB_SHARE_OF_1X * one.rms_mm_s or peak_share > BROADBAND_MAX_LINE_SHARE:
        return None
    band = Line(f"{SUB_LOW:g}x-{SUB_HIGH:g}x broadband", 0.5 * shaft.hz, 0.5 * shaft.hz, rms, float("nan"))
    extra = (EvidenceLine("strongest line's share of the band", 0.5 * shaft.hz, 0.5 * shaft.hz, peak_share, "ratio"),)
    return finding(
        "flow", "flow", band, [band, one], conf="medium", extra=extra,
        rule="broadband sub-synchronous velocity, 0.1x-0.9x (Bloch & Budris; Scheffer & Girdhar 2004; common practice)",
        sentence=(f"Flow-related vibration likely (stall, recirculation or surge): {mm_s(rms)} of broadband content "
                  f"between {SUB_LOW * shaft.hz:.1f} and {SUB_HIGH * shaft.hz:.1f} Hz, below the rotor's 1x "
                  f"({mm_s(one.rms_mm_s)}); check the operating point."),
    )


def flow_findings(ctx: Context) -> list[Finding]:
    return [f for f in (blade_pass(ctx), flow(ctx)) if f is not None]
