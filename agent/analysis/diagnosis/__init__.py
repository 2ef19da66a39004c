"""Shaft, drive, flow, electrical and gear findings: what the velocity spectrum says is wrong, with its
evidence (the same :class:`~rotorwatch.analysis.result.Finding` record as the bearing findings).

One module per family, each rule citing its source in its docstring:

- :mod:`.shaft` -- unbalance, misalignment, mechanical looseness;
- :mod:`.drive` -- belt (belt pass), gear mesh (sidebands of either shaft);
- :mod:`.flow` -- blade pass, broadband sub-synchronous flow content;
- :mod:`.electrical` -- 2xLF, pole-pass sidebands.

:func:`diagnose` runs them on one point's window (the point analysis calls it, so the daemon, replay and
``analyze`` get the same findings); :func:`across_points` is the machine-level step the pipeline runs
after every point was analysed (misalignment against the axial points' content).
"""

from __future__ import annotations

import dataclasses
from typing import TYPE_CHECKING

from ..result import EvidenceLine, Finding, PointResult
from . import drive
from .base import Context
from .drive import drive_findings
from .electrical import electrical_findings
from .flow import BLADE_HARMONICS, flow_findings
from .lines import VelocityLines
from .shaft import SERIES_ORDERS, orders, shaft_findings

if TYPE_CHECKING:  # the settings models (pydantic) are not imported by the analysis itself
    from ...settings.models import Machine

__all__ = ["Context", "VelocityLines", "across_points", "diagnose", "top_hz"]

AXIAL_SHARE = 0.5  # misalignment: axial content at least half of the radial (common practice, from memory)


def top_hz(machine: Machine, shaft_hz: float) -> float:
    """The highest frequency the rules read at shaft speed ``shaft_hz`` (the narrow-band spectrum must hold it)."""
    top = (max(SERIES_ORDERS) + 0.5) * shaft_hz
    rotor_hz = drive.shaft_speeds(machine, shaft_hz)[-1]
    top = max(top, (max(SERIES_ORDERS) + 0.5) * rotor_hz)
    if machine.blades:
        top = max(top, (max(BLADE_HARMONICS) + 0.2) * machine.blades * rotor_hz)
    if machine.line_frequency_hz:
        top = max(top, 4.1 * machine.line_frequency_hz)
    return max(top, drive.top_hz(machine, shaft_hz) * 1.02)


def diagnose(ctx: Context) -> tuple[list[Finding], dict[str, float]]:
    """The findings of one point's window, strongest (highest severity) first, and the RMS velocity (mm/s)
    of 1x, 2x and 3x of each shaft (keys ``1x`` or ``driver 1x`` ...), for the machine-level step."""
    found = shaft_findings(ctx) + drive_findings(ctx) + flow_findings(ctx) + electrical_findings(ctx)
    found.sort(key=lambda f: -f.severity_mm_s)
    shaft_orders = {x.label: x.rms_mm_s for s in ctx.shafts() for x in orders(ctx.lines, s, (1, 2, 3))}
    return found, shaft_orders


def _axial_check(f: Finding, radial: dict[str, float], axial: dict[str, float]) -> Finding | None:
    prefix = f.evidence[0].label[: -len("2x")] if f.evidence else ""
    r = max(radial.get(f"{prefix}1x", 0.0), radial.get(f"{prefix}2x", 0.0))
    a = max(axial.get(f"{prefix}1x", 0.0), axial.get(f"{prefix}2x", 0.0))
    if r <= 0 or a < AXIAL_SHARE * r:
        return None
    line = EvidenceLine("axial 1x/2x over radial", f.expected_hz, f.measured_hz, a / r, "ratio")
    return dataclasses.replace(
        f, evidence=f.evidence + (line,), confidence="high",
        sentence=f.sentence + f" Axial 1x/2x reaches {100 * a / r:.0f} % of the radial, as misalignment gives.")


def across_points(machine: Machine, results: dict[str, PointResult | None]) -> dict[str, PointResult | None]:
    """Misalignment across points (Scheffer & Girdhar 2004, common practice from memory: axial vibration
    above half the radial at 1x or 2x points to misalignment, a radial-only 2x less so): when the machine has
    points in both directions, a misalignment finding on a radial point stays only when the axial points'
    strongest 1x or 2x reaches half of that point's; it then gains the axial evidence and high confidence."""
    axial_ids = [p.id for p in machine.points if p.sensor.direction == "axial" and results.get(p.id) is not None]
    if not axial_ids or len(axial_ids) == len(machine.points):
        return results
    axial: dict[str, float] = {}
    for pid in axial_ids:
        for k, v in results[pid].shaft_orders_mm_s.items():  # type: ignore[union-attr]
            axial[k] = max(axial.get(k, 0.0), v)
    out = dict(results)
    for pid, r in results.items():
        if r is None or pid in axial_ids or not any(f.name == "misalignment" for f in r.findings):
            continue
        kept = []
        for f in r.findings:
            if f.name == "misalignment":
                checked = _axial_check(f, r.shaft_orders_mm_s, axial)
                if checked is not None:
                    kept.append(checked)
            else:
                kept.append(f)
        out[pid] = dataclasses.replace(r, findings=kept)
    return out
