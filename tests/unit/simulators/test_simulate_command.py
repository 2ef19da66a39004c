"""``rotorwatch simulate``: WAV files (read back with soundfile) equal the renderer's snapshots."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import soundfile

from rotorwatch.cli import main
from rotorwatch.simulators.render import ScenarioRenderer
from rotorwatch.simulators.scenario import load_scenario

REPO = Path(__file__).resolve().parents[3]
DEMO = REPO / "config" / "scenarios" / "demo-outer-race.toml"


def test_writes_volts_per_channel(tmp_path, capsys):
    rc = main(["simulate", str(DEMO), "--out", str(tmp_path), "--day", "12", "--seconds", "0.5"])
    assert rc == 0
    wav = tmp_path / "demo-outer-race-day012.00.wav"
    data, fs = soundfile.read(wav, dtype="float32")
    info = soundfile.info(wav)
    assert info.subtype == "FLOAT" and fs == 51200 and data.shape == (25600, 2)
    r = ScenarioRenderer(load_scenario(DEMO))
    ref = r.snapshot(12 * 86400.0, 0.5, 51200.0)
    assert np.array_equal(data[:, 0], ref["de-h"].astype(np.float32))
    assert np.array_equal(data[:, 1], ref["nde-h"].astype(np.float32))
    meta = json.loads(wav.with_suffix(".json").read_text())
    assert meta["unit"] == "volts" and meta["channels"]["0"]["point"] == "de-h"
    assert meta["true_rpm"] == pytest.approx(r.true_rpm(12 * 86400.0))
    assert str(wav) in capsys.readouterr().out


def test_writes_acceleration_when_asked(tmp_path):
    rc = main(["simulate", str(DEMO), "--out", str(tmp_path), "--day", "0", "--seconds", "0.25",
               "--quantity", "accel", "--fs", "25600"])
    assert rc == 0
    data, fs = soundfile.read(tmp_path / "demo-outer-race-day000.00.wav", dtype="float32")
    ref = ScenarioRenderer(load_scenario(DEMO)).snapshot_accel(0.0, 0.25, 25600.0)
    assert fs == 25600 and np.array_equal(data[:, 0], ref["de-h"].astype(np.float32))
    assert json.loads((tmp_path / "demo-outer-race-day000.00.json").read_text())["unit"] == "m/s2"


def test_default_days_are_first_and_last(tmp_path):
    assert main(["simulate", str(DEMO), "--out", str(tmp_path), "--seconds", "0.1"]) == 0
    assert sorted(p.name for p in tmp_path.glob("*.wav")) == ["demo-outer-race-day000.00.wav", "demo-outer-race-day030.00.wav"]


def test_bad_scenario_is_one_line_and_exit_2(tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text('[scenario]\nname = "x"\nconfig = "missing.toml"\nduration_days = 1\n')
    proc = subprocess.run([sys.executable, "-m", "rotorwatch", "simulate", str(bad), "--out", str(tmp_path / "o")],
                          capture_output=True, text=True, timeout=60)
    assert proc.returncode == 2
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1 and "scenario.config = 'missing.toml'" in lines[0] and "Traceback" not in proc.stderr
