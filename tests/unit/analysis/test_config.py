"""Configuration files: the examples load, bad files give one line per problem, and ``rotorwatch check``
prints the derived frequency table."""

from __future__ import annotations

import re
import subprocess
import sys
from pathlib import Path

import pytest

from rotorwatch.analysis.plan import build_plan
from rotorwatch.cli import main
from rotorwatch.settings.loading import load_config

REPO = Path(__file__).resolve().parents[3]
EXAMPLES = sorted((REPO / "config").glob("*.toml"))

BASE = """\
[acquisition]
source = "stdin"
sample_rate_hz = 51200
channels = 2

[[machines]]
id = "fan"
  [machines.speed]
  mode = "fixed"
  rpm = 1480
  [[machines.bearings]]
  id = "de"
  elements = 9
  element_diameter = 12.7
  pitch_diameter = 62.0
  [[machines.points]]
  id = "p1"
  bearing = "de"
  sensor = { channel = 0, sensitivity_mv_per_g = 100.0 }
  [machines.analysis]
  lines = 3200
  window_s = 4.0
    [machines.analysis.envelope]
    band_hz = [2000.0, 7000.0]
  [[machines.bands]]
  name = "hf"
  quantity = "acceleration"
  low_hz = 2000
  high_hz = 10000
  levels = { warning = 2.0, alarm = 4.0 }
  [[machines.bands]]
  name = "or"
  quantity = "envelope"
  feature = "bpfo"
  bearing = "de"
"""

# (case, (old, new) replacement in BASE, fragments the message must contain)
BAD = [
    ("nyquist", ("high_hz = 10000", "high_hz = 30000"),
     ["machines[0].bands[0].high_hz = 30000", "below Nyquist (25600 Hz at 51200 Hz sampling)"]),
    ("fixed-without-rpm", ("  rpm = 1480\n", ""), ["machines[0].speed", "'fixed' needs rpm"]),
    ("unknown-key", ('  mode = "fixed"\n', '  mode = "fixed"\n  rpmm = 3\n'), ["machines[0].speed.rpmm = 3", "unknown key"]),
    ("warning-not-below-alarm", ("warning = 2.0, alarm = 4.0", "warning = 4.0, alarm = 4.0"),
     ["machines[0].bands[0].levels", "warning (4) must be below alarm (4)"]),
    ("band-names-unknown-bearing", ('feature = "bpfo"\n  bearing = "de"', 'feature = "bpfo"\n  bearing = "nde"'),
     ["machines[0]", "band 'or' names bearing 'nde'", "known: ['de']"]),
    ("rpm-not-a-number", ("rpm = 1480", 'rpm = "fast"'), ["machines[0].speed.rpm = 'fast'", "valid number"]),
    ("envelope-band-above-nyquist", ("band_hz = [2000.0, 7000.0]", "band_hz = [2000.0, 27000.0]"),
     ["machines[0].analysis.envelope.band_hz", "below Nyquist"]),
    ("envelope-band-reversed", ("band_hz = [2000.0, 7000.0]", "band_hz = [7000.0, 2000.0]"),
     ["machines[0].analysis.envelope", "low edge must be below the high edge"]),
    ("negative-speed", ("rpm = 1480", "rpm = -5"), ["machines[0].speed.rpm = -5", "greater than 0"]),
    ("channel-out-of-range", ("channel = 0,", "channel = 5,"), ["fan/p1 uses input channel 5", "acquisition.channels = 2"]),
    ("window-too-short", ("window_s = 4.0", "window_s = 0.2"),
     ["machines[0] (fan), point 'p1'", "window of 0.2 s (analysis.window_s) is too short", "lines"]),
    ("spectrum-longer-than-window", ("lines = 3200", "lines = 102400"),
     ["machines[0].analysis.window_s = 4", "shorter than", "102400 lines"]),
    ("toml-syntax", ("id = \"fan\"", "id = fan\""), ["TOML syntax"]),
]


@pytest.mark.parametrize("path", EXAMPLES, ids=[p.name for p in EXAMPLES])
def test_every_example_config_loads_and_plans(path):
    cfg = load_config(path)
    for m in cfg.machines:
        for p in m.points:
            plan = build_plan(m, p, cfg.acquisition.sample_rate_hz)
            assert plan.min_samples <= m.analysis.window_s * cfg.acquisition.sample_rate_hz


@pytest.fixture(scope="module")
def rig_recording(tmp_path_factory) -> str:
    """A 12 kHz one-channel recording in g (a .npz without a unit entry), as the rig configuration plays:
    an invented 1x tone at the rig's speed with a little noise."""
    import numpy as np

    path = tmp_path_factory.mktemp("rig") / "rig.npz"
    t = np.arange(12000 * 6) / 12000.0
    np.savez(path, signal=0.1 * np.sin(2 * np.pi * 29.95 * t) + 0.01 * np.random.default_rng(1).standard_normal(t.size),
             fs=12000.0)
    return f'acquisition.recording="{path}"'


def _runnable(path: Path, rig_recording: str) -> list[str]:
    """What a shipped configuration needs to run here: the rig configuration names no recording."""
    return ["--set", rig_recording] if path.name == "university-rig.toml" else []


@pytest.mark.parametrize("path", EXAMPLES, ids=[p.name for p in EXAMPLES])
def test_check_accepts_every_example(path, capsys, rig_recording):
    assert main(["check", str(path), *_runnable(path, rig_recording)]) == 0
    out = capsys.readouterr().out
    assert out.startswith(f"{path}: valid")


