"""Importing the point analysis loads neither the settings models (pydantic) nor scipy.fft: both cost more
CPU than the analysis package itself (``rotorwatch bench`` prints the import time). scipy.fft comes with
the first transform, and the analysis then gives the same results as when it was imported up front."""

from __future__ import annotations

import subprocess
import sys

CODE = """
import sys
import numpy as np
import rotorwatch.analysis.point as point
print(sorted(m for m in ("pydantic", "scipy.fft", "scipy.special", "rotorwatch.settings.models") if m in sys.modules))
from rotorwatch.settings import models
m = models.Machine(id="m", speed=models.Speed(mode="fixed", rpm=1500), bearings=[models.Bearing(
    id="de", elements=9, element_diameter=8.0, pitch_diameter=40.0)], points=[models.Point(
    id="p", bearing="de", sensor=models.Sensor(channel=0, sensitivity_mv_per_g=100.0))])
t = np.arange(40000) / 10000.0
x = np.sin(2 * np.pi * 25.0 * t) + 0.1 * np.random.default_rng(1).standard_normal(t.size)
r = point.PointAnalyzer(m, m.points[0], 10000.0).analyze(x)
print("scipy.fft" in sys.modules, repr(r.overall_velocity_mm_s), repr(r.envelope_kurtosis))
"""


def _run(prelude: str) -> list[str]:
    out = subprocess.run([sys.executable, "-c", prelude + CODE], capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stderr
    return out.stdout.strip().splitlines()


def test_the_analysis_imports_without_pydantic_or_scipy_fft():
    lines = _run("")
    assert lines[0] == "[]"
    assert lines[1].startswith("True ")  # loaded by the first transform


def test_results_do_not_depend_on_when_scipy_fft_is_imported():
    assert _run("import scipy.fft\n")[1] == _run("")[1]
