"""Units travel with every recording: ``simulate`` writes, ``analyze`` and ``replay --input`` read back.

A scenario of pure shaft tones (1x and 2x, given as velocity RMS in mm/s, no noise, no speed drift) is
written by ``rotorwatch simulate`` in every unit it can write (volts: the sensor's output; accel: m/s^2
at the housing) and analyzed back without saying the unit again. The overall velocity must be the
one the simulator was asked for: the root-sum-square of the tones' RMS values (RMS of a sum of sines
of different frequencies; Parseval, common practice), within 2 %. Both tones (24.7 and 49.4 Hz at 1482
r/min) sit well inside the 10-1000 Hz overall band, so the band's edge handling does not matter.
Before units travelled with the files, a volts file read as g came out about 10x too low.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest

from rotorwatch.cli import main
from rotorwatch.settings.models import G_N

REPO = Path(__file__).resolve().parents[2]
DEMO_CONFIG = REPO / "config" / "demo-fan.toml"
UNBALANCE_MM_S = 2.0
MISALIGNMENT_MM_S = 1.0
INTENDED_MM_S = math.hypot(UNBALANCE_MM_S, MISALIGNMENT_MM_S)


def _scenario(tmp_path: Path) -> Path:
    path = tmp_path / "tones.toml"
    path.write_text(f"""
[scenario]
name = "pure shaft tones"
config = "{DEMO_CONFIG}"
duration_days = 1
seed = 3

