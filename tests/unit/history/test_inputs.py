"""History input formats and their one-line errors (``rotorwatch replay --history``).

The signals are a made-up 30 Hz shaft line plus noise (test data only: the checks here are about
reading, times, units and errors, not about the analysis, which the real-data tests in
``tests/realdata/test_history.py`` hold to the CWRU recordings). The machine is the university rig of
``config/university-rig.toml`` (12 kHz, one point ``de`` on channel 0) with 1 s windows.
"""

from __future__ import annotations

import json
import zipfile
from pathlib import Path

import numpy as np
import pytest

from rotorwatch.cli import main
from rotorwatch.recordings import write_wav

REPO = Path(__file__).resolve().parents[3]
CONFIG = REPO / "config" / "university-rig.toml"
FS = 12000.0
SHORT = ["--set", "machines.rig.analysis.window_s=1.0", "--learning-updates", "2"]


def _signal(k: int, n: int = 12000, fs: float = FS, gain: float = 1.0) -> np.ndarray:
    rng = np.random.default_rng(k)
    t = np.arange(n) / fs
    return gain * (0.05 * np.sin(2 * np.pi * 29.95 * t) + 0.01 * rng.standard_normal(n))


def replay(capsys, history: Path, *extra: str) -> tuple[int, list[dict], str]:
    rc = main(["replay", "--config", str(CONFIG), "--history", str(history), *SHORT, "--format", "jsonl",
               "--workers", "1", *extra])
    out = capsys.readouterr()
    return rc, [json.loads(x) for x in out.out.splitlines() if x.strip()], out.err


def one_line_error(capsys, history: Path, *extra: str) -> str:
    rc = main(["replay", "--config", str(CONFIG), "--history", str(history), *SHORT, "--workers", "1", *extra])
    err = capsys.readouterr().err.strip()
    assert rc == 2, err
    assert len(err.splitlines()) == 1 and "Traceback" not in err, err
    return err


def updates(lines: list[dict]) -> list[dict]:
    return [x for x in lines if x["type"] == "update"]


# ----------------------------------------------------------------------------------------- writers
def wav_folder(root: Path, n: int = 5, *, rates: list[float] | None = None) -> Path:
    root.mkdir()
    for k in range(n):
        fs = rates[k] if rates else FS
        p = write_wav(root / f"rec-{k:03d}.wav", _signal(k, int(fs), fs), fs, "g")
        p.with_suffix(".json").write_text(json.dumps({"unit": "g", "time": f"2004-02-12T{10 + k:02d}:00:00Z"}))
    return root


def text_folder(root: Path, n: int = 5, columns: int = 2, delimiter: str = "\t") -> Path:
    root.mkdir()
    for k in range(n):
        data = np.stack([_signal(k + 10 * c) for c in range(columns)], axis=1)
        np.savetxt(root / f"2004.02.12.{10 + k:02d}.00.00", data, delimiter=delimiter, fmt="%.6g")
    return root


PATTERN = ["--time-pattern", "%Y.%m.%d.%H.%M.%S"]
TEXT = [*PATTERN, "--sample-rate", "12000", "--unit", "g", "--delimiter", "\\t"]


# ------------------------------------------------------------------------------------------- formats
def test_wav_folder_with_sidecar_times_keeps_gaps(tmp_path, capsys):
    root = wav_folder(tmp_path / "h", 4)
    (root / "rec-003.json").write_text(json.dumps({"unit": "g", "time": "2004-02-14T10:00:00Z"}))  # a 2-day gap
    rc, lines, err = replay(capsys, root)
    assert rc == 0, err
    dates = [u["date"] for u in updates(lines)]
    assert dates == ["2004-02-12T10:00:00Z", "2004-02-12T11:00:00Z", "2004-02-12T12:00:00Z", "2004-02-14T10:00:00Z"]
    assert updates(lines)[-1]["elapsed_s"] == pytest.approx(2 * 86400.0)


def test_text_folder_with_name_pattern_and_column_map(tmp_path, capsys):
    root = text_folder(tmp_path / "h", 3, columns=3)
    rc, lines, err = replay(capsys, root, *TEXT, "--columns", "de=2")
    assert rc == 0, err
    ups = updates(lines)
    assert [u["date"][11:16] for u in ups] == ["10:00", "11:00", "12:00"]
    # column 2 holds _signal(k + 20): a 0.05 g line at 29.95 Hz; RMS 0.0354 g = 0.347 m/s^2 -> velocity
    # 0.347 / (2 pi 29.95) m/s = 1.84 mm/s (the noise adds a little)
    assert ups[0]["points"]["de"]["overall_mm_s"] == pytest.approx(1.84, rel=0.05)


