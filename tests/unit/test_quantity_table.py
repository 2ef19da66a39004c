"""One table of quantities (rotorwatch.settings.quantities): each quantity's spectrum, unit and metric
suffix are defined there once, and nothing else in the package keeps its own quantity -> unit map."""

from __future__ import annotations

import ast
import pathlib

import pytest

from rotorwatch.settings.bands import BandBase
from rotorwatch.settings.quantities import OVERALL_QUANTITY, QUANTITIES, SPECTRA, SPECTRUM_UNITS, quantity

REPO = pathlib.Path(__file__).resolve().parents[2]
AGENT = REPO / "agent"
TABLE = AGENT / "settings" / "quantities.py"

SERVICE_AREA_ALLOWANCE: set[str] = set()  # none: publishers/quantities.py reads the table


def test_units_and_metric_factors_follow_si():
    # 1 mm/s = 1e-3 m/s (SI prefix milli, BIPM SI Brochure, 9th ed., Table 7); metric names carry base
    # units (Prometheus documentation, "Metric and label naming": use base units, e.g. meters)
    assert quantity("velocity").unit == "mm/s" and quantity("velocity").metric_factor == 1e-3
    assert quantity("velocity").metric_suffix == "meters_per_second"
    for name in ("acceleration", "envelope"):
        q = quantity(name)
        assert (q.unit, q.metric_factor, q.metric_suffix) == ("m/s^2", 1.0, "meters_per_second_squared")
    assert OVERALL_QUANTITY is quantity("velocity")


def test_the_table_covers_what_a_band_may_read():
    names = BandBase.model_fields["quantity"].annotation.__args__
    assert set(names) == set(QUANTITIES)
    assert set(SPECTRA) == {q.spectrum for q in QUANTITIES.values()} and set(SPECTRUM_UNITS) == set(SPECTRA)
    with pytest.raises(KeyError, match="known: acceleration, velocity, envelope"):
        quantity("displacement")


def _unit_maps(tree: ast.AST) -> list[int]:
    """Lines of dict literals keyed by two or more quantity names whose values hold a unit string."""
    units = {q.unit for q in QUANTITIES.values()} | {q.metric_suffix for q in QUANTITIES.values()}
    lines = []
    for node in ast.walk(tree):
        if not isinstance(node, ast.Dict):
            continue
        keys = {k.value for k in node.keys if isinstance(k, ast.Constant)}
        if len(keys & set(QUANTITIES)) < 2:
            continue
        strings = {c.value for v in node.values for c in ast.walk(v) if isinstance(c, ast.Constant)}
        if strings & units:
            lines.append(node.lineno)
    return lines


def test_no_second_quantity_unit_map():
    offenders = []
    for path in sorted(AGENT.rglob("*.py")):
        rel = path.relative_to(AGENT).as_posix()
        if path == TABLE or rel in SERVICE_AREA_ALLOWANCE:
            continue
        offenders += [f"agent/{rel}:{line}" for line in _unit_maps(ast.parse(path.read_text()))]
    assert not offenders, "quantity units defined outside settings/quantities.py: " + ", ".join(offenders)


def test_the_check_finds_a_second_map():
    # the scan above must be able to fail: the maps it replaced are found
    old = 'UNITS = {"velocity": "mm/s", "acceleration": "m/s^2", "envelope": "m/s^2"}'
    assert _unit_maps(ast.parse(old)) == [1]
    assert _unit_maps(ast.parse('SPANS = {"velocity": 1, "envelope": 2}')) == []
