"""Electrical findings of a direct-on-line induction motor: 2xLF, and pole-pass sidebands around 1x.

2xLF: the magnetic pull between stator and rotor pulses at twice the line frequency; a strong 2xLF line
points to stator eccentricity or an uneven air gap, shorted laminations or a soft foot (ISO 13373-3;
Scheffer & Girdhar 2004 ch. 8; common practice). Pole pass: the slip frequency f_s = f_sync - f_rotor with
f_sync = 2 LF / poles, and the pole-pass frequency f_p = poles x f_s; broken or cracked rotor bars show as
sidebands at 1x +/- f_p (same sources; from memory). The motor is the driver shaft of a drive.
"""

from __future__ import annotations

from ..result import Finding
from .base import Context, confidence, explained, finding, mm_s

LINE_TOLERANCE = 0.002  # the mains' wander, +/- 0.2 % (as in narrowband.py, from memory)
ORDER_GUARD_LINES = 3  # a 2xLF line within 3 lines of a shaft order cannot be told from it
POLE_PASS_MIN_LINES = 5  # the sidebands sit at least 5 lines from 1x: the main lobes (+/- 2 lines) apart
SIDEBAND_SHARE = 0.10  # a pole-pass sideband counts from 10 % of 1x (-20 dB; our choice)


def twice_line(ctx: Context) -> Finding | None:
    """2xLF (see the module doc): with the machine's ``line_frequency_hz``, the line at 2 x LF stands out,
    reaches the significance level, and is clear of every shaft order by 3 lines (a 2-pole motor's 2x
    lies within its slip of 2xLF: when the two cannot be told apart nothing is named). Confidence: high when
    4xLF stands out too, else medium."""
    lf = ctx.machine.line_frequency_hz
    if lf is None:
        return None
    v = ctx.lines
    f2 = 2.0 * lf
    tol = max(2 * v.df, LINE_TOLERANCE * f2)
    main = v.line("2xLF", f2, tol_hz=tol, electrical=True)
    if not main.stands_out or main.rms_mm_s < ctx.significant_mm_s:
        return None
    for s in ctx.shafts():
        if s.hz > 0 and abs(main.found_hz - s.hz * round(main.found_hz / s.hz)) <= ORDER_GUARD_LINES * v.df:
            return None
    second = v.line("4xLF", 2 * f2, tol_hz=2 * tol, electrical=True)
    return finding(
        "2xLF", "electrical", main, [main, second], conf=confidence(int(second.stands_out), 1),
        rule="2xLF stands out, clear of the shaft orders (ISO 13373-3; Scheffer & Girdhar 2004; common practice)",
        sentence=(f"Electrical: 2xLF at {main.found_hz:.2f} Hz is {mm_s(main.rms_mm_s)}: stator eccentricity, an "
                  "uneven air gap, shorted laminations or a soft foot under the motor (it vanishes the instant the "
                  "power is cut)."),
    )


def pole_pass(ctx: Context) -> Finding | None:
    """Pole-pass sidebands (see the module doc): with ``line_frequency_hz`` and ``motor_poles``, a motor
    running below its synchronous speed, and f_p at least 5 lines (1.25 Hz in a 4 s window): 1x of the motor stands out and at least
    one sideband at 1x +/- f_p stands out, reaches 10 % of 1x and is not a line of another source (an order of
    either shaft, a belt pass harmonic). Confidence: high with both sidebands and a
    measured speed (with a fixed speed the slip is the configured one), medium with one of the two."""
    m = ctx.machine
    if m.line_frequency_hz is None or m.motor_poles is None:
        return None
    motor = ctx.shafts()[0]
    sync = 2.0 * m.line_frequency_hz / m.motor_poles
    slip_hz = sync - motor.hz
    f_p = m.motor_poles * slip_hz
    v = ctx.lines
    if slip_hz <= 0 or f_p < POLE_PASS_MIN_LINES * v.df:
        return None
    one = v.line("1x", motor.hz)
    if not one.stands_out:
        return None
    tol = max(2 * v.df, 0.1 * f_p)
    sides = [v.line(f"1x {sign} pole pass", motor.hz + (1 if sign == "+" else -1) * f_p, tol_hz=min(tol, 0.45 * f_p))
             for sign in ("-", "+")]
    counted = [x for x in sides if x.stands_out and x.rms_mm_s >= SIDEBAND_SHARE * one.rms_mm_s
               and not explained(ctx, x.found_hz)]
    if not counted:
        return None
    signs = int(len(counted) == 2) + int(ctx.measured_speed)
    return finding(
        "pole_pass", "electrical", counted[0], [*counted, one], conf=confidence(signs, 2),
        rule="pole-pass sidebands around the motor's 1x (ISO 13373-3; Scheffer & Girdhar 2004; from memory)",
        sentence=(f"Electrical: sidebands at the pole-pass frequency {f_p:.2f} Hz (slip {100 * slip_hz / sync:.1f} %, "
                  f"{m.motor_poles} poles) around the motor's 1x ({mm_s(one.rms_mm_s)}): broken or cracked rotor "
                  "bars, or a rotor's uneven air gap."),
    )


def electrical_findings(ctx: Context) -> list[Finding]:
    return [f for f in (twice_line(ctx), pole_pass(ctx)) if f is not None]