def test_text_from_a_description_file(tmp_path, capsys):
    text_folder(tmp_path / "h", 3, columns=1, delimiter=",")
    desc = tmp_path / "history.toml"
    desc.write_text('[history]\npath = "h"\ntime_pattern = "%Y.%m.%d.%H.%M.%S"\ndelimiter = ","\n'
                    'sample_rate_hz = 12000\nunit = "g"\ncolumns = { de = 0 }\n')
    rc, lines, err = replay(capsys, desc)
    assert rc == 0, err
    assert len(updates(lines)) == 3


def test_start_and_cadence(tmp_path, capsys):
    root = text_folder(tmp_path / "h", 3, columns=1)
    rc, lines, err = replay(capsys, root, "--sample-rate", "12000", "--unit", "g", "--start", "2010-05-01T00:00:00Z",
                            "--cadence", "10 min")
    assert rc == 0, err
    assert [u["date"] for u in updates(lines)] == ["2010-05-01T00:00:00Z", "2010-05-01T00:10:00Z", "2010-05-01T00:20:00Z"]


def test_one_npz_of_snapshots_and_its_zip_twin(tmp_path, capsys):
    snaps = np.stack([_signal(k) for k in range(4)])[:, None, :]  # [n, channels, samples]
    stamps = np.array([f"2004-02-12T10:{10 * k:02d}:00Z" for k in range(4)])
    np.savez(tmp_path / "h.npz", snapshots=snaps, timestamps=stamps, fs=FS, unit="g")
    rc, lines, err = replay(capsys, tmp_path / "h.npz")
    assert rc == 0, err
    from_npz = [u["points"]["de"]["overall_mm_s"] for u in updates(lines)]
    root = wav_folder(tmp_path / "w", 4)
    with zipfile.ZipFile(tmp_path / "w.zip", "w") as z:
        for f in sorted(root.iterdir()):
            z.write(f, f"w/{f.name}")
    rc, lines, err = replay(capsys, tmp_path / "w.zip")
    assert rc == 0, err
    # the same samples (float32 in the WAV) give the same values
    assert [u["points"]["de"]["overall_mm_s"] for u in updates(lines)] == pytest.approx(from_npz, rel=1e-5)


def test_rate_differs_from_the_config_unless_allowed(tmp_path, capsys):
    snaps = np.stack([_signal(k, 10000, 10000.0) for k in range(3)])
    stamps = np.array([f"2004-02-12T1{k}:00:00Z" for k in range(3)])
    np.savez(tmp_path / "h.npz", snapshots=snaps, timestamps=stamps, fs=10000.0, unit="g")
    err = one_line_error(capsys, tmp_path / "h.npz")
    assert "10000 Hz" in err and "12000 Hz" in err and "--data-rate" in err
    rc, lines, err = replay(capsys, tmp_path / "h.npz", "--data-rate")
    assert rc == 0, err
    assert len(updates(lines)) == 3


# ------------------------------------------------------------------------------ malformed, one line each
def test_wrong_column_count(tmp_path, capsys):
    root = text_folder(tmp_path / "h", 3, columns=2)
    np.savetxt(root / "2004.02.12.13.00.00", _signal(9)[:, None], delimiter="\t", fmt="%.6g")
    assert "has 1 column(s) where" in one_line_error(capsys, root, *TEXT)


def test_ragged_rows_inside_one_text_file(tmp_path, capsys):
    root = text_folder(tmp_path / "h", 2, columns=2)
    with open(root / "2004.02.12.10.00.00", "a") as f:
        f.write("0.1\n")
    assert "not a table of numbers" in one_line_error(capsys, root, *TEXT)


def test_a_point_reads_a_missing_column(tmp_path, capsys):
    root = text_folder(tmp_path / "h", 2, columns=2)
    assert "point 'de' reads column 5" in one_line_error(capsys, root, *TEXT, "--columns", "de=5")


def test_unparsable_time_in_a_name(tmp_path, capsys):
    root = text_folder(tmp_path / "h", 2, columns=1)
    (root / "2004.02.12.10.00.00").rename(root / "2004.13.45.10.00.00")
    assert "no time in the pattern" in one_line_error(capsys, root, *TEXT)


def test_unparsable_time_in_a_sidecar_and_in_an_archive(tmp_path, capsys):
    root = wav_folder(tmp_path / "h", 2)
    (root / "rec-001.json").write_text(json.dumps({"unit": "g", "time": "yesterday"}))
    assert "'yesterday': not an ISO 8601 date" in one_line_error(capsys, root)
    np.savez(tmp_path / "h.npz", snapshots=np.zeros((2, 12000)), timestamps=np.array(["2004-02-12", "soon"]), fs=FS,
             unit="g")
    assert "timestamps[1]" in one_line_error(capsys, tmp_path / "h.npz")


