"""rotorwatch.recordings: the one reader of recordings, and the unit that travels with them."""

from __future__ import annotations

import json

import numpy as np
import pytest
import soundfile

from rotorwatch.errors import InputError
from rotorwatch.recordings import decide_unit, open_recording, wav_comment, write_wav


def test_a_written_wav_names_its_unit_and_sensitivities_in_its_own_metadata(tmp_path):
    x = np.random.default_rng(1).standard_normal((4800, 3)).astype(np.float32)
    path = write_wav(tmp_path / "r.wav", x, 48000, "volts", [0.0102, None, 0.0051])
    # read back with libsndfile directly: the INFO comment is in the file itself
    assert soundfile.SoundFile(str(path)).comment == wav_comment("volts", [0.0102, None, 0.0051])
    with open_recording(path) as rec:
        assert (rec.kind, rec.fs_hz, rec.n_frames, rec.n_channels) == ("sound", 48000.0, 4800, 3)
        assert rec.unit.name == "volts" and rec.unit.origin == "WAV metadata"
        assert rec.unit.volts_per_m_s2 == (0.0102, None, 0.0051)
        np.testing.assert_array_equal(rec.read_all(), x.astype(np.float64))
        assert decide_unit(rec, None) == ("volts", "WAV metadata")


def test_units_from_a_sidecar_and_from_npz(tmp_path):
    x = np.zeros((2000, 1), np.float32)
    soundfile.write(tmp_path / "s.wav", x, 8000, subtype="FLOAT")
    (tmp_path / "s.json").write_text(json.dumps({"unit": "m/s^2"}))
    with open_recording(tmp_path / "s.wav") as rec:
        assert rec.unit.name == "m/s2" and rec.unit.origin == "sidecar s.json"
    np.savez(tmp_path / "n.npz", signal=np.zeros(100), fs=1000.0)
    with open_recording(tmp_path / "n.npz") as rec:
        assert rec.unit.name == "g" and "without a unit entry" in rec.unit.origin
        assert decide_unit(rec, "volts") == ("volts", "--unit volts")  # a default yields to the option
    np.savez(tmp_path / "v.npz", channels=np.zeros((100, 2)), fs_hz=1000.0, unit="volts")
    with open_recording(tmp_path / "v.npz") as rec:
        assert rec.unit.name == "volts" and rec.n_channels == 2
        with pytest.raises(InputError, match="drop --unit"):
            decide_unit(rec, "g")


def test_named_npz_arrays_in_the_order_asked(tmp_path):
    np.savez(tmp_path / "p.npz", fs_hz=1000.0, unit="volts", b=np.ones(50), a=np.zeros(50))
    with open_recording(tmp_path / "p.npz", names=["a", "b", "c"]) as rec:
        assert rec.channel_names == ("a", "b")
        assert rec.read(10)[:, 1].tolist() == [1.0] * 10
    with pytest.raises(InputError) as err:
        open_recording(tmp_path / "p.npz")
    assert "no samples" in str(err.value) and "'signal'" in str(err.value)


@pytest.mark.parametrize("make, expect", [
    (lambda p: None, "no such file"),
    (lambda p: p.mkdir(), "is a directory"),
    (lambda p: p.write_bytes(b"RIFF0000WAVEnot really"), "not a readable sound file"),
    (lambda p: ((p.parent / "x.json").write_text('{"unit": "furlongs"}'),
                soundfile.write(p, np.zeros(10), 1000, subtype="FLOAT")), "unit = 'furlongs'"),
])
def test_bad_files_are_one_line_errors(tmp_path, make, expect):
    path = tmp_path / "x.wav"
    make(path)
    with pytest.raises(InputError) as err:
        open_recording(path)
    assert expect in str(err.value) and str(path.parent) in str(err.value) and "\n" not in str(err.value)


def test_an_unknown_unit_names_the_fix(tmp_path):
    soundfile.write(tmp_path / "u.wav", np.zeros(100), 1000, subtype="FLOAT")
    with open_recording(tmp_path / "u.wav") as rec:
        with pytest.raises(InputError) as err:
            decide_unit(rec, None)
    assert "unknown" in str(err.value) and "--unit g" in str(err.value) and "--unit volts" in str(err.value)
    soundfile.write(tmp_path / "i.wav", np.zeros(100), 1000, subtype="PCM_16")
    with open_recording(tmp_path / "i.wav") as rec:
        assert rec.integer and decide_unit(rec, None)[0] == "volts"  # fractions of full scale
