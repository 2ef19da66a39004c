"""Capture through real PortAudio from the private PulseAudio pipe sources (tests/conftest.py).

What is fed into a pipe source is what a sound interface would have digitised; the checks compare the
source's chunks against it sample by sample, and the spectrum against scipy.signal.welch. The device
failure paths are the real ones: a feed that stops writing (a stalled converter), a source unloaded from
the sound server (an interface unplugged), and the sound server dying (a driver error).
"""

from __future__ import annotations

import os
import re
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_array_equal
from scipy.signal import welch

import components
from rotorwatch.errors import SourceUnavailable
from rotorwatch.settings.models import G_N
from rotorwatch.sources.soundcard import SoundcardSource

pytestmark = pytest.mark.integration

REPO = Path(__file__).resolve().parents[2]
FS = 48000  # the rw_pipe_2ch source: 48000 Hz, 2 channels


def _tones(seconds: float, fs: int = FS) -> np.ndarray:
    t = np.arange(int(seconds * fs)) / fs
    return np.stack([0.5 * np.sin(2 * np.pi * 120 * t), 0.25 * np.sin(2 * np.pi * 3000 * t)], axis=1).astype(np.float32)


def _read_frames(src, n_frames: int, timeout_s: float):
    chunks, got = [], 0
    deadline = time.monotonic() + timeout_s
    while got < n_frames and time.monotonic() < deadline:
        chunk = src.read(timeout_s=1.0)
        if chunk is not None:
            chunks.append(chunk)
            got += chunk.n_frames
    return chunks


def test_soundcard_source_captures_the_fed_signal_at_real_time(audio_device):
    fed = _tones(2.0)
    src = SoundcardSource("rw_pipe_2ch", FS, 2, 4800, full_scale_v=[2.0, 0.5])
    src.start()  # capture first: a pipe source drops what is written while nothing records
    feed = audio_device.feed(fed, "rw_pipe_2ch")
    try:
        chunks = _read_frames(src, fed.shape[0], timeout_s=30.0)  # a bound, not a pace: load only makes it later
    finally:
        feed.stop()  # the writer before the stream (recipes)
        src.close()
    got = np.concatenate([c.frames for c in chunks])[: fed.shape[0]]
    assert got.dtype == np.float32
    # full_scale_v multiplies by powers of two: exact in float32, so the capture is bit-exact
    assert_array_equal(got / np.float32([2.0, 0.5]), fed)
    # spectrum: scipy.signal.welch of the captured volts peaks at the fed tones (10 Hz bins)
    f, pxx = welch(got[:, 0] / 2.0, FS, nperseg=4800)
    assert f[np.argmax(pxx)] == 120.0
    f, pxx = welch(got[:, 1] / 0.5, FS, nperseg=4800)
    assert f[np.argmax(pxx)] == 3000.0
    # RMS of a sine = amplitude / sqrt(2)
    np.testing.assert_allclose(np.sqrt(np.mean((got / np.float32([2.0, 0.5])) ** 2, axis=0)),
                               [0.5 / np.sqrt(2), 0.25 / np.sqrt(2)], rtol=1e-4)
    # chunks: the configured block size, wall-clock stamps that tile exactly
    assert {c.n_frames for c in chunks} == {4800}
    np.testing.assert_allclose(np.diff([c.t0_s for c in chunks]), 0.1, atol=1e-6)  # POSIX-scale doubles
    assert abs(chunks[0].t0_s - time.time()) < 30.0
    s = src.stats.snapshot()
    assert s.overflows == 0 and s.dropped_frames == 0 and s.gaps == 0
    assert s.chunks == len(chunks) and s.frames == 4800 * len(chunks)
    assert "rw_pipe_2ch" in src.describe()


