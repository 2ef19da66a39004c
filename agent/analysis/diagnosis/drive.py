"""Drive findings: belt (belt pass and its harmonics) and gear mesh (mesh, harmonics, sidebands).

Kinematics. A belt moves at the driver sheave's pitch speed, pi D_driver f_driver; a point of the belt
passes a given sheave once per belt length, so the belt pass frequency is pi D_driver f_driver / L (belt
pitch length L). Driven speed = driver speed x D_driver / D_driven. A gear pair meshes
z_driver x f_driver times a second (= z_driven x f_driven). Both are textbook kinematics (e.g. Scheffer &
Girdhar 2004, ch. 7 on belts and gears; common practice).
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

from ..result import Finding
from .base import Context, Shaft, confidence, finding, mm_s
from .lines import Line, rss

if TYPE_CHECKING:  # the settings models (pydantic) are not imported by the analysis itself
    from ...settings.models import Drive, Machine

BELT_HARMONICS = (1, 2, 3, 4)
BELT_MIN_LINES = 2  # two of belt pass x1..x4 stand out (common practice: 2x belt pass is often the highest)
MESH_HARMONICS = (1, 2, 3)
SIDEBAND_ORDERS = (-2, -1, 1, 2)
MESH_MIN_SIDEBANDS = 2  # two sidebands of one shaft around the mesh (common practice, from memory)
SIDEBAND_SHARE = 0.10  # ... each at least 10 % of the mesh line (our choice)
GUARD_LINES = 2  # a drive line within 2 lines of a shaft order is no evidence (it is that order)


def belt_pass_hz(drive: Drive, driver_hz: float) -> float:
    if drive.belt_pass_order is not None:
        return drive.belt_pass_order * driver_hz
    return math.pi * drive.driver_sheave_mm * driver_hz / drive.belt_length_mm  # type: ignore[operator]


def mesh_hz(drive: Drive, driver_hz: float) -> float:
    return drive.driver_teeth * driver_hz  # type: ignore[operator]


def shaft_speeds(machine: Machine, shaft_hz: float) -> tuple[float, ...]:
    """(shaft,) or (driver, driven) speeds in Hz when ``machine.speed`` reads ``shaft_hz``."""
    d = machine.drive
    if d is None:
        return (shaft_hz,)
    driver = shaft_hz if d.speed_of == "driver" else shaft_hz / d.ratio
    return (driver, driver * d.ratio)


def top_hz(machine: Machine, shaft_hz: float) -> float:
    """The highest frequency the drive findings read at shaft speed ``shaft_hz`` (0 without a drive)."""
    d = machine.drive
    if d is None:
        return 0.0
    driver = shaft_speeds(machine, shaft_hz)[0]
    if d.kind == "belt":
        return max(BELT_HARMONICS) * belt_pass_hz(d, driver)
    return max(MESH_HARMONICS) * mesh_hz(d, driver) + max(SIDEBAND_ORDERS) * max(driver, driver * d.ratio)


def _on_order(ctx: Context, hz: float, shafts: list[Shaft]) -> bool:
    guard = GUARD_LINES * ctx.lines.df
    return any(abs(hz - s.hz * round(hz / s.hz)) <= guard for s in shafts if s.hz > 0 and hz >= 0.5 * s.hz)


def belt(ctx: Context) -> Finding | None:
    """Belt (worn, loose or mismatched belts; Scheffer & Girdhar 2004 ch. 7, common practice): at least two
    of belt pass x1..x4 stand out, none of them on an order of either shaft, and together they reach the
    significance level. The sentence tells the driver's 1x from the driven shaft's 1x (a sheave's
    eccentricity shows at its own shaft's 1x, not at the belt pass). Confidence: high when three or more
    belt pass lines stand out, medium with two."""
    d = ctx.machine.drive
    if d is None or d.kind != "belt":
        return None
    shafts = ctx.shafts()
    driver, driven = shafts
    fb = belt_pass_hz(d, driver.hz)
    lines = [ctx.lines.line("belt pass" if h == 1 else f"{h}x belt pass", h * fb) for h in BELT_HARMONICS]
    counted = [x for x in lines if x.stands_out and not _on_order(ctx, x.found_hz, shafts)]
    if len(counted) < BELT_MIN_LINES or rss(counted) < ctx.significant_mm_s:
        return None
    one_driver = ctx.lines.line("driver 1x", driver.hz)
    one_driven = ctx.lines.line("driven 1x", driven.hz)
    higher = "driver (motor)" if one_driver.rms_mm_s >= one_driven.rms_mm_s else "driven"
    main = max(counted, key=lambda x: x.rms_mm_s)
    return finding(
        "belt", "drive", main, [*counted, one_driver, one_driven], conf=confidence(len(counted) - 1, 2),
        rule="belt pass harmonics stand out, off the shaft orders (Scheffer & Girdhar 2004; common practice)",
        sentence=(f"Belt fault likely (worn, loose or mismatched belts): belt pass {fb:.2f} Hz and its harmonics "
                  f"carry {mm_s(rss(counted))}, strongest {main.label} at {main.found_hz:.2f} Hz; 1x of the driver "
                  f"{mm_s(one_driver.rms_mm_s)} at {one_driver.found_hz:.2f} Hz, of the driven shaft "
                  f"{mm_s(one_driven.rms_mm_s)} at {one_driven.found_hz:.2f} Hz (the {higher} 1x is the higher)."),
    )


def _sidebands(ctx: Context, fm: float, shaft: Shaft, mesh: Line) -> list[Line]:
    out = []
    for k in SIDEBAND_ORDERS:
        x = ctx.lines.line(f"mesh {'+' if k > 0 else '-'} {abs(k)}x {shaft.role}", fm + k * shaft.hz,
                           tol_hz=max(GUARD_LINES * ctx.lines.df, 0.002 * fm))
        if x.stands_out and x.rms_mm_s >= SIDEBAND_SHARE * mesh.rms_mm_s:
            out.append(x)
    return out


def gear_mesh(ctx: Context) -> Finding | None:
    """Gear mesh (a worn, eccentric or damaged gear; ISO 13373-3 and Scheffer & Girdhar 2004 ch. 7, common
    practice): for a machine of kind ``gearbox`` with a gear drive, the mesh line stands out and at least
    two sidebands at mesh +/- 1x, 2x of one shaft stand out, each at least 10 % of the mesh line (a mesh line
    alone is a healthy gearbox's normal content); mesh, harmonics and those sidebands reach the significance
    level together. The shaft with more sidebands is named (the suspect gear rides on it). Confidence: high
    when 2x or 3x mesh also stands out, else medium."""
    d = ctx.machine.drive
    if ctx.machine.kind != "gearbox" or d is None or d.kind != "gear":
        return None
    shafts = ctx.shafts()
    fm = mesh_hz(d, shafts[0].hz)
    mesh = [ctx.lines.line("gear mesh" if h == 1 else f"{h}x mesh", h * fm) for h in MESH_HARMONICS]
    if not mesh[0].stands_out:
        return None
    per_shaft = {s.role: _sidebands(ctx, fm, s, mesh[0]) for s in shafts}
    role = max(per_shaft, key=lambda r: (len(per_shaft[r]), rss(per_shaft[r])))
    sidebands = per_shaft[role]
    lines = [*mesh, *sidebands]
    if len(sidebands) < MESH_MIN_SIDEBANDS or rss(lines) < ctx.significant_mm_s:
        return None
    shaft = next(s for s in shafts if s.role == role)
    harmonics = sum(x.stands_out for x in mesh[1:])
    return finding(
        "gear_mesh", "gear", mesh[0], lines, conf="high" if harmonics else "medium",
        rule="mesh line with 1x sidebands of one shaft (ISO 13373-3; Scheffer & Girdhar 2004; common practice)",
        sentence=(f"Gear fault likely on {shaft.words} ({shaft.hz:.2f} Hz): gear mesh {fm:.1f} Hz is "
                  f"{mm_s(mesh[0].rms_mm_s)} with {len(sidebands)} sidebands at its 1x spacing "
                  f"({mm_s(rss(sidebands))} together)."),
    )


def drive_findings(ctx: Context) -> list[Finding]:
    return [f for f in (belt(ctx), gear_mesh(ctx)) if f is not None]
