"""What every shaft, drive, flow, electrical and gear rule shares: the window it reads (:class:`Context`) and
how a finding is written (:func:`finding`).

A finding is *significant* only when the lines it rests on carry, together (root-sum-square of their RMS
velocity), at least the zone A/B boundary of the machine's ISO 20816-3 group and support (group 2 rigid:
1.4 mm/s, from memory): below it the machine as a whole would still read as newly commissioned, and a named
fault would send someone out for nothing (our choice; a pattern below it is reported by the bands, not
named). Each rule's module says where its pattern comes from.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import TYPE_CHECKING

from ..result import Finding
from ..severity import boundaries
from .lines import Line, VelocityLines, rss

if TYPE_CHECKING:  # the settings models (pydantic) are not imported by the analysis itself
    from ...settings.models import Machine, Point


@dataclass(frozen=True)
class Shaft:
    """A shaft of the machine: ``role`` is ``shaft`` (one shaft), ``driver`` (the motor) or ``driven``."""

    role: str
    hz: float

    @property
    def words(self) -> str:
        return {"shaft": "the shaft", "driver": "the driver (motor) shaft", "driven": "the driven shaft"}[self.role]


@dataclass(frozen=True)
class Context:
    """One point's window as the rules read it."""

    machine: Machine
    point: Point
    lines: VelocityLines
    shaft_hz: float  # the speed used, of the shaft ``machine.speed`` measures
    rpm_source: str
    overall_mm_s: float
    # the two halves of the window, read the same way (for the rules that ask whether a line is steady);
    # computed on demand, holding the lines ``line(label, hz)`` reads for hz up to the argument (Hz)
    halves: Callable[[float], tuple[VelocityLines, VelocityLines] | None] | None = None

    @property
    def significant_mm_s(self) -> float:
        return boundaries(self.machine.iso_group, self.machine.support)[0]

    @property
    def radial(self) -> bool:
        return self.point.sensor.direction != "axial"

    @property
    def measured_speed(self) -> bool:
        """True when the speed was measured this window (estimated, tach, a drive's reading)."""
        return self.rpm_source in ("estimated", "tach", "mqtt")

    def shafts(self) -> list[Shaft]:
        """The machine's shafts with their speeds: one, or the driver and driven shafts of a drive."""
        from .drive import shaft_speeds  # noqa: PLC0415 (drive imports this module)

        speeds = shaft_speeds(self.machine, self.shaft_hz)
        if len(speeds) == 1:
            return [Shaft("shaft", speeds[0])]
        return [Shaft("driver", speeds[0]), Shaft("driven", speeds[1])]


def explained(ctx: Context, hz: float, guard_lines: float = 2.0) -> bool:
    """True when ``hz`` lies within ``guard_lines`` lines of a whole order of either shaft or of a belt pass
    harmonic: such a line belongs to that source and is no evidence for another."""
    guard = guard_lines * ctx.lines.df
    for s in ctx.shafts():
        if s.hz > 0 and hz >= 0.5 * s.hz and abs(hz - s.hz * round(hz / s.hz)) <= guard:
            return True
    d = ctx.machine.drive
    if d is not None and d.kind == "belt":
        from .drive import belt_pass_hz  # noqa: PLC0415 (drive imports this module)

        fb = belt_pass_hz(d, ctx.shafts()[0].hz)
        return any(abs(hz - h * fb) <= guard for h in range(1, 5))
    return False


def confidence(signs: int, of: int) -> str:
    """``high`` when every corroborating sign was seen, ``medium`` for at least half, else ``low``."""
    if of <= 0 or signs >= of:
        return "high"
    return "medium" if 2 * signs >= of else "low"


def finding(name: str, kind: str, main: Line, lines: list[Line], *, conf: str, rule: str, sentence: str,
            extra: tuple = ()) -> Finding:
    """A finding resting on ``lines`` (``main`` first among them), its severity their root-sum-square."""
    return Finding(
        name=name,
        bearing="",
        expected_hz=float(main.expected_hz),
        measured_hz=float(main.found_hz),
        prominence_db=20.0 * math.log10(main.ratio) if main.ratio > 0 else -math.inf,
        harmonics_found=sum(1 for x in lines if x.stands_out),
        series=name,
        kind=kind,
        severity_mm_s=rss(lines),
        evidence=tuple(x.evidence() for x in lines) + tuple(extra),
        confidence=conf,
        rule=rule,
        sentence=sentence,
    )


def mm_s(x: float) -> str:
    return f"{x:.2f} mm/s"