def test_full_queue_drops_blocks_counts_them_and_flags_the_gap(audio_device):
    """A consumer that stops reading: the callback never blocks, whole blocks are dropped and counted,
    and the next chunk says gap=True. A frame counter on channel 0 shows exactly what was lost."""
    n = 4 * FS
    counter = np.arange(n, dtype=np.float64)
    fed = np.stack([counter / 2**24, np.zeros(n)], axis=1).astype(np.float32)  # exact in float32 below 2^24
    src = SoundcardSource("rw_pipe_2ch", FS, 2, 480, queue_s=0.0)  # the minimum queue: 8 blocks = 80 ms
    src.start()
    feed = audio_device.feed(fed, "rw_pipe_2ch")
    try:
        first = src.read(timeout_s=2.0)
        assert first is not None and not first.gap
        time.sleep(0.6)  # the consumer stalls; the callback keeps delivering
        chunks = _read_frames(src, int(0.6 * FS), timeout_s=5.0)
    finally:
        feed.stop()
        src.close()
    frames = [first, *chunks]
    index = [np.rint(c.frames[:, 0].astype(np.float64) * 2**24).astype(np.int64) for c in frames]
    s = src.stats.snapshot()
    assert s.overflows >= 1 and s.dropped_frames >= 480 and s.dropped_frames % 480 == 0
    flagged = [i for i, c in enumerate(frames) if c.gap]
    assert flagged and all(frames[i].overflow for i in flagged)
    lost = 0
    for i in range(1, len(frames)):
        jump = int(index[i][0] - index[i - 1][-1] - 1)
        assert np.all(np.diff(index[i]) == 1)           # inside a chunk nothing is ever lost
        assert (jump > 0) == frames[i].gap, (i, jump)   # a gap flag exactly where frames are missing
        lost += jump
    assert lost == s.dropped_frames


def test_stalled_feed_returns_none_within_timeout_and_close_is_bounded(audio_device):
    src = SoundcardSource("rw_pipe_2ch", FS, 2, 2400, stall_limit_s=2.0)
    src.start()
    feed = audio_device.feed(_tones(1.0), "rw_pipe_2ch", loop=True)
    try:
        assert len(_read_frames(src, 4800, timeout_s=5.0)) >= 2
        feed.pause()
        time.sleep(0.3)
        while src.read(timeout_s=0.05) is not None:  # drain what the server still held
            pass
        stalls_before = src.stats.stalls
        t0 = time.monotonic()
        assert src.read(timeout_s=0.5) is None
        # it waited for its timeout rather than giving up at once (a busy machine only makes it later)
        assert time.monotonic() - t0 >= 0.45
        assert src.stats.stalls == stalls_before + 1
        # still nothing after the stall limit: the source reports the device, it does not hang
        with pytest.raises(SourceUnavailable, match="no samples for"):
            for _ in range(10):
                src.read(timeout_s=0.5)
        feed.resume()
        # after a failure the daemon closes and reopens; data flow again
        src.close()
        src.start()
        assert src.stats.restarts == 1
        assert _read_frames(src, 4800, timeout_s=5.0)
        feed.pause()
        time.sleep(0.2)
    finally:
        feed.stop()
        src.close()  # abort() on a stalled stream, bounded by CLOSE_TIMEOUT_S inside the source


def _module_index(pulse_audio, source_name: str) -> str:
    listing = pulse_audio._pactl("list", "short", "modules").stdout
    for line in listing.splitlines():
        if f"source_name={source_name} " in line + " ":
            return line.split()[0]
    raise AssertionError(f"module of {source_name} not in:\n{listing}")


