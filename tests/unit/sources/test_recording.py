"""The recording source on real sound files written with soundfile (libsndfile)."""

from __future__ import annotations

import os
import time

import numpy as np
import pytest
import soundfile as sf

from rotorwatch.errors import ConfigError, InputError
from rotorwatch.settings.models import Acquisition
from rotorwatch.sources.base import open_source
from rotorwatch.sources.recording import RecordingSource

FS = 48000


def _signal(n_frames: int, channels: int = 2, seed: int = 1) -> np.ndarray:
    rng = np.random.default_rng(seed)
    t = np.arange(n_frames) / FS
    cols = [0.5 * np.sin(2 * np.pi * (120 + 50 * c) * t) + 0.01 * rng.standard_normal(n_frames) for c in range(channels)]
    return np.stack(cols, axis=1).astype(np.float32)


def _drain(source, limit: int = 10_000):
    chunks = []
    for _ in range(limit):
        chunk = source.read(timeout_s=1.0)
        if chunk is None:
            break
        chunks.append(chunk)
    return chunks


def test_float_wav_streams_bit_exact_with_contiguous_clock(tmp_path):
    x = _signal(FS + 1234)
    path = tmp_path / "r.wav"
    sf.write(path, x, FS, subtype="FLOAT")
    src = RecordingSource(path, FS, 2, 4096, pace=False)
    src.start()
    chunks = _drain(src)
    assert src.ended and src.read(0.1) is None
    src.close()
    got = np.concatenate([c.frames for c in chunks])
    np.testing.assert_array_equal(got, x)
    assert all(c.frames.dtype == np.float32 and c.frames.shape[1] == 2 for c in chunks)
    assert [c.n_frames for c in chunks[:-1]] == [4096] * (len(chunks) - 1)
    steps = np.diff([c.t0_s for c in chunks])
    np.testing.assert_allclose(steps, 4096 / FS, rtol=0, atol=1e-6)
    assert not any(c.gap or c.overflow for c in chunks)
    assert src.stats.frames == x.shape[0] and src.stats.chunks == len(chunks)
    assert src.stats.stalls == 0  # the end of a file is not a stall


def test_pcm16_wav_reads_as_volts_of_full_scale(tmp_path):
    x = _signal(8000)
    path = tmp_path / "r16.wav"
    sf.write(path, x, FS, subtype="PCM_16")
    src = RecordingSource(path, FS, 2, 1000, pace=False)
    with src:
        got = np.concatenate([c.frames for c in _drain(src)])
    # 16-bit PCM: full scale 1.0 = 32768 counts; rounding error at most half a count
    np.testing.assert_allclose(got, x, rtol=0, atol=1.0 / 32768)


def test_loop_restarts_with_gap_flag(tmp_path):
    x = _signal(10000)
    path = tmp_path / "loop.wav"
    sf.write(path, x, FS, subtype="FLOAT")
    src = RecordingSource(path, FS, 2, 4096, loop=True, pace=False)
    src.start()
    chunks = [src.read(1.0) for _ in range(7)]
    src.close()
    # one pass = 4096 + 4096 + 1808 frames; the next pass starts on a chunk edge, flagged as a gap
    assert [c.n_frames for c in chunks] == [4096, 4096, 1808, 4096, 4096, 1808, 4096]
    assert [c.gap for c in chunks] == [False, False, False, True, False, False, True]
    np.testing.assert_array_equal(np.concatenate([c.frames for c in chunks[3:6]]), x)
    assert src.passes == 2 and not src.ended and src.stats.gaps == 2
    t0 = [c.t0_s for c in chunks]
    assert all(b > a for a, b in zip(t0, t0[1:]))


