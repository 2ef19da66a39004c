"""The simulator's own bearing kinematics against published worked examples (references.md section 2)."""

from __future__ import annotations

import pytest

from rotorwatch.settings.models import Bearing
from rotorwatch.simulators.rates import bearing_orders, orders_from_geometry


def test_cwru_drive_end_multiples():
    # CWRU Bearing Data Center drive-end bearing (geometry secondary); values computed from the
    # Randall & Antoni 2011 formulas: references.md section 2, Ex. 1 (abs tol 1e-5)
    o = orders_from_geometry(9, 0.3126, 1.537, 0.0)
    assert o.bpfi == pytest.approx(5.41522, abs=1e-5)
    assert o.bpfo == pytest.approx(3.58478, abs=1e-5)
    assert o.ftf == pytest.approx(0.39831, abs=1e-5)
    assert o.bsf == pytest.approx(2.35672, abs=1e-5)
    assert o.impact_order("ball") == pytest.approx(4.71344, abs=1e-5)


def test_cwru_published_multiples():
    # CWRU's published multiples 5.4152 / 3.5848 / 0.39828 / 4.7135 (secondary; tol 5e-4 per references.md)
    o = orders_from_geometry(9, 0.3126, 1.537)
    assert o.impact_order("inner_race") == pytest.approx(5.4152, abs=5e-4)
    assert o.impact_order("outer_race") == pytest.approx(3.5848, abs=5e-4)
    assert o.ftf == pytest.approx(0.39828, abs=5e-4)
    assert o.impact_order("ball") == pytest.approx(4.7135, abs=5e-4)


def test_cwru_fan_end_multiples():
    # references.md section 2, Ex. 2 (computed; geometry from memory, secondary)
    o = orders_from_geometry(8, 0.2656, 1.122)
    assert (o.bpfi, o.bpfo, o.ftf, o.bsf) == pytest.approx((4.94688, 3.05312, 0.38164, 1.99384), abs=1e-5)


def test_mfpt_rates_at_25_hz():
    # MFPT bearing dataset documentation geometry (secondary), shaft 25 Hz: references.md section 2, Ex. 3
    o = orders_from_geometry(8, 0.235, 1.245)
    assert 25 * o.bpfo == pytest.approx(81.124, abs=2e-3)
    assert 25 * o.bpfi == pytest.approx(118.876, abs=2e-3)
    assert 25 * o.ftf == pytest.approx(10.141, abs=2e-3)
    assert 25 * o.bsf == pytest.approx(63.864, abs=2e-3)


def test_contact_angle_case():
    # references.md section 2, Ex. 4 (synthetic, computed): n 8, d 2 cm, D 12 cm, 15 deg, 25 Hz
    o = orders_from_geometry(8, 2.0, 12.0, 15.0)
    assert 25 * o.bpfo == pytest.approx(83.9012, abs=1e-3)
    assert 25 * o.bpfi == pytest.approx(116.0988, abs=1e-3)
    assert 25 * o.ftf == pytest.approx(10.4877, abs=1e-3)
    assert 25 * o.bsf == pytest.approx(73.0562, abs=1e-3)


def test_identities():
    # BPFO + BPFI = n; BPFO = n FTF (algebra of the formulas, references.md section 2)
    o = orders_from_geometry(11, 7.0, 41.0, 10.0)
    assert o.bpfo + o.bpfi == pytest.approx(11.0)
    assert o.bpfo == pytest.approx(11 * o.ftf)


def test_load_zone_orders():
    # inner race turns with the shaft, an element with the cage, the outer race stands still
    o = orders_from_geometry(9, 0.3126, 1.537)
    assert o.load_zone_order("inner_race") == 1.0
    assert o.load_zone_order("ball") == o.ftf
    assert o.load_zone_order("outer_race") == 0.0


def test_configured_multiples_are_used_as_given():
    b = Bearing(id="x", bpfo=3.0, bpfi=5.0, bsf=2.0, ftf=0.4)
    o = bearing_orders(b)
    assert (o.bpfo, o.bpfi, o.bsf, o.ftf) == (3.0, 5.0, 2.0, 0.4)
    g = bearing_orders(Bearing(id="y", elements=9, element_diameter=0.3126, pitch_diameter=1.537, diameter_unit="in"))
    assert g.bpfo == pytest.approx(3.58478, abs=1e-5)


def test_bad_geometry_is_refused():
    with pytest.raises(ValueError, match="need n >= 1"):
        orders_from_geometry(9, 2.0, 1.0)