def test_unloaded_device_is_reported_and_reopen_names_the_devices(audio_device, pulse_audio):
    name = f"rw_gone_{os.getpid()}_{int(time.monotonic() * 1000) % 100000}"
    audio_device.add_pipe_source(name, FS, 2)
    src = SoundcardSource(name, FS, 2, 2400, stall_limit_s=1.5)
    src.start()
    feed = audio_device.feed(_tones(1.0), name, loop=True)
    try:
        assert _read_frames(src, 4800, timeout_s=5.0)
        feed.pause()
        time.sleep(0.1)
        done = pulse_audio._pactl("unload-module", _module_index(pulse_audio, name))
        assert done.returncode == 0, done.stderr
        with pytest.raises(SourceUnavailable) as err:
            for _ in range(20):  # 10 s of reads at most, well past the 1.5 s stall limit
                src.read(timeout_s=0.5)
        assert name in str(err.value) and "\n" not in str(err.value)
    finally:
        feed.stop()
        src.close()
    # reopening re-scans the devices. The ALSA name still exists (it is defined in .asoundrc) but the
    # sound server has no such source any more: opening fails with a one-line, retryable error.
    with pytest.raises(SourceUnavailable) as err:
        src.start()
    msg = str(err.value)
    assert name in msg and "\n" not in msg and err.value.retry
    assert not src.running


@pytest.fixture
def private_pulse(tmp_path_factory, audio_device):
    """A second, private PulseAudio server this test may kill; PortAudio is pointed at it."""
    root = Path(tempfile.mkdtemp(prefix="rw-pa-kill-"))
    server = components.PulseAudioServer(root, [("rw_doomed", FS, 2)]).start()
    with pytest.MonkeyPatch.context() as mp:
        for key, value in server.env.items():
            mp.setenv(key, value)
        audio_device.sd._terminate()
        audio_device.sd._initialize()
        try:
            yield server
        finally:
            server.stop()
    audio_device.sd._terminate()
    audio_device.sd._initialize()


def test_sound_server_dying_ends_the_stream_with_an_error(private_pulse):
    src = SoundcardSource("rw_doomed", FS, 2, 2400, stall_limit_s=30.0)
    src.start()
    feed = private_pulse.feed(_tones(1.0), "rw_doomed", loop=True)
    try:
        assert _read_frames(src, 4800, timeout_s=5.0)
        feed.pause()
        time.sleep(0.1)
        private_pulse.stop()  # SIGTERM to its PID: the driver errors out under the stream
        # the stream's own error, not the 30 s stall limit: the reads stop within 10 s, and the
        # message is the stopped stream's, not the stall's ("no samples for")
        with pytest.raises(SourceUnavailable, match="input stream stopped"):
            for _ in range(20):
                src.read(timeout_s=0.5)
    finally:
        src.close()


def test_missing_device_is_one_line_with_the_candidates(audio_device):
    src = SoundcardSource("no-such-interface", FS, 2, 1024)
    with pytest.raises(SourceUnavailable) as err:
        src.start()
    msg = str(err.value)
    assert "no-such-interface" in msg and "rw_pipe_2ch" in msg and "\n" not in msg
    too_many = SoundcardSource("rw_pipe_2ch", FS, 64, 1024)
    with pytest.raises(SourceUnavailable, match="only 32 input channel"):
        too_many.start()


def test_devices_command_lists_the_pipe_sources(audio_env):
    done = subprocess.run([sys.executable, "-m", "rotorwatch", "devices"], env=audio_env, capture_output=True,
                          text=True, timeout=60)
    assert done.returncode == 0, done.stderr
    assert "PortAudio" in done.stdout
    row = next(line for line in done.stdout.splitlines() if " rw_pipe_4ch " in line)
    assert "ALSA" in row and re.search(r"\b32\b", row)


def _soundcard_config(tmp_path: Path) -> Path:
    """config/demo-fan.toml, switched to capture from the rw_pipe_2ch sound device."""
    text = (REPO / "config" / "demo-fan.toml").read_text()
    text, n1 = re.subn(r'^source = "simulated".*$', 'source = "soundcard"\ndevice = "rw_pipe_2ch"', text, flags=re.M)
    text, n2 = re.subn(r"^sample_rate_hz = 51200", "sample_rate_hz = 48000", text, flags=re.M)
    assert n1 == n2 == 1
    path = tmp_path / "site.toml"
    path.write_text(text)
    return path


