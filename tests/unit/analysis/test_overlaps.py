"""``rotorwatch check`` warns where a bearing's defect lines stand in each other's way: two defects whose
searched lines lie within the search tolerance, or a defect on a 2xLF line (analysis/overlaps.py)."""

from __future__ import annotations

import re

import pytest

from rotorwatch.cli import main

CONFIG = """\
[acquisition]
source = "stdin"   # check refuses what run would: a simulated input needs a scenario
sample_rate_hz = 25600
channels = 1

[[machines]]
id = "m"
{extra}
  [machines.speed]
  mode = "fixed"
  rpm = {rpm}
  [[machines.bearings]]
  id = "b"
{bearing}
  [[machines.points]]
  id = "p1"
  bearing = "b"
  sensor = {{ channel = 0, sensitivity_mv_per_g = 100.0 }}
  [machines.analysis]
  window_s = 4.0
    [machines.analysis.envelope]
    band_hz = [2000.0, 6000.0]
"""
# CWRU drive-end bearing by its published multiples (dataset README; references.md section 2)
CWRU = "  bpfo = 3.5848\n  bpfi = 5.4152\n  bsf = 2.3566\n  ftf = 0.39828"


def _check(tmp_path, capsys, bearing: str, rpm: float = 1797.0, extra: str = "") -> list[str]:
    path = tmp_path / "m.toml"
    path.write_text(CONFIG.format(bearing=bearing, rpm=rpm, extra=extra))
    assert main(["check", str(path)]) == 0
    return [ln.strip() for ln in capsys.readouterr().out.splitlines() if ln.strip().startswith("warning:")]


def _pct(line: str) -> float:
    return float(re.search(r"(\d+\.\d+) % (apart|from)", line).group(1))


def test_harmonics_of_the_published_rig_multiples_that_overlap(tmp_path, capsys):
    # 3 x 3.5848 = 10.7544 and 2 x 5.4152 = 10.8304: 0.70 % apart; 2 x 3.5848 = 7.1696 and
    # 3 x 2.3566 = 7.0698: 1.39 % apart (published multiples; the default tolerance is 3 %)
    warnings = _check(tmp_path, capsys, CWRU)
    assert len(warnings) == 2, warnings
    pair = {w.split(": ", 2)[2].split(" are ")[0]: _pct(w) for w in warnings}
    assert pair == {"3x BPFO (10.75440x) and 2x BPFI (10.83040x)": pytest.approx(0.70, abs=0.01),
                    "2x BPFO (7.16960x) and 3x BSF (7.06980x)": pytest.approx(1.39, abs=0.01)}


def test_bpfi_on_twice_bsf(tmp_path, capsys):
    # invented geometry: 10 elements of 10 mm on a 61 mm pitch circle: BPFI = 5 (1 + 10/61) = 5.81967,
    # 2 x BSF = (61/10) (1 - (10/61)^2) = 5.93607 (formulas: references.md section 2), 1.96 % apart
    warnings = _check(tmp_path, capsys, "  elements = 10\n  element_diameter = 10.0\n  pitch_diameter = 61.0")
    assert any("BPFI (5.81967x) and 2x BSF (5.93607x)" in w and _pct(w) == pytest.approx(1.96, abs=0.01)
               for w in warnings), warnings


def test_no_warning_when_the_lines_stand_apart(tmp_path, capsys):
    # invented multiples whose searched lines (three harmonics, BSF also doubled) are all > 3 % apart
    assert _check(tmp_path, capsys, "  bpfo = 3.05\n  bpfi = 4.95\n  bsf = 1.75\n  ftf = 0.381") == []


def test_a_defect_on_twice_the_line_frequency(tmp_path, capsys):
    # 4-pole motor at 1470 r/min on 50 Hz mains, BPFO 4.08 x 24.5 Hz = 99.96 Hz: on 2xLF (100 Hz)
    bearing = "  bpfo = 4.08\n  bpfi = 5.92\n  bsf = 1.9\n  ftf = 0.408"
    warnings = _check(tmp_path, capsys, bearing, rpm=1470.0, extra="line_frequency_hz = 50")
    assert [w for w in warnings if "2xLF" in w and w.startswith("warning: bearing b: BPFO (99.96 Hz")], warnings
    assert _check(tmp_path, capsys, bearing, rpm=1470.0) == []  # no line frequency, nothing to say
