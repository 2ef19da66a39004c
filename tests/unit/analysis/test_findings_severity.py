"""A finding's severity (the RMS of its lines in the envelope spectrum above the local floor, m/s^2) against
its prominence (dB over the local floor, a signal-to-noise figure): the severity follows the defect, the
prominence does not have to. Signals: simulated impact trains ringing a resonance (Randall & Antoni 2011,
from memory; references.md section 3) and an amplitude-modulated tone whose envelope is known exactly."""

from __future__ import annotations

import numpy as np
import pytest

from rotorwatch.analysis.point import PointAnalyzer
from rotorwatch.kinematics import multiples_from_geometry

from .helpers import impact_train, machine

FS = 25600.0
M = multiples_from_geometry(9, 0.3126, 1.537)
AMPLITUDES = (0.8, 1.2, 1.8, 2.7, 4.0, 6.0)  # impact amplitude of each stage of a growing defect, m/s^2


def _analyzer(shaft_hz: float) -> PointAnalyzer:
    m = machine(rpm=shaft_hz * 60, envelope={"band_hz": [2500.0, 5500.0]}, analysis={"fmax_hz": 5000})
    return PointAnalyzer(m, m.points[0], FS)


def _bpfo(result):
    found = [f for f in result.findings if f.name == "BPFO"]
    assert found, result.defect_prominence
    return found[0]


def test_severity_of_an_amplitude_modulated_tone_is_the_rms_of_its_envelope_lines():
    # x = A (1 + sum m_h cos(2 pi h f0 t)) cos(2 pi fc t): its envelope is A (1 + sum ...) (the analytic
    # signal of an AM tone, cf. scipy.signal.hilbert's docstring example), whose lines at h f0 have RMS
    # A m_h / sqrt(2). The defect's lines together: A sqrt(sum m_h^2) / sqrt(2).
    shaft = 28.7
    a = _analyzer(shaft)
    f0, amp, depths = M.bpfo * shaft, 2.0, (0.3, 0.15, 0.1)
    t = np.arange(int(4 * FS)) / FS
    env = 1 + sum(m * np.cos(2 * np.pi * (h + 1) * f0 * t + 0.3 * h) for h, m in enumerate(depths))
    x = amp * env * np.cos(2 * np.pi * 4000.0 * t) + np.random.default_rng(1).normal(0.0, 0.1, t.size)
    f = _bpfo(a.analyze(x))
    assert f.severity_m_s2 == pytest.approx(amp * np.sqrt(sum(m * m for m in depths)) / np.sqrt(2), rel=0.01)
    assert f.harmonics_found == 3


def test_severity_grows_along_a_growing_outer_race_defect():
    shaft = 29.2
    a = _analyzer(shaft)
    rate = M.bpfo * shaft * 1.008  # 0.8 % slip
    severity = [_bpfo(a.analyze(impact_train(FS, 4.0, rate, 4000.0, amplitude=amp, noise_rms=0.6, seed=3))).severity_m_s2
                for amp in AMPLITUDES]
    print("severity (m/s^2) by impact amplitude", dict(zip(AMPLITUDES, np.round(severity, 4))))
    assert all(b > a_ for a_, b in zip(severity, severity[1:])), severity
    assert severity[-1] > 5 * severity[0]  # the impacts grow 7.5 x


def test_prominence_is_not_severity_when_the_floor_grows_with_the_defect():
    # as a spall spreads, its rough edges add impacts at no fixed rate: the floor of the envelope
    # spectrum rises faster than the defect's lines, so the prominence falls while the defect grows
    shaft = 29.2
    a = _analyzer(shaft)
    rate = M.bpfo * shaft * 1.008
    t_ring = np.arange(int(8 / (0.05 * 2 * np.pi * 4000.0) * FS)) / FS
    ring = np.exp(-0.05 * 2 * np.pi * 4000.0 * t_ring) * np.sin(2 * np.pi * 4000.0 * t_ring)
    severity, prominence = [], []
    for k, amp in enumerate(AMPLITUDES):
        rng = np.random.default_rng(50 + k)
        x = impact_train(FS, 4.0, rate, 4000.0, amplitude=amp, noise_rms=0.6, seed=3)
        n_random = int(4.0 * rate * k / 2.0)  # 0 .. 2.5 x as many random impacts as periodic ones
        pulses = np.zeros(x.size)
        pulses[rng.integers(0, x.size, n_random)] = amp * rng.uniform(0.5, 1.5, n_random)
        f = _bpfo(a.analyze(x + np.convolve(pulses, ring)[: x.size]))
        severity.append(f.severity_m_s2)
        prominence.append(f.prominence_db)
    print("severity", np.round(severity, 4), "prominence dB", np.round(prominence, 1))
    assert all(b > a_ for a_, b in zip(severity, severity[1:])), severity
    assert prominence[-1] < prominence[1] - 3.0, prominence