def test_check_refuses_what_run_would_refuse(capsys, tmp_path):
    """The rig configuration names no recording: `run` refuses it at start, so `check` does too (after the
    frequency table), in one line that names the fix; a recording of the wrong rate likewise."""
    rig = REPO / "config" / "university-rig.toml"
    assert main(["check", str(rig)]) == 2
    captured = capsys.readouterr()
    assert "BPFO" in captured.out  # the derived table is still printed
    lines = captured.err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith(f"rotorwatch: {rig}: acquisition.recording")
    assert "--set 'acquisition.recording=" in lines[0] and "rotorwatch run would refuse" in lines[0]
    import numpy as np

    np.savez(tmp_path / "fast.npz", signal=np.zeros(48000), fs=48000.0)
    assert main(["check", str(rig), "--set", f'acquisition.recording="{tmp_path / "fast.npz"}"']) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "sample rate 48000 Hz but acquisition.sample_rate_hz = 12000" in err[0]


def test_check_recognises_scenario_files(capsys):
    scenario = REPO / "config" / "scenarios" / "demo-outer-race.toml"
    assert main(["check", str(scenario)]) == 0
    out = capsys.readouterr().out
    assert out.startswith(f"{scenario}: valid scenario 'EF-3 drive-end outer-race spall': 30 days of machine ef3")
    assert f"rotorwatch replay --scenario {scenario}" in out and "BPFO" in out
    # a file that is neither: one line saying what check takes
    assert main(["check", str(REPO / "deploy" / "service-settings.toml")]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "machines: Field required" in err[0] and "a scenario file, with a [scenario] table" in err[0]


@pytest.mark.parametrize("path", sorted((REPO / "config" / "scenarios").glob("*.toml")), ids=lambda p: p.name)
def test_check_accepts_every_shipped_scenario(path, capsys):
    assert main(["check", str(path)]) == 0
    assert capsys.readouterr().out.startswith(f"{path}: valid scenario")


def test_base_config_is_valid(tmp_path, capsys):
    f = tmp_path / "base.toml"
    f.write_text(BASE)
    assert main(["check", str(f)]) == 0


@pytest.mark.parametrize("case,edit,fragments", BAD, ids=[c[0] for c in BAD])
def test_bad_config_gives_one_line_per_problem(case, edit, fragments, tmp_path, capsys):
    old, new = edit
    assert old in BASE
    f = tmp_path / f"{case}.toml"
    f.write_text(BASE.replace(old, new, 1))
    assert main(["check", str(f)]) == 2
    captured = capsys.readouterr()
    assert captured.out == ""
    lines = captured.err.strip().splitlines()
    assert lines, "no message"
    for line in lines:
        assert line.startswith(f"rotorwatch: {f}: "), line
    text = "\n".join(lines)
    for fragment in fragments:
        assert fragment in text, (fragment, text)
    assert "Traceback" not in text


def test_missing_file(tmp_path, capsys):
    assert main(["check", str(tmp_path / "nope.toml")]) == 2
    assert capsys.readouterr().err.strip() == f"rotorwatch: {tmp_path / 'nope.toml'}: no such file"


def test_check_as_a_process_exits_2_without_traceback(tmp_path):
    f = tmp_path / "bad.toml"
    f.write_text(BASE.replace("high_hz = 10000", "high_hz = 30000"))
    proc = subprocess.run([sys.executable, "-m", "rotorwatch", "check", str(f)], capture_output=True, text=True,
                          timeout=60, cwd=REPO)
    assert proc.returncode == 2
    assert "Traceback" not in proc.stderr
    assert proc.stderr.strip().count("\n") == 0 and "must be below Nyquist" in proc.stderr


def _table(text: str) -> dict[str, tuple[float, float]]:
    rows = {}
    for m in re.finditer(r"^\s+(1x|2x|BPFO|BPFI|BSF|2xBSF|FTF)\s+([0-9.]+)\s+([0-9.]+)\s*$", text, re.M):
        rows[m.group(1)] = (float(m.group(2)), float(m.group(3)))
    return rows


def test_check_table_matches_the_published_rig_frequencies(capsys, rig_recording):
    # CWRU Bearing Data Center published drive-end multiples BPFI 5.4152, BPFO 3.5848, FTF 0.39828,
    # BSF 2.3566 (shared dataset README; tolerance 5e-4, references.md section 2) and the dataset README's
    # expected lines at 1797 r/min: BPFO 107.36, BPFI 162.19, BSF 70.58 Hz
    assert main(["check", str(REPO / "config" / "university-rig.toml"), "--set", rig_recording]) == 0
    rows = _table(capsys.readouterr().out)
    assert rows["BPFI"][0] == pytest.approx(5.4152, abs=5e-4)
    assert rows["BPFO"][0] == pytest.approx(3.5848, abs=5e-4)
    assert rows["FTF"][0] == pytest.approx(0.39828, abs=5e-4)
    assert rows["BSF"][0] == pytest.approx(2.3566, abs=5e-4)
    # (the README rounds to 0.01 Hz from multiples that differ in the 5th digit: allow one unit)
    assert (rows["BPFO"][1], rows["BPFI"][1], rows["BSF"][1]) == pytest.approx((107.36, 162.19, 70.58), abs=0.011)
    assert rows["1x"][1] == pytest.approx(29.95, abs=0.005)


def test_check_table_at_a_given_speed(capsys, rig_recording):
    # CWRU DE at 1796 r/min (dataset README): BPFO 107.31, BPFI 162.09, BSF 70.54 Hz
    assert main(["check", str(REPO / "config" / "university-rig.toml"), "--rpm", "1796", "--set", rig_recording]) == 0
    rows = _table(capsys.readouterr().out)
    assert (rows["BPFO"][1], rows["BPFI"][1], rows["BSF"][1]) == pytest.approx((107.31, 162.09, 70.54), abs=0.011)
