"""Running-speed estimation (harmonic sum) and the speed source reported by the analyzer."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from rotorwatch.analysis.point import PointAnalyzer

from .helpers import machine


def _shaft_signal(fs, seconds, f_hz, amps, noise=0.2, seed=0):
    rng = np.random.default_rng(seed)
    t = np.arange(int(seconds * fs)) / fs
    x = sum(a * np.sin(2 * np.pi * k * f_hz * t + rng.uniform(0, 6.28)) for k, a in enumerate(amps, start=1))
    return x + rng.normal(0, noise, t.size)


def _estimated(rpm=1775.0, fs=12000.0):
    m = machine(rpm=rpm, mode="estimated", envelope={"band_hz": [2000.0, 5000.0]})
    return PointAnalyzer(m, m.points[0], fs)


def test_estimate_of_a_known_shaft_rate():
    # the check value is the generator's shaft rate (1789.2 r/min = 29.82 Hz)
    a = _estimated()
    r = a.analyze(_shaft_signal(12000.0, 10.0, 29.82, [1.0, 0.5, 0.3, 0.2, 0.1]))
    assert r.rpm_source == "estimated"
    assert r.rpm == pytest.approx(29.82 * 60, rel=2e-4)


def test_estimate_with_a_weak_fundamental():
    # 1x buried, 2x and 3x clear (misalignment-like): the harmonic sum still finds the shaft rate
    a = _estimated()
    r = a.analyze(_shaft_signal(12000.0, 10.0, 30.4, [0.02, 0.8, 0.6, 0.1]))
    assert r.rpm_source == "estimated" and r.rpm == pytest.approx(30.4 * 60, rel=2e-4)


@settings(max_examples=15, deadline=None)
@given(f_hz=st.floats(1600 / 60, 1950 / 60), amps=st.lists(st.floats(0.2, 2.0), min_size=3, max_size=6),
       seed=st.integers(0, 1000))
def test_estimate_property(f_hz, amps, seed):
    a = _estimated()
    r = a.analyze(_shaft_signal(12000.0, 4.0, f_hz, amps, seed=seed))
    assert r.rpm_source == "estimated"
    assert r.rpm == pytest.approx(f_hz * 60, rel=5e-4)


def test_noise_alone_falls_back_on_the_nominal_speed():
    a = _estimated(rpm=1775.0)
    r = a.analyze(np.random.default_rng(0).standard_normal(120000))
    assert (r.rpm, r.rpm_source) == (1775.0, "nominal")


@pytest.mark.parametrize("mode", ["fixed", "tach", "mqtt"])
def test_speed_source_without_and_with_a_reading(mode):
    m = machine(rpm=1500.0, mode=mode)
    a = PointAnalyzer(m, m.points[0], 12000.0)
    x = _shaft_signal(12000.0, 4.0, 29.0, [1.0, 0.5])
    r = a.analyze(x)
    assert r.rpm == 1500.0
    assert r.rpm_source == ("fixed" if mode == "fixed" else "nominal")
    r = a.analyze(x, rpm=1490.0)
    assert r.rpm == 1490.0 and r.rpm_source == mode


def test_given_speed_on_an_estimated_machine_and_stopped_machines():
    a = _estimated()
    x = _shaft_signal(12000.0, 4.0, 29.0, [1.0, 0.5])
    assert a.analyze(x, rpm=1720.0).rpm_source == "fixed"
    assert a.analyze(x, rpm=1720.0, rpm_source="mqtt").rpm_source == "mqtt"
    stopped = a.analyze(x, rpm=0.0)
    assert stopped.rpm == 0.0 and stopped.findings == []
