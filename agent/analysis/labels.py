"""Names for spectral lines, written the way an analyst writes them; the one place those names are made.

A harmonic of a named frequency is ``"3x BPFO"``, a sideband is the line it sits beside plus or minus the
modulating frequency: ``"BPFI - 2x"`` (two shaft orders below BPFI), ``"2x BPFI + 1x"``, ``"BSF - FTF"``,
``"2x BSF + 2x FTF"``. Shaft orders are ``"1x"``, ``"2x"``...; blade pass is ``"blade pass"``,
``"2x blade pass"``; the electrical line at twice the supply frequency is ``"2xLF"`` and its harmonics
``"4xLF"``, ``"6xLF"``... The bearing a line belongs to travels beside the label (:attr:`Line.bearing`),
not inside it. The status page, the snapshot plots, ``rotorwatch analyze`` (text and JSON) all take
their names from here.

:func:`kinematic_lines` lists the candidate lines of a machine at a shaft frequency, to annotate the
strongest peaks of an envelope or velocity spectrum for a person reading a report (the decision rule
itself is in :mod:`rotorwatch.analysis.findings`): the shaft orders 1x..10x, blade pass and its second
harmonic, 2xLF and its harmonics when the machine's ``line_frequency_hz`` is known, and for every bearing
the defect rates BPFO, BPFI (harmonics up to 4, +/- 1x and 2x sidebands), BSF (harmonics up to 8, which
covers 2 x BSF, the rate of a spalled element, and its harmonics; +/- FTF and 2x FTF sidebands) and FTF
(harmonics up to 4). A peak takes the nearest candidate within the tolerance (default 1.5 % of the
frequency, at least two lines of the spectrum); otherwise it is left unnamed.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from .. import kinematics

if TYPE_CHECKING:  # the settings models (pydantic) are not imported by the analysis itself
    from ..settings.models import Machine

DEFECT_HARMONICS = {"BPFO": 4, "BPFI": 4, "BSF": 8, "FTF": 4}


@dataclass(frozen=True)
class Line:
    hz: float
    label: str  # "BPFI - 2x", "2x BSF", "3x BPFO", "BSF - FTF", "1x", "2xLF"
    bearing: str | None = None  # the bearing of a defect line
    kind: str = "mechanical"  # mechanical | electrical

    def text(self, with_bearing: bool = False) -> str:
        """The label, with the bearing when asked (``"BPFO, bearing fan-de"``) and ``(electrical)`` for 2xLF lines."""
        out = self.label
        if with_bearing and self.bearing:
            out += f", bearing {self.bearing}"
        if self.kind == "electrical":
            out += " (electrical)"
        return out


def harmonic(k: int, name: str) -> str:
    """The ``k``-th harmonic of a named frequency: ``"BPFO"``, ``"2x BPFO"``; shaft orders are ``"kx"``."""
    if name == "1x":
        return f"{k}x"
    return name if k == 1 else f"{k}x {name}"


def sideband(base: str, k: int, modulation: str) -> str:
    """``base`` with the ``k``-th sideband of ``modulation`` (``"1x"`` shaft or ``"FTF"``); ``k`` signed."""
    step = harmonic(abs(k), modulation)
    return f"{base} {'+' if k > 0 else '-'} {step}"


def twice_line_frequency(k: int) -> str:
    """The ``k``-th harmonic of 2xLF: ``"2xLF"``, ``"4xLF"``..."""
    return f"{2 * k}xLF"


def kinematic_lines(machine: Machine, shaft_hz: float, top_hz: float, bearing_ids: list[str] | None = None) -> list[Line]:
    """Candidate lines up to ``top_hz``; ``bearing_ids`` limits the bearings (default: all)."""
    lines = [Line(k * shaft_hz, harmonic(k, "1x")) for k in range(1, 11)]
    if machine.blades:
        lines.append(Line(machine.blades * shaft_hz, "blade pass"))
        lines.append(Line(2 * machine.blades * shaft_hz, harmonic(2, "blade pass")))
    lf = machine.line_frequency_hz
    if lf:
        lines.extend(Line(2 * k * lf, twice_line_frequency(k), kind="electrical")
                     for k in range(1, int(top_hz / (2 * lf)) + 1))
    for b in machine.bearings:
        if bearing_ids is not None and b.id not in bearing_ids:
            continue
        m = kinematics.bearing_multiples(b)
        cage = m.ftf * shaft_hz
        series = (("BPFO", m.bpfo, shaft_hz, "1x"), ("BPFI", m.bpfi, shaft_hz, "1x"),
                  ("BSF", m.bsf, cage, "FTF"), ("FTF", m.ftf, 0.0, ""))
        for name, order, mod_hz, mod_name in series:
            for h in range(1, DEFECT_HARMONICS[name] + 1):
                centre = h * order * shaft_hz
                base = harmonic(h, name)
                lines.append(Line(centre, base, b.id))
                if mod_hz > 0:
                    for k in (-2, -1, 1, 2):
                        lines.append(Line(centre + k * mod_hz, sideband(base, k, mod_name), b.id))
    return [ln for ln in lines if 0 < ln.hz <= top_hz]


def match_line(hz: float, lines: list[Line], df_hz: float, tolerance: float = 0.015) -> Line | None:
    """The candidate nearest to ``hz`` within the tolerance, or None."""
    if not lines:
        return None
    freqs = np.array([ln.hz for ln in lines])
    i = int(np.argmin(np.abs(freqs - hz)))
    if abs(freqs[i] - hz) <= max(tolerance * hz, 2 * df_hz):
        return lines[i]
    return None


def name_line(hz: float, lines: list[Line], df_hz: float, tolerance: float = 0.015) -> str | None:
    """Label of the candidate nearest to ``hz`` within the tolerance (with its bearing when the lines
    hold several bearings), or None."""
    line = match_line(hz, lines, df_hz, tolerance)
    if line is None:
        return None
    several = len({ln.bearing for ln in lines if ln.bearing}) > 1
    return line.text(with_bearing=several)


def strongest_peaks(freqs_hz: np.ndarray, amplitude: np.ndarray, count: int = 8, min_hz: float = 0.0,
                    min_spacing_hz: float = 1.5) -> list[tuple[float, float]]:
    """The ``count`` highest local maxima above ``min_hz``, at least ``min_spacing_hz`` apart: (hz, amplitude).

    The peaks are those of ``scipy.signal.find_peaks(amplitude, distance=...)`` (the unit tests hold the
    two equal), found here with numpy so that reports do not load ``scipy.signal`` (and ``scipy.stats``
    with it: some 50 MB of resident memory)."""
    df = float(freqs_hz[1] - freqs_hz[0]) if freqs_hz.size > 1 else 1.0
    idx = _spaced_peaks(np.asarray(amplitude, dtype=float), max(int(min_spacing_hz / df), 1))
    idx = idx[freqs_hz[idx] >= min_hz]
    top = idx[np.argsort(amplitude[idx])[::-1][:count]]
    return [(float(freqs_hz[i]), float(amplitude[i])) for i in top]


def local_maxima(x: np.ndarray) -> np.ndarray:
    """Indices of the local maxima of ``x``: samples above their left neighbour and above the next
    different sample on the right; a flat top gives its middle sample (its left one when even)."""
    if x.size < 3:
        return np.zeros(0, dtype=np.intp)
    rises = np.flatnonzero(x[:-2] < x[1:-1]) + 1  # candidate left edges
    if not np.any(x[1:-1] == x[2:]):  # no flat stretch: a plain comparison with both neighbours
        return rises[x[rises] > x[rises + 1]]
    peaks = []
    n, i = x.size, 1
    for i0 in rises.tolist():
        if i0 < i:
            continue  # inside a flat stretch already walked
        ahead = int(i0) + 1
        while ahead < n - 1 and x[ahead] == x[i0]:
            ahead += 1
        if x[ahead] < x[i0]:
            peaks.append((i0 + ahead - 1) // 2)
        i = ahead
    return np.array(peaks, dtype=np.intp)


def _spaced_peaks(x: np.ndarray, distance: int) -> np.ndarray:
    """Local maxima at least ``distance`` samples apart, the higher kept first (find_peaks' rule)."""
    peaks = local_maxima(x)
    if distance <= 1 or peaks.size < 2:
        return peaks
    keep = np.ones(peaks.size, dtype=bool)
    for j in np.argsort(x[peaks])[::-1]:
        if not keep[j]:
            continue
        lo = int(np.searchsorted(peaks, peaks[j] - distance, side="right"))
        hi = int(np.searchsorted(peaks, peaks[j] + distance, side="left"))
        keep[lo:j] = False
        keep[j + 1: hi] = False
    return peaks[keep]