[healthy]
unbalance_mm_s = {UNBALANCE_MM_S}
misalignment_mm_s = {MISALIGNMENT_MM_S}
looseness_mm_s = 0.0
blade_pass_mm_s = 0.0
noise_m_s2 = 0.0
speed_drift_pct = 0.0
""")
    return path


@pytest.fixture(scope="module")
def written(tmp_path_factory):
    """quantity -> the WAV ``simulate`` wrote (8 s at 25.6 kHz, day 0.5)."""
    root = tmp_path_factory.mktemp("units")
    scenario = _scenario(root)
    out = {}
    for quantity in ("volts", "accel"):
        folder = root / quantity
        assert main(["simulate", str(scenario), "--out", str(folder), "--day", "0.5", "--seconds", "8",
                     "--fs", "25600", "--quantity", quantity]) == 0
        out[quantity] = next(folder.glob("*.wav"))
    return out


def _analyze(capsys, *argv) -> dict:
    rc = main(["analyze", *map(str, argv), "--format", "json"])
    captured = capsys.readouterr()
    assert rc == 0, captured.err
    return json.loads(captured.out)


@pytest.mark.parametrize("quantity, unit", [("volts", "volts"), ("accel", "m/s2")])
def test_simulate_then_analyze_gives_the_intended_overall_velocity(written, capsys, quantity, unit):
    wav = written[quantity]
    for point in ("de-h", "nde-h"):
        doc = _analyze(capsys, wav, "--config", DEMO_CONFIG, "--point", point)
        assert doc["unit"] == unit and doc["unit_from"] == "WAV metadata"
        assert doc["channel"] == (0 if point == "de-h" else 1)  # the point's sensor.channel
        assert doc["overall_velocity_mm_s"] == pytest.approx(INTENDED_MM_S, rel=0.02)
    # quick mode (no configuration): a volts file carries its sensors' sensitivities
    doc = _analyze(capsys, wav, "--rpm", 1482)
    assert doc["overall_velocity_mm_s"] == pytest.approx(INTENDED_MM_S, rel=0.02)


def test_the_sidecar_alone_also_tells_the_unit(written, capsys, tmp_path):
    import soundfile

    data, fs = soundfile.read(written["volts"], dtype="float32")
    bare = tmp_path / "bare.wav"
    soundfile.write(bare, data, fs, subtype="FLOAT")  # no metadata in the WAV
    bare.with_suffix(".json").write_text(written["volts"].with_suffix(".json").read_text())
    doc = _analyze(capsys, bare, "--config", DEMO_CONFIG, "--point", "de-h")
    assert doc["unit"] == "volts" and doc["unit_from"] == "sidecar bare.json"
    assert doc["overall_velocity_mm_s"] == pytest.approx(INTENDED_MM_S, rel=0.02)


def test_an_unknown_unit_is_refused_in_one_line_that_names_the_fix(written, capsys, tmp_path):
    import soundfile

    data, fs = soundfile.read(written["accel"], dtype="float32")
    bare = tmp_path / "unknown.wav"
    soundfile.write(bare, data, fs, subtype="FLOAT")
    rc = main(["analyze", str(bare), "--config", str(DEMO_CONFIG), "--point", "de-h"])
    err = capsys.readouterr().err.strip().splitlines()
    assert rc == 2 and len(err) == 1
    assert str(bare) in err[0] and "unit of its samples is unknown" in err[0] and "--unit m/s2" in err[0]
    # given, it reads right; --unit volts takes the sensitivity from --config
    doc = _analyze(capsys, bare, "--config", DEMO_CONFIG, "--point", "de-h", "--unit", "m/s2")
    assert doc["overall_velocity_mm_s"] == pytest.approx(INTENDED_MM_S, rel=0.02)
    volts = tmp_path / "volts-bare.wav"
    soundfile.write(volts, soundfile.read(written["volts"], dtype="float32")[0], fs, subtype="FLOAT")
    doc = _analyze(capsys, volts, "--config", DEMO_CONFIG, "--point", "de-h", "--unit", "volts")
    assert doc["overall_velocity_mm_s"] == pytest.approx(INTENDED_MM_S, rel=0.02)
    # volts without any sensitivity: one line naming the fix
    rc = main(["analyze", str(volts), "--rpm", "1482", "--unit", "volts"])
    err = capsys.readouterr().err.strip().splitlines()
    assert rc == 2 and len(err) == 1 and "--config" in err[0] and "sensitivity" in err[0]


def test_a_unit_option_that_contradicts_the_file_is_refused(written, capsys):
    rc = main(["analyze", str(written["volts"]), "--config", str(DEMO_CONFIG), "--point", "de-h", "--unit", "g"])
    err = capsys.readouterr().err.strip().splitlines()
    assert rc == 2 and len(err) == 1 and "says the samples are in volts" in err[0] and "drop --unit" in err[0]


def test_npz_unit_entry_and_its_default(written, capsys, tmp_path):
    import soundfile

    accel, fs = soundfile.read(written["accel"], dtype="float64")
    np.savez(tmp_path / "g.npz", signal=accel[:, 0] / G_N, fs=fs)  # no unit entry: g, said so
    doc = _analyze(capsys, tmp_path / "g.npz", "--rpm", 1482)
    assert doc["unit"] == "g" and "without a unit entry" in doc["unit_from"]
    assert doc["overall_velocity_mm_s"] == pytest.approx(INTENDED_MM_S, rel=0.02)
    rc = main(["analyze", str(tmp_path / "g.npz"), "--rpm", "1482"])
    out = capsys.readouterr().out
    assert rc == 0 and "in g (.npz without a unit entry: taken as g)" in out
    np.savez(tmp_path / "ms2.npz", signal=accel[:, 0], fs=fs, unit="m/s2")
    doc = _analyze(capsys, tmp_path / "ms2.npz", "--rpm", 1482)
    assert doc["unit"] == "m/s2" and doc["unit_from"] == ".npz unit entry"
    assert doc["overall_velocity_mm_s"] == pytest.approx(INTENDED_MM_S, rel=0.02)


@pytest.mark.parametrize("quantity", ["volts", "accel"])
def test_replay_input_honours_the_file_unit(written, capsys, quantity):
    rc = main(["replay", "--config", str(DEMO_CONFIG), "--input", str(written[quantity]), "--learning-updates", "1",
               "--format", "jsonl"])
    lines = [json.loads(x) for x in capsys.readouterr().out.splitlines()]
    assert rc == 0
    updates = [x for x in lines if x["type"] == "update"]
    assert len(updates) == 2  # 8 s in 4 s windows
    for u in updates:
        assert u["points"]["de-h"]["overall_mm_s"] == pytest.approx(INTENDED_MM_S, rel=0.02)
        assert u["points"]["de-h"]["health"]["ok"]
