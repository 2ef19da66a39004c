"""Names for spectral lines: which kinematic frequency of the machine a peak sits on.

Used to annotate the strongest peaks of an envelope or velocity spectrum for a person reading a report
(the decision rule itself is in :mod:`rotorwatch.analysis.findings`). The candidate lines at a shaft
frequency f_r are the shaft orders 1x..10x, blade pass and its second harmonic, and for every bearing
the defect rates (BPFO, BPFI, BSF, 2xBSF, FTF), their harmonics up to 4 and their +/- 1x and 2x shaft
sidebands (+/- FTF for the element lines). A peak takes the nearest candidate within the tolerance
(default 1.5 % of the frequency, at least two lines of the spectrum); otherwise it is left unnamed.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .. import kinematics
from ..settings.models import Machine


@dataclass(frozen=True)
class Line:
    hz: float
    label: str


def kinematic_lines(machine: Machine, shaft_hz: float, top_hz: float, bearing_ids: list[str] | None = None) -> list[Line]:
    """Candidate lines up to ``top_hz``; ``bearing_ids`` limits the bearings (default: all)."""
    lines = [Line(k * shaft_hz, f"{k}x") for k in range(1, 11)]
    if machine.blades:
        lines.append(Line(machine.blades * shaft_hz, "blade pass"))
        lines.append(Line(2 * machine.blades * shaft_hz, "2x blade pass"))
    for b in machine.bearings:
        if bearing_ids is not None and b.id not in bearing_ids:
            continue
        m = kinematics.bearing_multiples(b)
        cage = m.ftf * shaft_hz
        series = [("BPFO", m.bpfo, shaft_hz, "1x"), ("BPFI", m.bpfi, shaft_hz, "1x"),
                  ("2xBSF", 2 * m.bsf, cage, "FTF"), ("BSF", m.bsf, cage, "FTF"), ("FTF", m.ftf, 0.0, "")]
        for name, order, mod_hz, mod_name in series:
            for h in range(1, 5):
                base = f"{h}x{name}" if h > 1 else name
                lines.append(Line(h * order * shaft_hz, f"{base} ({b.id})"))
                if mod_hz > 0 and name != "FTF":
                    for k in (1, 2):
                        step = f"{k}{mod_name}" if k > 1 else mod_name
                        lines.append(Line(h * order * shaft_hz - k * mod_hz, f"{base}-{step} ({b.id})"))
                        lines.append(Line(h * order * shaft_hz + k * mod_hz, f"{base}+{step} ({b.id})"))
    return [ln for ln in lines if 0 < ln.hz <= top_hz]


def name_line(hz: float, lines: list[Line], df_hz: float, tolerance: float = 0.015) -> str | None:
    """Label of the candidate nearest to ``hz`` within the tolerance, or None."""
    if not lines:
        return None
    freqs = np.array([ln.hz for ln in lines])
    i = int(np.argmin(np.abs(freqs - hz)))
    if abs(freqs[i] - hz) <= max(tolerance * hz, 2 * df_hz):
        return lines[i].label
    return None


def strongest_peaks(freqs_hz: np.ndarray, amplitude: np.ndarray, count: int = 8, min_hz: float = 0.0,
                    min_spacing_hz: float = 1.5) -> list[tuple[float, float]]:
    """The ``count`` highest local maxima above ``min_hz``, at least ``min_spacing_hz`` apart: (hz, amplitude)."""
    from scipy.signal import find_peaks  # noqa: PLC0415 - reports only

    df = float(freqs_hz[1] - freqs_hz[0]) if freqs_hz.size > 1 else 1.0
    idx, _ = find_peaks(amplitude, distance=max(int(min_spacing_hz / df), 1))
    idx = idx[freqs_hz[idx] >= min_hz]
    top = idx[np.argsort(amplitude[idx])[::-1][:count]]
    return [(float(freqs_hz[i]), float(amplitude[i])) for i in top]
