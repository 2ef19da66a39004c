"""The bearing decision rule on simulated fault signals (the usual recipe: an impact train at the defect
rate with 0.5-1 % jitter, each impact ringing a resonance; inner-race impacts amplitude-modulated at 1x;
Randall & Antoni 2011, from memory; references.md section 3 "Simulator recipe")."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from rotorwatch.analysis.point import PointAnalyzer
from rotorwatch.kinematics import multiples_from_geometry

from .helpers import machine

FS = 25600.0
M = multiples_from_geometry(9, 0.3126, 1.537)


def _fault(rate_hz, shaft_hz, modulated, seed, seconds=4.0, resonance_hz=4000.0, snr=6.0):
    rng = np.random.default_rng(seed)
    n = int(seconds * FS)
    period = FS / rate_hz
    count = int(n / period)
    times = np.arange(count) * period + rng.normal(0, 0.007 * period, count)
    at = np.round(times).astype(int)
    keep = (at >= 0) & (at < n)
    amp = np.full(count, snr)
    if modulated:  # the defect turns with the shaft through the load zone
        amp *= 0.6 + 0.4 * np.cos(2 * np.pi * shaft_hz * times / FS)
    pulses = np.zeros(n)
    pulses[at[keep]] = amp[keep]
    t = np.arange(int(0.004 * FS)) / FS
    ring = np.exp(-0.05 * 2 * np.pi * resonance_hz * t) * np.sin(2 * np.pi * resonance_hz * t)
    return np.convolve(pulses, ring)[:n] + rng.normal(0, 0.6, n)


@settings(max_examples=20, deadline=None)
@given(rpm=st.floats(900, 3000), defect=st.sampled_from(["BPFO", "BPFI"]), seed=st.integers(0, 10_000),
       slip=st.floats(-0.015, 0.015))
def test_simulated_race_faults_are_named(rpm, defect, seed, slip):
    shaft = rpm / 60
    order = M.bpfo if defect == "BPFO" else M.bpfi
    rate = order * shaft * (1 + slip)  # slip of 1-2 % (references.md section 3)
    m = machine(rpm=rpm, envelope={"band_hz": [3000.0, 5000.0]})
    r = PointAnalyzer(m, m.points[0], FS).analyze(_fault(rate, shaft, defect == "BPFI", seed))
    assert r.findings, r.defect_prominence
    first = r.findings[0]
    assert first.name == defect and first.bearing == "b1"
    assert first.measured_hz == pytest.approx(rate, rel=0.003)
    assert first.expected_hz == pytest.approx(order * shaft, rel=1e-9)
    assert [f.name for f in r.findings].count(defect) == 1


def test_inner_race_shows_shaft_sidebands_and_nothing_else():
    shaft = 29.5
    m = machine(rpm=shaft * 60, envelope={"band_hz": [3000.0, 5000.0]})
    r = PointAnalyzer(m, m.points[0], FS).analyze(_fault(M.bpfi * shaft, shaft, True, seed=1, seconds=8.0))
    assert [f.name for f in r.findings] == ["BPFI"]
    assert r.findings[0].sidebands_found == 2 and r.findings[0].harmonics_found >= 2


def test_strong_outer_race_fault_claims_its_own_modulation_family():
    # a strong BPFO with its harmonics, shaft and cage modulation must not also report BPFI, BSF or FTF
    shaft = 29.93
    m = machine(rpm=shaft * 60, envelope={"band_hz": [3000.0, 5000.0]})
    x = _fault(M.bpfo * shaft, shaft, True, seed=4, seconds=8.0, snr=12.0)
    r = PointAnalyzer(m, m.points[0], FS).analyze(x)
    assert [f.name for f in r.findings] == ["BPFO"]


def test_spalled_element_at_twice_bsf_is_named_bsf():
    # a spalled element strikes both races: impacts at 2 x BSF, modulated at FTF (references.md section 2)
    shaft = 30.0
    m = machine(rpm=shaft * 60, envelope={"band_hz": [3000.0, 5000.0]})
    rate = 2 * M.bsf * shaft
    rng = np.random.default_rng(7)
    n = int(8 * FS)
    times = np.arange(int(n / (FS / rate))) * FS / rate
    times += rng.normal(0, 0.007 * FS / rate, times.size)
    amp = 6.0 * (0.6 + 0.4 * np.cos(2 * np.pi * M.ftf * shaft * times / FS))
    pulses = np.zeros(n)
    at = np.round(times).astype(int)
    ok = (at >= 0) & (at < n)
    pulses[at[ok]] = amp[ok]
    t = np.arange(int(0.004 * FS)) / FS
    x = np.convolve(pulses, np.exp(-0.05 * 2 * np.pi * 4000 * t) * np.sin(2 * np.pi * 4000 * t))[:n]
    r = PointAnalyzer(m, m.points[0], FS).analyze(x + rng.normal(0, 0.6, n))
    assert r.findings and r.findings[0].name == "BSF" and r.findings[0].series == "2xBSF"
    assert r.findings[0].measured_hz == pytest.approx(rate, rel=0.003)


def _two_bearing_machine(second: dict, rpm: float):
    m = machine(rpm=rpm, envelope={"band_hz": [3000.0, 5000.0]})
    doc = m.model_dump()
    doc["bearings"].append(second)
    doc["points"].append({"id": "p2", "bearing": second["id"], "sensor": {"channel": 1, "sensitivity_mv_per_g": 100.0}})
    return type(m).model_validate(doc)


def test_a_neighbour_bearing_fault_is_named_by_its_own_bearing():
    # the sensor on b2 hears b1's outer-race fault through the housing: the line is b1's BPFO
    shaft = 29.5
    m = _two_bearing_machine({"id": "b2", "elements": 8, "element_diameter": 10.0, "pitch_diameter": 46.0}, shaft * 60)
    x = _fault(M.bpfo * shaft, shaft, False, seed=3, seconds=8.0)
    r = PointAnalyzer(m, m.point("p2"), FS).analyze(x)
    assert [(f.name, f.bearing) for f in r.findings] == [("BPFO", "b1")]


def test_identical_bearings_go_to_the_points_own_bearing():
    shaft = 29.5
    m = _two_bearing_machine({"id": "b2", "elements": 9, "element_diameter": 0.3126, "pitch_diameter": 1.537,
                              "diameter_unit": "in"}, shaft * 60)
    x = _fault(M.bpfo * shaft, shaft, False, seed=3, seconds=8.0)
    assert [(f.name, f.bearing) for f in PointAnalyzer(m, m.point("p2"), FS).analyze(x).findings] == [("BPFO", "b2")]
    assert [(f.name, f.bearing) for f in PointAnalyzer(m, m.point("p1"), FS).analyze(x).findings] == [("BPFO", "b1")]
