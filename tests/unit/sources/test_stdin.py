"""The raw float32 stream source: real files, a real FIFO, a real child process's stdin, real TCP."""

from __future__ import annotations

import os
import socket
import subprocess
import sys
import textwrap
import threading
import time

import numpy as np
import pytest

from rotorwatch.errors import InputError, SourceUnavailable
from rotorwatch.settings.models import Acquisition
from rotorwatch.sources.base import open_source
from rotorwatch.sources.stdin import RawStreamSource, parse_endpoint

FS = 8000
CH = 3


def _frames(n: int, seed: int = 5) -> np.ndarray:
    return np.random.default_rng(seed).uniform(-2, 2, size=(n, CH)).astype("<f4")


def _collect(src, n_expected: int, timeout_s: float = 5.0):
    chunks, got = [], 0
    deadline = time.monotonic() + timeout_s
    while got < n_expected and time.monotonic() < deadline:
        c = src.read(0.5)
        if c is not None:
            chunks.append(c)
            got += c.n_frames
        elif src.ended:
            break
    return chunks


def test_endpoint_parsing():
    assert parse_endpoint(None) == ("stdin", None)
    assert parse_endpoint("-") == ("stdin", None)
    assert parse_endpoint("tcp:127.0.0.1:7301") == ("tcp", ("127.0.0.1", 7301))
    assert parse_endpoint("data/raw.f32") == ("file", "data/raw.f32")
    for bad in ("tcp:127.0.0.1", "tcp::80", "tcp:host:99999", 3):
        with pytest.raises(InputError):
            parse_endpoint(bad)


def test_file_stream_exact_and_trailing_partial_frame_dropped(tmp_path):
    x = _frames(5000)
    path = tmp_path / "raw.f32"
    path.write_bytes(x.tobytes() + b"\x00\x01\x02")  # a cut-off last frame
    acq = Acquisition(source="stdin", device="raw.f32", sample_rate_hz=FS, channels=CH, block_frames=1024)
    src = open_source(acq, tmp_path)
    assert isinstance(src, RawStreamSource)
    src.start()
    chunks = _collect(src, 10**9)
    assert src.ended and src.read(0.1) is None
    src.close()
    np.testing.assert_array_equal(np.concatenate([c.frames for c in chunks]), x)
    assert chunks[0].frames.dtype == np.float32 and chunks[0].n_frames == 1024
    assert src.stats.frames == 5000


def test_missing_file_is_one_line(tmp_path):
    src = RawStreamSource(("file", "nope.f32"), FS, CH, 256, config_dir=tmp_path)
    with pytest.raises(InputError) as err:
        src.start()
    assert "nope.f32: no such file" in str(err.value) and "\n" not in str(err.value)


def test_fifo_with_pausing_writer(tmp_path):
    fifo = tmp_path / "feed.fifo"
    os.mkfifo(fifo)
    x = _frames(4000)
    src = RawStreamSource(("file", str(fifo)), FS, CH, 1000)
    src.start()

    def writer():
        fd = os.open(fifo, os.O_WRONLY)
        try:
            os.write(fd, x[:2000].tobytes())
            time.sleep(0.6)  # the producer stalls
            os.write(fd, x[2000:].tobytes())
        finally:
            os.close(fd)

    t = threading.Thread(target=writer)
    t.start()
    first = _collect(src, 2000)
    stalls = src.stats.stalls
    assert src.read(0.2) is None  # nothing within the timeout: a stall, no hang
    assert src.stats.stalls == stalls + 1
    rest = _collect(src, 2000)
    t.join(5)
    src.close()
    np.testing.assert_array_equal(np.concatenate([c.frames for c in first + rest]), x)
    assert src.stats.stalls >= 1 and not src.ended  # a FIFO never ends: its writer may come back


def test_real_stdin_of_a_child_process(tmp_path):
    x = _frames(20000)
    child = textwrap.dedent(f"""
        import sys, numpy as np
        from rotorwatch.sources.stdin import RawStreamSource
        src = RawStreamSource(("stdin", None), {FS}, {CH}, 4096)
        src.start()
        parts = []
        while True:
            c = src.read(5.0)
            if c is None:
                if src.ended:
                    break
                continue
            parts.append(c.frames)
        src.close()
        y = np.concatenate(parts)
        sys.stdout.write(f"{{y.shape[0]}} {{src.stats.chunks}} {{y.astype('<f4').tobytes().hex()[:64]}} {{float(y.sum()):.6f}}")
    """)
    proc = subprocess.run([sys.executable, "-c", child], input=x.tobytes(), capture_output=True, timeout=60)
    assert proc.returncode == 0, proc.stderr.decode()
    n, chunks, head, total = proc.stdout.decode().split()
    assert int(n) == 20000 and int(chunks) >= 5
    assert head == x.tobytes().hex()[:64]
    assert float(total) == pytest.approx(float(x.astype(np.float32).sum()), abs=1e-3)


def test_tcp_stream_stall_and_peer_close():
    server = socket.socket()
    server.bind(("127.0.0.1", 0))
    server.listen(1)
    port = server.getsockname()[1]
    x = _frames(3000)
    release = threading.Event()

    def serve():
        conn, _ = server.accept()
        with conn:
            raw = x.tobytes()
            conn.sendall(raw[:5000])      # not a whole number of 12-byte frames
            time.sleep(0.05)
            conn.sendall(raw[5000:20000])
            release.wait(5)               # stall until the test saw the stall
            conn.sendall(raw[20000:])

    t = threading.Thread(target=serve)
    t.start()
    try:
        src = RawStreamSource(("tcp", ("127.0.0.1", port)), FS, CH, 1000)
        src.start()
        first = _collect(src, 20000 // 12)
        assert src.read(0.2) is None
        release.set()
        rest = _collect(src, 3000 - sum(c.n_frames for c in first))
        got = np.concatenate([c.frames for c in first + rest])
        np.testing.assert_array_equal(got, x)
        t.join(5)
        with pytest.raises(SourceUnavailable, match="peer closed the connection"):
            for _ in range(20):
                src.read(0.2)
        src.close()
    finally:
        server.close()


def test_tcp_refused_is_source_unavailable():
    s = socket.socket()
    s.bind(("127.0.0.1", 0))
    port = s.getsockname()[1]
    s.close()  # nothing listens there now
    src = RawStreamSource(("tcp", ("127.0.0.1", port)), FS, CH, 1000)
    with pytest.raises(SourceUnavailable) as err:
        src.start()
    assert f"tcp:127.0.0.1:{port}: cannot connect" in str(err.value)
    assert err.value.retry


def test_close_from_another_thread_unblocks_read(tmp_path):
    fifo = tmp_path / "idle.fifo"
    os.mkfifo(fifo)
    src = RawStreamSource(("file", str(fifo)), FS, CH, 1000)
    src.start()
    got = []
    reader = threading.Thread(target=lambda: got.append(src.read(600.0)))  # far longer than the guard
    reader.start()
    threading.Timer(0.2, src.close).start()
    reader.join(30.0)  # a bound on the wait, not a speed target: only a read that close() left blocked
    assert not reader.is_alive(), "read() still blocked 30 s after close() from another thread"
    assert got == [None]