def test_no_time_at_all(tmp_path, capsys):
    root = text_folder(tmp_path / "h", 2, columns=1)
    assert "no time for this element" in one_line_error(capsys, root, "--sample-rate", "12000", "--unit", "g")


def test_mixed_rates(tmp_path, capsys):
    root = wav_folder(tmp_path / "h", 3, rates=[FS, FS, 11025.0])
    err = one_line_error(capsys, root, "--data-rate")
    assert "mixed rates" in err and "11025" in err


def test_empty_files(tmp_path, capsys):
    root = text_folder(tmp_path / "h", 2, columns=1)
    (root / "2004.02.12.12.00.00").write_text("")
    assert "holds no samples" in one_line_error(capsys, root, *TEXT)
    wavs = wav_folder(tmp_path / "w", 2)
    (wavs / "rec-001.wav").write_bytes(b"")
    assert "rec-001.wav" in one_line_error(capsys, wavs)
    (tmp_path / "nothing").mkdir()
    assert "holds no recordings" in one_line_error(capsys, tmp_path / "nothing")
    np.savez(tmp_path / "h.npz", snapshots=np.zeros((0, 12000)), timestamps=np.array([], dtype=str), fs=FS, unit="g")
    assert "holds no snapshots" in one_line_error(capsys, tmp_path / "h.npz")


def test_files_that_are_not_what_their_extension_says(tmp_path, capsys):
    wavs = wav_folder(tmp_path / "w", 2)
    (wavs / "rec-001.wav").write_text("0.1\t0.2\n" * 100)
    assert "not a readable sound file" in one_line_error(capsys, wavs)
    (tmp_path / "h.npz").write_text("time,value\n")
    assert "cannot read as .npz" in one_line_error(capsys, tmp_path / "h.npz")
    root = text_folder(tmp_path / "t", 2, columns=1)
    (root / "2004.02.12.10.00.00").write_bytes(bytes(range(256)) * 40)
    assert "not a delimited text file" in one_line_error(capsys, root, *TEXT)
    (tmp_path / "h.zip").write_bytes(b"PK\x03\x04 not really a zip")
    assert "not a readable zip or tar archive" in one_line_error(capsys, tmp_path / "h.zip")


def test_text_needs_a_rate_and_a_unit(tmp_path, capsys):
    root = text_folder(tmp_path / "h", 2, columns=1)
    assert "--sample-rate" in one_line_error(capsys, root, *PATTERN, "--unit", "g")
    assert "--unit" in one_line_error(capsys, root, *PATTERN, "--sample-rate", "12000")


def test_history_options_without_history_are_refused(capsys):
    rc = main(["replay", "--config", str(CONFIG), "--input", "x.npz", "--time-pattern", "%Y"])
    assert rc == 2
    assert "--time-pattern: applies to --history only" in capsys.readouterr().err


def test_replay_help_shows_the_history_examples_and_each_one_parses(capsys):
    import argparse
    import shlex

    from rotorwatch.commands import replay as replay_cmd

    with pytest.raises(SystemExit) as done:
        main(["replay", "--help"])
    assert done.value.code == 0
    out = capsys.readouterr().out
    examples = [line.strip() for line in out[out.index("examples:"):].splitlines()[1:] if line.strip()]
    assert sum("--history" in x for x in examples) >= 3, examples
    for line in examples:  # options that exist, values they take
        p = argparse.ArgumentParser(exit_on_error=False)
        replay_cmd.add_parser(p)
        args = p.parse_args(shlex.split(line)[2:])
        assert args.history or args.scenario or args.input


def test_analyze_reads_one_element_with_the_same_reader(tmp_path, capsys):
    root = text_folder(tmp_path / "h", 3, columns=2)
    rc = main(["analyze", str(root), "--config", str(CONFIG), "--at", "2004-02-12T11:10",
               *TEXT, "--columns", "de=1", "--format", "json"])
    out = capsys.readouterr()
    assert rc == 0, out.err
    doc = json.loads(out.out)
    assert doc["unit_from"].endswith("2004.02.12.11.00.00")  # the nearest element: 11:00
    # column 1 of element 1 holds _signal(11): the 0.05 g line at 29.95 Hz, 1.84 mm/s as above
    assert doc["overall_velocity_mm_s"] == pytest.approx(1.84, rel=0.05)
    rc = main(["analyze", str(root), "--at", "2004-02-12", "--rpm", "1797", *TEXT])
    assert rc == 2 and "--at needs --config" in capsys.readouterr().err