def test_paced_playback_keeps_real_time_and_speedup(tmp_path):
    x = _signal(FS // 2)  # 0.5 s
    path = tmp_path / "paced.wav"
    sf.write(path, x, FS, subtype="FLOAT")
    for speedup, expect_s in ((1.0, 0.5), (4.0, 0.125)):
        src = RecordingSource(path, FS, 2, 2400, pace=True, speedup=speedup)
        src.start()
        t_start = time.monotonic()
        n = sum(c.n_frames for c in _drain(src))
        elapsed = time.monotonic() - t_start
        src.close()
        assert n == x.shape[0]
        # pacing: a paced source never delivers ahead of its schedule (a busy machine can only make
        # it later; how fast it keeps up is for the benchmarks, not for a test)
        assert elapsed >= 0.95 * expect_s, (speedup, elapsed)


def test_paced_read_with_short_timeout_returns_none(tmp_path):
    path = tmp_path / "slow.wav"
    sf.write(path, _signal(FS), FS, subtype="FLOAT")
    src = RecordingSource(path, FS, 2, 24000, pace=True)  # 0.5 s blocks
    src.start()
    assert src.read(timeout_s=0.05) is None  # not due yet: None, counted as a stall
    assert src.stats.stalls == 1
    assert src.read(timeout_s=1.0) is not None
    src.close()


@pytest.mark.parametrize("make, expect", [
    (lambda p: None, "no such file"),
    (lambda p: p.write_bytes(b""), "not a readable sound file"),
    (lambda p: p.write_bytes(np.random.default_rng(3).bytes(5000)), "not a readable sound file"),
    (lambda p: p.mkdir(), "is a directory"),
])
def test_unreadable_files_give_one_line_errors(tmp_path, make, expect):
    path = tmp_path / "bad.wav"
    make(path)
    src = RecordingSource(path, FS, 2, 1024, pace=False)
    with pytest.raises(InputError) as err:
        src.start()
    msg = str(err.value)
    assert expect in msg and str(path) in msg and "\n" not in msg
    assert not src.running


def test_truncated_and_header_only_wavs_are_reported(tmp_path):
    whole = tmp_path / "whole.wav"
    sf.write(whole, _signal(FS), FS, subtype="FLOAT")
    data = whole.read_bytes()
    cut = tmp_path / "cut.wav"
    cut.write_bytes(data[: len(data) // 2 + 3])  # the writer died half way
    header = tmp_path / "header.wav"
    header.write_bytes(data[:30])
    for path, expect in ((cut, "truncated"), (header, "not a readable sound file")):
        with pytest.raises(InputError) as err:
            RecordingSource(path, FS, 2, 1024, pace=False).start()
        assert expect in str(err.value) and "\n" not in str(err.value), str(err.value)


def test_empty_and_mismatched_files(tmp_path):
    empty = tmp_path / "empty.wav"
    sf.write(empty, np.zeros((0, 2), np.float32), FS, subtype="FLOAT")
    with pytest.raises(InputError, match="holds no samples"):
        RecordingSource(empty, FS, 2, 1024).start()
    mono = tmp_path / "mono44.wav"
    sf.write(mono, _signal(1000, channels=1), 44100, subtype="FLOAT")
    with pytest.raises(InputError) as err:
        RecordingSource(mono, FS, 2, 1024).start()
    msg = str(err.value)
    assert "sample rate 44100 Hz" in msg and "1 channel(s) but acquisition.channels = 2" in msg


def test_open_source_resolves_recording_relative_to_config_dir(tmp_path):
    (tmp_path / "rec").mkdir()
    x = _signal(5000)
    sf.write(tmp_path / "rec" / "a.wav", x, FS, subtype="FLOAT")
    acq = Acquisition(source="recording", recording="rec/a.wav", sample_rate_hz=FS, channels=2, block_frames=1024)
    src = open_source(acq, tmp_path, pace=False)
    assert isinstance(src, RecordingSource)
    with src:
        got = np.concatenate([c.frames for c in _drain(src)])
    np.testing.assert_array_equal(got, x)
    assert "a.wav" in src.describe()
    with pytest.raises(ConfigError, match="needs the path"):
        open_source(Acquisition(source="recording"), tmp_path)


def test_restart_after_close_counts_and_replays(tmp_path):
    path = tmp_path / "r.wav"
    sf.write(path, _signal(3000), FS, subtype="FLOAT")
    src = RecordingSource(path, FS, 2, 1024, pace=False)
    src.start()
    first = _drain(src)
    src.close()
    src.start()
    second = _drain(src)
    src.close()
    assert src.stats.restarts == 1 and len(first) == len(second) == 3
    assert second[0].gap  # a reopened stream does not continue the previous one


def test_acceleration_recordings_play_as_volts_through_the_configured_sensitivity(tmp_path):
    """A file that names its unit (the one reader, rotorwatch.recordings) is turned into volts at the
    input: g x 9.80665 (standard gravity) x V per m/s^2, per channel."""
    from rotorwatch.recordings import write_wav
    from rotorwatch.settings.models import G_N

    x = _signal(6000)
    sens = [0.0102, 0.0051]
    npz = tmp_path / "g.npz"
    np.savez(npz, channels=x, fs=float(FS))  # no unit entry: g
    wav = tmp_path / "accel.wav"
    write_wav(wav, x, FS, "m/s2")
    for path, per_unit in ((npz, G_N), (wav, 1.0)):
        src = RecordingSource(path, FS, 2, 1024, pace=False, volts_per_m_s2=sens)
        with src:
            got = np.concatenate([c.frames for c in _drain(src)])
        assert src.unit == ("g" if path is npz else "m/s2")
        np.testing.assert_allclose(got, x * per_unit * np.array(sens), rtol=1e-6)
    with pytest.raises(InputError) as err:
        RecordingSource(npz, FS, 2, 1024, pace=False, volts_per_m_s2=[0.0102, None]).start()
    assert "no sensor is configured on channel(s) 1" in str(err.value) and "\n" not in str(err.value)


def test_check_reports_what_start_would_refuse(tmp_path):
    sf.write(tmp_path / "mono.wav", _signal(1000, channels=1), 44100, subtype="FLOAT")
    with pytest.raises(InputError, match="sample rate 44100 Hz"):
        RecordingSource(tmp_path / "mono.wav", FS, 2, 1024).check()
    with pytest.raises(InputError, match="no such file"):
        RecordingSource(tmp_path / "missing.wav", FS, 2, 1024).check()


def test_a_recording_deleted_while_it_plays_is_noticed(tmp_path, monkeypatch):
    import rotorwatch.sources.recording as recording

    monkeypatch.setattr(recording, "CHECK_S", 0.0)  # check the path on every read
    path = tmp_path / "plays.wav"
    sf.write(path, _signal(FS * 2), FS, subtype="FLOAT")
    src = RecordingSource(path, FS, 2, 4096, pace=False)
    src.start()
    assert src.read(1.0) is not None
    path.unlink()  # the open handle could go on playing the deleted file
    with pytest.raises(InputError, match=r"plays\.wav: the recording was deleted or replaced while it played"):
        src.read(1.0)
    src.close()
    sf.write(path, _signal(FS, seed=2), FS, subtype="FLOAT")  # a new file under the same name
    src.start()
    assert src.read(1.0) is not None
    other = tmp_path / "other.wav"
    sf.write(other, _signal(FS, seed=3), FS, subtype="FLOAT")
    os.replace(other, path)  # replaced while it plays
    with pytest.raises(InputError, match="deleted or replaced"):
        src.read(1.0)
    src.close()
