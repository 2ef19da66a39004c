"""A generic raw stream as a source: interleaved little-endian float32 frames, in volts.

Any program can feed rotorwatch this way (a DAQ vendor's acquisition tool, ``sox ... -t f32 -``, a
bridge from another protocol): frame ``i`` is ``channels`` consecutive float32 values, no header.
``acquisition.device`` says where the stream comes from:

- absent or ``"-"``: standard input;
- ``"tcp:HOST:PORT"``: connect to a TCP server that sends the stream (for example
  ``tcp:127.0.0.1:7301``); a refused connection is :class:`SourceUnavailable` (retried);
- anything else: a file or named pipe, relative to the configuration file (a named pipe never
  ends: a writer may go and come back).

The stream is paced by its producer. ``read()`` waits with ``select`` up to its timeout, assembles
whole frames into chunks of up to ``block_frames`` (a short chunk when the producer pauses), and
stamps them with the wall-clock arrival (contiguous within an unbroken run, see
:class:`~rotorwatch.sources.base.StreamClock`). Once it has drained what was waiting, it sleeps until
about the rest of the block should be there (at most half of what the pipe holds) rather than waking
for every small write of the producer: with 4 channels at 51.2 kHz written in 10 ms pieces the
daemon's capture thread took 1.1 % of a core read piece by piece, 0.6 % this way (tests/bench/bench_daemon.py).
A pipe or FIFO is grown to 1 MiB where the system allows, so a producer can run about a second ahead
of a busy daemon without blocking. End of stream: for stdin and files, :attr:`ended`
becomes True and ``read()`` returns None (a trailing partial frame is reported and dropped); a TCP
peer that disconnects raises :class:`SourceUnavailable` so the daemon reconnects.
"""

from __future__ import annotations

import fcntl
import logging
import os
import select
import socket
import stat
import sys
import threading
import time
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import InputError, SourceUnavailable
from .base import Chunk, Source, StreamClock, resolve_path

log = logging.getLogger(__name__)

FRAME_DTYPE = np.dtype("<f4")
PIPE_BYTES = 1 << 20  # asked for a pipe or FIFO (Linux caps unprivileged pipes at /proc/sys/fs/pipe-max-size)
DEFAULT_BUFFER_BYTES = 65536  # what a pipe holds by default; assumed for sockets


def parse_endpoint(device: Any) -> tuple[str, Any]:
    """``("stdin", None) | ("tcp", (host, port)) | ("file", path-string)`` from ``acquisition.device``."""
    if device is None or device == "-":
        return "stdin", None
    if isinstance(device, int):
        raise InputError(f"acquisition.device = {device}: source 'stdin' takes '-', 'tcp:HOST:PORT' or a path")
    text = str(device)
    if text.startswith("tcp:"):
        host, sep, port = text[4:].rpartition(":")
        if not sep or not host or not port.isdigit() or not 0 < int(port) < 65536:
            raise InputError(f"acquisition.device = {text!r}: expected tcp:HOST:PORT, e.g. tcp:127.0.0.1:7301")
        return "tcp", (host.strip("[]"), int(port))
    return "file", text


