"""The three kinds of band (rotorwatch.settings.bands): a table's placement keys choose its kind, each kind
computes its own edges, a table of no kind or of two is one line, and the flat form bands were always
written in survives a dump and a reload (stored baselines hash that form)."""

from __future__ import annotations

import pydantic
import pytest

from rotorwatch.alarms.baseline import definition
from rotorwatch.errors import ConfigError
from rotorwatch.kinematics import MachineKinematics
from rotorwatch.settings.bands import FLAT_KEYS, FeatureBand, HzBand, OrderBand, band_from
from rotorwatch.settings.loading import validate, validation_problems
from rotorwatch.settings.models import Machine

from .helpers import machine

CWRU_1797_SHAFT_HZ = 1797 / 60.0


def test_placement_keys_choose_the_kind():
    assert isinstance(band_from({"name": "a", "quantity": "acceleration", "low_hz": 2000, "high_hz": 5000}), HzBand)
    assert isinstance(band_from({"name": "b", "quantity": "velocity", "low_order": 1.9, "high_order": 2.1}),
                      OrderBand)
    assert isinstance(band_from({"name": "c", "quantity": "envelope", "feature": "bpfo", "bearing": "b1"}),
                      FeatureBand)


def _problems(band: dict) -> list[str]:
    try:
        band_from(band)
    except pydantic.ValidationError as e:
        return validation_problems("f.toml", e)
    raise AssertionError("accepted")


@pytest.mark.parametrize("band,message", [
    ({"name": "x", "quantity": "velocity"},
     "f.toml: place the band one way: low_hz/high_hz, low_order/high_order or feature"),
    ({"name": "x", "quantity": "velocity", "low_hz": 10, "high_hz": 20, "feature": "shaft"},
     "f.toml: place the band one way: low_hz/high_hz, low_order/high_order or feature"),
    ({"name": "x", "quantity": "velocity", "low_order": 1.9},
     "f.toml: low_order/high_order: give both edges"),
    ({"name": "x", "quantity": "velocity", "low_hz": 30, "high_hz": 20},
     "f.toml: low_hz/high_hz = 30..20: the low edge must be below the high edge"),
    ({"name": "x", "quantity": "velocity", "low_order": 1.9, "high_order": 2.1, "bearing": "b1"},
     "f.toml: bearing is only used with a bearing-defect feature (bpfo, bpfi, bsf, ftf)"),
    ({"name": "x", "quantity": "envelope", "feature": "bpfi"},
     "f.toml: feature 'bpfi' needs bearing (the id of one of the machine's bearings)"),
])
def test_a_misplaced_band_is_one_line(band, message):
    (line,) = _problems(band)
    assert line.startswith("f.toml: ") and line.endswith(message[len("f.toml: "):])


def test_the_band_kind_is_not_part_of_the_field_path():
    doc = machine(bands=[{"name": "x", "quantity": "velocity", "low_order": 1.9, "high_order": 2.1}]).model_dump()
    doc["bands"][0]["levels"] = {"warning": 3.0, "alarm": 2.0}
    with pytest.raises(ConfigError) as e:
        validate(Machine, doc, "f.toml")
    assert e.value.problems == ["f.toml: bands[0].levels: warning (3) must be below alarm (2)"]


def test_each_kind_computes_its_edges():
    # CWRU drive-end bearing at 1797 r/min: BPFO 107.36 Hz (references.md section 2, computed from the
    # published 3.5848 x shaft multiple, secondary)
    m = machine(bands=[{"name": "h", "quantity": "acceleration", "low_hz": 2000, "high_hz": 5000},
                       {"name": "o", "quantity": "velocity", "low_order": 1.9, "high_order": 2.1},
                       {"name": "f", "quantity": "envelope", "feature": "bpfo", "bearing": "b1", "harmonics": 2,
                        "tolerance_pct": 2.0}])
    k = MachineKinematics(m)
    assert m.bands[0].edges_hz(CWRU_1797_SHAFT_HZ, k) == [(2000, 5000)]
    assert m.bands[1].edges_hz(CWRU_1797_SHAFT_HZ, k) == [pytest.approx((56.905, 62.895))]  # 1.9 / 2.1 x 29.95 Hz
    (lo1, hi1), (lo2, hi2) = m.bands[2].edges_hz(CWRU_1797_SHAFT_HZ, k)
    assert (lo1 + hi1) / 2 == pytest.approx(107.36, abs=0.01)
    assert (lo2 + hi2) / 2 == pytest.approx(2 * 107.36, abs=0.02)
    assert hi1 / lo1 == pytest.approx(1.02 / 0.98)
    assert not m.bands[0].follows_speed and m.bands[1].follows_speed and m.bands[2].follows_speed


def test_the_flat_form_is_kept_and_taken_back():
    m = machine(bands=[{"name": "h", "quantity": "acceleration", "low_hz": 2000, "high_hz": 5000},
                       {"name": "f", "quantity": "envelope", "feature": "bpfo", "bearing": "b1"}])
    dumped = [b.model_dump() for b in m.bands]
    assert [tuple(d) for d in dumped] == [FLAT_KEYS, FLAT_KEYS]
    assert dumped[0]["feature"] is None and dumped[0]["bearing"] is None and dumped[0]["harmonics"] == 3
    assert dumped[1]["low_hz"] is None and dumped[1]["high_order"] is None
    again = Machine.model_validate(m.model_dump())
    assert again.bands == m.bands and [type(b) for b in again.bands] == [HzBand, FeatureBand]
    # what a stored baseline hashes: the band in its flat form, its bearing's geometry
    d = definition(m, m.points[0].id, "f")
    assert d["band"]["feature"] == "bpfo" and d["band"]["low_hz"] is None and "bearing" in d
