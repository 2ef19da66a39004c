"""Null cases for the bearing decision rule: updates with no bearing defect at all (invented machines and
signals of our own, fixed seeds). Shared by ``test_findings_null.py`` (counts asserted) and
``tests/bench/bench_findings.py`` (distributions printed). No relative imports: the bench imports this file
by path.

- ``noise``: Gaussian noise on a 2-pole pump with two bearings, the demodulation band fixed at
  2-6 kHz, 4 s windows at 25.6 kHz. The envelope spectrum then holds two half-overlapping segments,
  the least averaging the analysis plan allows, where noise lines scatter most.
- ``twice_lf``: a 4-pole motor on 50 Hz mains (``line_frequency_hz = 50``) whose bearing's BPFO falls
  1.2 % above 100 Hz (2xLF); high-frequency noise amplitude-modulated at 100 Hz (depth 0.8: the
  magnetic pull of the stator pulsing at twice the supply frequency) over broadband noise. The squared
  envelope holds real lines at 100 Hz and 200 Hz: without the line frequency they read as a BPFO with
  its second harmonic.
- ``lone_line``: the same motor with its line frequency not configured and one modulation line of no
  known source (depth 0.5, no harmonics: the band's power, not its amplitude, is modulated) inside the
  BPFI window; the only evidence for a second line of the family is noise. It measures the
  confirmation rule alone.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from rotorwatch.analysis.point import PointAnalyzer
from rotorwatch.settings.models import Machine

FS_HZ = 25600.0
WINDOW_S = 4.0


def _machine(rpm: float, bearings: list[dict], line_frequency_hz: float | None) -> Machine:
    doc = {
        "id": "m", "speed": {"mode": "fixed", "rpm": rpm}, "bearings": bearings,
        "points": [{"id": "p1", "bearing": bearings[0]["id"], "sensor": {"channel": 0, "sensitivity_mv_per_g": 100.0}}],
        "analysis": {"window_s": WINDOW_S, "fmax_hz": 5000.0, "envelope": {"band_hz": [2000.0, 6000.0]}},
    }
    if line_frequency_hz is not None:
        doc["line_frequency_hz"] = line_frequency_hz
    return Machine.model_validate(doc)


PUMP = [{"id": "pump-de", "elements": 8, "element_diameter": 15.0, "pitch_diameter": 62.0},
        {"id": "pump-nde", "elements": 12, "element_diameter": 11.0, "pitch_diameter": 80.0}]
# BPFO 4.13 x 24.5 Hz = 101.2 Hz, 1.2 % above 2xLF; BPFI 5.87 x = 143.8 Hz (invented multiples)
MOTOR = [{"id": "motor-de", "bpfo": 4.13, "bpfi": 5.87, "bsf": 2.62, "ftf": 0.413}]
MOTOR_RPM = 1470.0


def band_noise(rng: np.random.Generator, n: int, lo_hz: float, hi_hz: float, rms: float) -> np.ndarray:
    """Gaussian noise limited to lo..hi Hz (ideal band-pass in the frequency domain), with RMS ``rms``."""
    spec = np.fft.rfft(rng.standard_normal(n))
    f = np.fft.rfftfreq(n, 1.0 / FS_HZ)
    spec[(f < lo_hz) | (f > hi_hz)] = 0.0
    x = np.fft.irfft(spec, n)
    return x * (rms / np.sqrt(np.mean(x**2)))


@dataclass
class NullCase:
    name: str
    analyzer: PointAnalyzer

    def block(self, seed: int) -> np.ndarray:
        rng = np.random.default_rng(seed)
        n = int(WINDOW_S * FS_HZ)
        t = np.arange(n) / FS_HZ
        x = rng.standard_normal(n)  # 1 m/s^2 RMS broadband
        if self.name == "twice_lf":
            hf = band_noise(rng, n, 2500.0, 5500.0, 2.0)
            x += hf * (1.0 + 0.8 * np.cos(2 * np.pi * 100.0 * t + rng.uniform(0, 2 * np.pi)))
        elif self.name == "lone_line":
            hf = band_noise(rng, n, 2500.0, 5500.0, 2.0)
            x += hf * np.sqrt(1.0 + 0.5 * np.cos(2 * np.pi * 145.0 * t + rng.uniform(0, 2 * np.pi)))
        return x

    def analyze(self, seed: int):
        return self.analyzer.analyze(self.block(seed))


def case(name: str) -> NullCase:
    if name == "noise":
        m = _machine(2960.0, PUMP, None)
    elif name == "twice_lf":
        m = _machine(MOTOR_RPM, MOTOR, 50.0)
    elif name == "lone_line":
        m = _machine(MOTOR_RPM, MOTOR, None)
    else:
        raise ValueError(name)
    return NullCase(name, PointAnalyzer(m, m.points[0], FS_HZ))


CASES = ("noise", "twice_lf", "lone_line")
