"""``rotorwatch analyze`` on real files written here: WAV (soundfile) and .npz; errors are one line."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
import soundfile

from rotorwatch.cli import main
from rotorwatch.commands.analyze import parse_bearing
from rotorwatch.kinematics import multiples_from_geometry

from .helpers import G_N, impact_train

REPO = Path(__file__).resolve().parents[3]

BEARING = "n=9,d=0.3126in,D=1.537in,angle=0"
BPFO_ORDER = multiples_from_geometry(9, 0.3126, 1.537).bpfo


def _run(capsys, *argv):
    rc = main(["analyze", *map(str, argv)])
    out = capsys.readouterr()
    return rc, out.out, out.err


def _faulty(fs=25600.0, seconds=6.0, rate=90.0):
    return impact_train(fs, seconds, rate, 4000.0, amplitude=6.0, seed=2) / G_N  # in g


def test_float_wav_in_g_finds_the_outer_race(tmp_path, capsys):
    fs, rate = 25600, 90.0
    f = tmp_path / "rec.wav"
    soundfile.write(f, _faulty(fs, rate=rate).astype(np.float32), fs, subtype="FLOAT")
    rpm = rate / BPFO_ORDER * 60
    rc, out, err = _run(capsys, f, "--rpm", f"{rpm:.3f}", "--bearing", BEARING, "--unit", "g", "--format", "json")
    assert rc == 0, err
    doc = json.loads(out)
    assert doc["fs_hz"] == fs and doc["rpm_source"] == "fixed"
    assert doc["findings"][0]["name"] == "BPFO" and doc["findings"][0]["bearing"] == "b1"
    first = doc["findings"][0]
    assert first["measured_hz"] == pytest.approx(rate, abs=0.2)
    assert first["expected_hz"] == pytest.approx(BPFO_ORDER * float(f"{rpm:.3f}") / 60, rel=1e-9)
    assert set(first) == {"name", "bearing", "series", "expected_hz", "measured_hz", "prominence_db", "severity_m_s2",
                          "harmonics_found", "sidebands_found", "kind", "severity_mm_s", "confidence", "rule",
                          "sentence", "evidence"}
    assert first["kind"] == "bearing" and "BPFO" in first["sentence"] and first["evidence"][0]["label"] == "BPFO"
    assert first["prominence_db"] > 12.0 and first["severity_m_s2"] > 0
    assert doc["envelope_peaks"][0]["matches"] == "BPFO" and doc["envelope_peaks"][0]["bearing"] == "b1"


def test_unit_option_scales_wav_samples(tmp_path, capsys):
    fs = 25600
    x = _faulty(fs)
    for unit, scale in (("g", 1.0), ("m/s2", G_N)):
        f = tmp_path / f"rec-{scale}.wav"
        soundfile.write(f, (x * scale).astype(np.float32), fs, subtype="FLOAT")
        rc, out, _ = _run(capsys, f, "--rpm", 1500, "--unit", unit, "--format", "json")
        assert rc == 0
        assert json.loads(out)["waveform"]["rms_m_s2"] == pytest.approx(np.std(x) * G_N, rel=1e-5)


def test_npz_text_summary(tmp_path, capsys):
    f = tmp_path / "rec.npz"
    np.savez(f, signal=_faulty(), fs=25600.0)
    rc, out, _ = _run(capsys, f, "--rpm", 90 / BPFO_ORDER * 60, "--bearing", BEARING + ",name=de", "--blades", 7)
    assert rc == 0
    assert "ISO 20816-3 zone" in out and "BPFO  bearing de" in out and "blade-pass" in out


def test_noise_gives_an_empty_findings_list(tmp_path, capsys):
    f = tmp_path / "noise.npz"
    np.savez(f, signal=np.random.default_rng(0).standard_normal(25600 * 6) * 0.05, fs=25600.0)
    rc, out, _ = _run(capsys, f, "--rpm", 1500, "--bearing", BEARING, "--format", "json")
    assert rc == 0 and json.loads(out)["findings"] == []


def _error(capsys, *argv):
    rc, out, err = _run(capsys, *argv)
    assert rc == 2 and out == ""
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("rotorwatch: ") and "Traceback" not in err, err
    return lines[0]


def test_unreadable_empty_short_and_slow_files(tmp_path, capsys):
    garbage = tmp_path / "garbage.wav"
    garbage.write_bytes(b"RIFF0000WAVEnot really")
    assert str(garbage) in _error(capsys, garbage, "--rpm", 1500) and "not a readable sound file" in _error(capsys, garbage, "--rpm", 1500)
    empty = tmp_path / "empty.wav"
    soundfile.write(empty, np.zeros(0, np.float32), 25600, subtype="FLOAT")
    assert _error(capsys, empty, "--rpm", 1500) == f"rotorwatch: {empty}: holds no samples"
    short = tmp_path / "short.npz"
    np.savez(short, signal=np.zeros(5000), fs=25600.0)
    line = _error(capsys, short, "--rpm", 1500)
    assert str(short) in line and "too short" in line and "at least" in line
    slow = tmp_path / "slow.npz"
    np.savez(slow, signal=np.zeros(5000), fs=500.0)
    line = _error(capsys, slow, "--rpm", 1500)
    assert str(slow) in line and "500 Hz is too low" in line and "at least 1000 Hz" in line
    low_for_band = tmp_path / "low.npz"
    np.savez(low_for_band, signal=np.zeros(4000 * 10), fs=4000.0)
    line = _error(capsys, low_for_band, "--rpm", 1500, "--envelope-band", "2000,3000")
    assert str(low_for_band) in line and "too low" in line and "band_hz" in line
    nofs = tmp_path / "nofs.npz"
    np.savez(nofs, signal=np.zeros(100))
    assert "lacks fs" in _error(capsys, nofs, "--rpm", 1500)
    nan = tmp_path / "nan.npz"
    np.savez(nan, signal=np.full(200000, np.nan), fs=25600.0)
    assert "not finite" in _error(capsys, nan, "--rpm", 1500)
    huge = tmp_path / "huge.npz"  # finite, but its squares overflow float64: once a traceback from the ISO zone
    np.savez(huge, signal=np.tile([1e300, -1e300], 100000), fs=25600.0, unit="m/s2")
    line = _error(capsys, huge, "--rpm", 1500)
    assert str(huge) in line and "beyond any accelerometer's range" in line
    assert "no such file" in _error(capsys, tmp_path / "missing.wav", "--rpm", 1500)


def test_bad_options(tmp_path, capsys):
    f = tmp_path / "rec.npz"
    np.savez(f, signal=_faulty(), fs=25600.0)
    assert "give --rpm" in _error(capsys, f)
    assert "give a length with its unit" in _error(capsys, f, "--rpm", 1500, "--bearing", "n=9,d=0.3126,D=1.537in")
    assert "unknown key" in _error(capsys, f, "--rpm", 1500, "--bearing", "n=9,d=8mm,D=40mm,phi=3")
    assert "element_diameter" in _error(capsys, f, "--rpm", 1500, "--bearing", "n=9,d=50mm,D=40mm")
    assert "LO,HI" in _error(capsys, f, "--rpm", 1500, "--envelope-band", "2000")
    line = _error(capsys, f, "--config", REPO / "config" / "university-rig.toml", "--point", "nde")
    assert "no point 'nde'" in line and "known: de" in line


def test_bearing_specs():
    # 1 in = 25.4 mm exactly (references.md section 5); mixed units are converted to mm
    assert parse_bearing("n=9,d=0.3126in,D=1.537in,angle=0", 1) == {
        "id": "b1", "elements": 9, "diameter_unit": "in", "element_diameter": 0.3126, "pitch_diameter": 1.537,
        "contact_angle_deg": 0.0}
    mixed = parse_bearing("name=nde,n=8,d=0.25in,D=40mm,angle=15", 2)
    assert mixed["id"] == "nde" and mixed["diameter_unit"] == "mm"
    assert mixed["element_diameter"] == pytest.approx(6.35) and mixed["pitch_diameter"] == 40.0
    assert parse_bearing("bpfo=3.5848,bpfi=5.4152,bsf=2.3566,ftf=0.39828", 3) == {
        "id": "b3", "bpfo": 3.5848, "bpfi": 5.4152, "bsf": 2.3566, "ftf": 0.39828}


def test_long_recordings_are_cut_to_max_seconds(tmp_path, capsys):
    f = tmp_path / "long.npz"
    np.savez(f, signal=_faulty(seconds=10.0), fs=25600.0)
    rc, out, _ = _run(capsys, f, "--rpm", 1500, "--max-seconds", 6, "--format", "json")
    doc = json.loads(out)
    assert rc == 0 and doc["n_samples"] == 6 * 25600 and doc["file_duration_s"] == pytest.approx(10.0)
    assert "must be a positive" in _error(capsys, f, "--rpm", 1500, "--max-seconds", 0)