class RawStreamSource(Source):
    kind = "stdin"

    def __init__(self, endpoint: tuple[str, Any], fs_hz: float, channels: int, block_frames: int, *,
                 config_dir: Path | None = None, connect_timeout_s: float = 5.0) -> None:
        super().__init__(fs_hz, channels, block_frames)
        self.endpoint = endpoint
        self.config_dir = config_dir
        self.connect_timeout_s = connect_timeout_s
        self.frame_bytes = FRAME_DTYPE.itemsize * channels
        self._fd: int | None = None
        self._owned: Any = None  # socket or file object we must close
        self._buffer = bytearray()
        self._clock = StreamClock(fs_hz)
        self._eof = False
        self._fd_lock = threading.Lock()
        self._reading = False
        self._nap_max_s = 0.0  # longest sleep between reads: half of what the pipe or socket holds

    def _where(self) -> str:
        kind, arg = self.endpoint
        if kind == "tcp":
            return f"tcp={arg[0]}:{arg[1]}"
        return "stdin" if kind == "stdin" else f"file={arg!r}"

    def _open(self) -> None:
        kind, arg = self.endpoint
        self._buffer.clear()
        self._clock.reset()
        self._eof = False
        if kind == "stdin":
            try:
                self._fd = sys.stdin.fileno()
            except (AttributeError, OSError, ValueError):
                raise InputError("stdin source: standard input is not available (closed or not a file)") from None
        elif kind == "tcp":
            host, port = arg
            try:
                sock = socket.create_connection((host, port), timeout=self.connect_timeout_s)
            except OSError as exc:
                raise SourceUnavailable(f"raw stream tcp:{host}:{port}: cannot connect: {exc.strerror or exc}") from None
            sock.setblocking(False)
            self._owned = sock
            self._fd = sock.fileno()
        else:
            path = resolve_path(arg, self.config_dir)
            # A named pipe is opened read-write (Linux): it then never reads as ended when its writer
            # restarts, and opening does not wait for a writer.
            flags = os.O_RDWR if path.is_fifo() else os.O_RDONLY
            try:
                fd = os.open(path, flags | os.O_NONBLOCK)
            except FileNotFoundError:
                raise InputError(f"{path}: no such file (acquisition.device of the raw stream source)") from None
            except OSError as exc:
                raise InputError(f"{path}: cannot open: {exc.strerror}") from None
            self._owned = fd
            self._fd = fd
        self._nap_max_s = 0.5 * self._grow_pipe(self._fd) / (self.frame_bytes * self.fs_hz)

    @staticmethod
    def _grow_pipe(fd: int) -> int:
        """Ask for a PIPE_BYTES pipe when ``fd`` is a pipe or FIFO; returns the bytes it holds."""
        try:
            if not stat.S_ISFIFO(os.fstat(fd).st_mode):
                return DEFAULT_BUFFER_BYTES
            try:
                fcntl.fcntl(fd, fcntl.F_SETPIPE_SZ, PIPE_BYTES)
            except OSError:
                pass  # above pipe-max-size, or not allowed: keep what it has
            return int(fcntl.fcntl(fd, fcntl.F_GETPIPE_SZ))
        except (OSError, AttributeError):  # AttributeError: no F_SETPIPE_SZ outside Linux
            return DEFAULT_BUFFER_BYTES

    def _fill(self, fd: int, deadline: float) -> None:
        """Read what is available from ``fd`` until a whole block is buffered, EOF, or the deadline."""
        want = self.block_frames * self.frame_bytes
        while len(self._buffer) < want and not self._eof and self._running:
            wait = max(0.0, min(0.1, deadline - time.monotonic()))
            try:
                ready, _, _ = select.select([fd], [], [], wait)
            except (OSError, ValueError):
                ready = [fd]  # closed under us: let os.read report it
            if ready:
                try:
                    data = os.read(fd, want - len(self._buffer))
                except BlockingIOError:
                    data = None
                except OSError as exc:
                    if not self._running:
                        return
                    raise SourceUnavailable(f"raw stream {self._where()}: read failed: {exc.strerror or exc}") from None
                if data == b"":
                    self._eof = True
                elif data:
                    self._buffer += data
                    missing = want - len(self._buffer)
                    if missing > 0:  # drained what was there: let the producer write the rest first
                        nap = min(missing / (self.frame_bytes * self.fs_hz), self._nap_max_s,
                                  deadline - time.monotonic(), 0.1)
                        if nap > 0:
                            time.sleep(nap)
                    continue  # more may be waiting
            if time.monotonic() >= deadline:
                return

    def _read(self, timeout_s: float) -> Chunk | None:
        with self._fd_lock:
            fd = self._fd
            if fd is None:
                return None
            self._reading = True
        try:
            self._fill(fd, time.monotonic() + timeout_s)
        finally:
            with self._fd_lock:
                self._reading = False
                if not self._running:
                    self._release()  # close() came from another thread while we were reading
        n_frames = len(self._buffer) // self.frame_bytes
        if n_frames == 0:
            if self._eof:
                self._finish_eof()
            return None
        n_bytes = n_frames * self.frame_bytes
        frames = np.frombuffer(bytes(self._buffer[:n_bytes]), dtype=FRAME_DTYPE).reshape(n_frames, self.channels)
        del self._buffer[:n_bytes]
        t0 = self._clock.stamp(time.time(), n_frames)
        return Chunk(t0_s=t0, frames=frames.astype(np.float32, copy=True))

    def _finish_eof(self) -> None:
        kind, arg = self.endpoint
        leftover = len(self._buffer)
        if kind == "tcp":
            self._buffer.clear()
            raise SourceUnavailable(f"raw stream tcp:{arg[0]}:{arg[1]}: the peer closed the connection")
        if leftover:
            log.warning("raw stream %s ended inside a frame: %d trailing byte(s) of a %d-byte frame dropped",
                        self._where(), leftover, self.frame_bytes)
            self._buffer.clear()
        self._ended = True

    def _close(self) -> None:
        # Called with _running already False. A read in another thread closes the descriptor itself
        # when it returns (within 0.1 s), so a descriptor is never closed under a select().
        with self._fd_lock:
            if not self._reading:
                self._release()

    def _release(self) -> None:
        owned, self._owned = self._owned, None
        self._fd = None
        if isinstance(owned, socket.socket):
            owned.close()
        elif isinstance(owned, int):
            os.close(owned)


def from_settings(acquisition: Any, config_dir: Path | None = None, *, full_scale_v: Any = None,
                  **options: Any) -> RawStreamSource:
    return RawStreamSource(parse_endpoint(acquisition.device), acquisition.sample_rate_hz, acquisition.channels,
                           acquisition.block_frames, config_dir=config_dir, **options)