def test_devices_command_checks_the_configured_device(audio_env, tmp_path):
    config = _soundcard_config(tmp_path)
    done = subprocess.run([sys.executable, "-m", "rotorwatch", "devices", "--config", str(config)], env=audio_env,
                          capture_output=True, text=True, timeout=60)
    assert done.returncode == 0, done.stderr
    assert "device 'rw_pipe_2ch' accepts 2 channel(s) at 48000 Hz float32" in done.stdout
    bad = tmp_path / "bad.toml"
    bad.write_text(config.read_text().replace('device = "rw_pipe_2ch"', 'device = "rw_nowhere"'))
    done = subprocess.run([sys.executable, "-m", "rotorwatch", "devices", "--config", str(bad)], env=audio_env,
                          capture_output=True, text=True, timeout=60)
    assert done.returncode == 2 and "Traceback" not in done.stderr
    assert "rw_nowhere" in done.stderr and "rw_pipe_2ch" in done.stderr


def test_calibrate_measures_a_fed_reference_tone_within_one_percent(audio_device, audio_env, tmp_path):
    config = _soundcard_config(tmp_path)
    original = config.read_text()
    # A sensor of 96.5 mV/g on a reference shaker at 10 m/s^2 RMS, 159.2 Hz (common practice field
    # check): its output is 10 * 96.5 / 9.80665 mV RMS (g = 9.80665 m/s^2, standard gravity, CGPM 1901).
    true_mv_per_g = 96.5
    tone_rms_v = 10.0 * true_mv_per_g / G_N / 1000.0
    seconds = 5.0  # 159.2 Hz x 5 s = 796 whole periods: the looped feed has no seam
    t = np.arange(int(seconds * FS)) / FS
    rng = np.random.default_rng(9)
    ch0 = tone_rms_v * np.sqrt(2) * np.sin(2 * np.pi * 159.2 * t + 0.4) + 2e-4 * rng.standard_normal(t.size)
    ch0 += 0.002 * np.sin(2 * np.pi * 50 * t)  # mains hum on the cable
    ch1 = 0.05 * np.sin(2 * np.pi * 24.7 * t)
    fed = np.stack([ch0, ch1], axis=1).astype(np.float32)
    feed = audio_device.feed(fed, "rw_pipe_2ch", loop=True)
    try:
        done = subprocess.run([sys.executable, "-m", "rotorwatch", "calibrate", "--config", str(config),
                               "--point", "de-h", "--seconds", "3", "--write"],
                              env=audio_env, capture_output=True, text=True, timeout=60)
    finally:
        feed.stop()
    assert done.returncode == 0, done.stderr + done.stdout
    out = done.stdout
    m = re.search(r"sensitivity ([0-9.]+) mV/\(m/s\^2\) = ([0-9.]+) mV/g", out)
    assert m, out
    assert float(m.group(2)) == pytest.approx(true_mv_per_g, rel=0.01)
    assert float(m.group(1)) == pytest.approx(true_mv_per_g / G_N, rel=0.01)
    tone = re.search(r"tone ([0-9.]+) Hz, ([0-9.e-]+) V RMS", out)
    assert float(tone.group(1)) == pytest.approx(159.2, abs=0.01)
    assert float(tone.group(2)) == pytest.approx(tone_rms_v, rel=0.01)
    # --write changed that one number only and kept the old file
    new = config.read_text()
    assert (tmp_path / "site.toml.bak").read_text() == original
    changed = [(a, b) for a, b in zip(original.splitlines(), new.splitlines()) if a != b]
    assert len(changed) == 1 and len(original.splitlines()) == len(new.splitlines())
    before, after = changed[0]
    assert "sensitivity_mv_per_g = 100.0" in before and "channel = 0" in after
    written = float(re.search(r"sensitivity_mv_per_g = ([0-9.]+)", after).group(1))
    assert written == pytest.approx(true_mv_per_g, rel=0.01)
    assert re.sub(r"sensitivity_mv_per_g = [0-9.]+", "", before) == re.sub(r"sensitivity_mv_per_g = [0-9.]+", "", after)
