"""Bearing defect multiples and band edges (rotorwatch.kinematics) against published geometry examples."""

from __future__ import annotations

import math

import pytest
from hypothesis import given
from hypothesis import strategies as st

from rotorwatch.kinematics import band_edges_hz, frequency_table, multiples_from_geometry

from .helpers import machine


def test_cwru_drive_end_multiples_from_geometry():
    # CWRU drive-end bearing: n 9, d 0.3126 in, D 1.537 in, phi 0 -> BPFI 5.41522, BPFO 3.58478, FTF 0.39831,
    # BSF 2.35672 (references.md section 2 Ex. 1: computed from the formulas of Randall & Antoni 2011;
    # geometry from the CWRU Bearing Data Center page, secondary)
    m = multiples_from_geometry(9, 0.3126, 1.537, 0.0)
    assert m.bpfi == pytest.approx(5.41522, abs=1e-5)
    assert m.bpfo == pytest.approx(3.58478, abs=1e-5)
    assert m.ftf == pytest.approx(0.39831, abs=1e-5)
    assert m.bsf == pytest.approx(2.35672, abs=1e-5)


def test_cwru_drive_end_matches_published_multiples():
    # CWRU Bearing Data Center published: inner 5.4152, outer 3.5848, cage 0.39828, ball spin 2.3566
    # (shared dataset README; tolerance 5e-4 because the cage value does not match the geometry exactly,
    # references.md section 2 tolerance note)
    m = multiples_from_geometry(9, 0.3126, 1.537, 0.0)
    assert m.bpfi == pytest.approx(5.4152, abs=5e-4)
    assert m.bpfo == pytest.approx(3.5848, abs=5e-4)
    assert m.ftf == pytest.approx(0.39828, abs=5e-4)
    assert m.bsf == pytest.approx(2.3566, abs=5e-4)
    assert 2 * m.bsf == pytest.approx(4.7135, abs=5e-4)  # "rolling element" 4.7135 = 2 x BSF (secondary)


def test_cwru_fan_end():
    # CWRU fan-end bearing: n 8, d 0.2656 in, D 1.122 in -> 4.94688 / 3.05312 / 0.38164 / 1.99384 (computed);
    # published 4.9469 / 3.0530 / 0.3817 / 3.9874 for 2 x BSF (references.md section 2 Ex. 2, secondary)
    m = multiples_from_geometry(8, 0.2656, 1.122, 0.0)
    assert (m.bpfi, m.bpfo, m.ftf, m.bsf) == pytest.approx((4.94688, 3.05312, 0.38164, 1.99384), abs=1e-5)
    assert (m.bpfi, m.bpfo, m.ftf, 2 * m.bsf) == pytest.approx((4.9469, 3.0530, 0.3817, 3.9874), abs=5e-4)


def test_mfpt_bearing_at_25_hz():
    # MFPT dataset bearing: n 8, d 0.235 in, D 1.245 in, phi 0, shaft 25 Hz -> BPFO 81.124, BPFI 118.876,
    # FTF 10.141, BSF 63.864 Hz (references.md section 2 Ex. 3; geometry secondary, Hz computed)
    m = multiples_from_geometry(8, 0.235, 1.245, 0.0)
    assert 25 * m.bpfo == pytest.approx(81.124, abs=1e-3)
    assert 25 * m.bpfi == pytest.approx(118.876, abs=1e-3)
    assert 25 * m.ftf == pytest.approx(10.141, abs=1e-3)
    assert 25 * m.bsf == pytest.approx(63.864, abs=1e-3)


def test_contact_angle_example():
    # n 8, d 2 cm, D 12 cm, phi 15 deg, 25 Hz -> BPFO 83.9012, BPFI 116.0988, FTF 10.4877, BSF 73.0562 Hz
    # (references.md section 2 Ex. 4, computed from the formulas)
    m = multiples_from_geometry(8, 2.0, 12.0, 15.0)
    assert (25 * m.bpfo, 25 * m.bpfi, 25 * m.ftf, 25 * m.bsf) == pytest.approx(
        (83.9012, 116.0988, 10.4877, 73.0562), abs=1e-4)


@given(n=st.integers(3, 40), d=st.floats(0.5, 50), ratio=st.floats(1.2, 20), angle=st.floats(0, 45))
def test_identities(n, d, ratio, angle):
    # BPFO + BPFI = n x f_r; BPFO = n x FTF (algebra, references.md section 2 "Sanity identities")
    m = multiples_from_geometry(n, d, d * ratio, angle)
    assert m.bpfo + m.bpfi == pytest.approx(n, rel=1e-12)
    assert m.bpfo == pytest.approx(n * m.ftf, rel=1e-12)
    assert 0 < m.ftf < 0.5 < m.bpfi / n < 1
    assert m.bpfo < m.bpfi and m.bsf > 0


def test_frequency_table_at_1797_rpm():
    # CWRU DE at 1797 r/min: BPFO 107.36, BPFI 162.19, FTF 11.93, BSF 70.58 Hz (references.md section 2, computed)
    t = frequency_table(machine(rpm=1797), 1797)
    assert t["1x"] == pytest.approx(29.95)
    assert (t["bpfo:b1"], t["bpfi:b1"], t["ftf:b1"], t["bsf:b1"]) == pytest.approx((107.36, 162.19, 11.93, 70.58), abs=0.005)


@given(rpm=st.floats(60, 12000))
def test_order_and_feature_edges_follow_speed(rpm):
    m = machine(bands=[{"name": "o", "quantity": "velocity", "low_order": 1.9, "high_order": 2.1},
                       {"name": "f", "quantity": "envelope", "feature": "bpfo", "bearing": "b1", "harmonics": 3,
                        "tolerance_pct": 2.0},
                       {"name": "h", "quantity": "acceleration", "low_hz": 2000, "high_hz": 5000}])
    f = rpm / 60
    assert band_edges_hz(m, m.bands[0], f) == [pytest.approx((1.9 * f, 2.1 * f))]
    # the helper's bearing is the rig's drive-end bearing: outer-race multiple 3.5848 as CWRU publishes it
    # (references.md section 2; it differs from the geometry's 3.58478 by 6e-6 relative, inside 1e-4)
    bpfo = 3.5848 * f
    edges = band_edges_hz(m, m.bands[1], f)
    assert len(edges) == 3
    for k, (lo, hi) in enumerate(edges, start=1):  # harmonics 1-3, each +/- tolerance_pct 2 %
        assert lo == pytest.approx(k * bpfo * 0.98, rel=1e-4) and hi == pytest.approx(k * bpfo * 1.02, rel=1e-4)
    assert band_edges_hz(m, m.bands[2], f) == [(2000, 5000)]
    assert math.isclose(frequency_table(m, rpm)["2x"], 2 * f)
