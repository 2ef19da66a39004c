"""A sound file (WAV, FLAC, ... anything libsndfile reads) played as if it were a device.

Samples are read as float32 and taken as volts at the input: a float WAV holds volts directly; an
integer PCM file's full scale reads as +-1 V (libsndfile normalises it). The file must have the
configured sample rate and channel count: a mismatch is a one-line error, not a silent resample.

Paced (the default) a chunk is handed out when it is due at ``speedup`` times real time (see
:mod:`rotorwatch.sources.pacing`); ``pace=False`` hands chunks out as fast as they are read (tests,
batch replays). ``t0_s`` is the wall time of ``start()`` plus the file position in seconds of the
recording (continuing across loops), so with ``speedup = 1`` it tracks the wall clock.

At the end of the file: with ``loop`` the file starts again and the first chunk of the new pass has
``gap=True`` (the signal jumps); without, ``read()`` returns None and :attr:`ended` becomes True. The
last chunk of a pass may be shorter than ``block_frames``, so a loop seam always falls on a chunk edge.

Missing, unreadable, empty and truncated files raise :class:`InputError` with one line naming the file.
"""

from __future__ import annotations

import logging
import re
import time
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import InputError
from .base import Chunk, Source, resolve_path
from .pacing import Pacer

log = logging.getLogger(__name__)

# libsndfile's own header check: "data : 384000 (should be 191959)" when the file is cut short.
_TRUNCATED = re.compile(r"^\s*data\s*:\s*(\d+)\s*\(should be (\d+)\)", re.MULTILINE)


def open_sound_file(path: Path):
    """Open ``path`` with soundfile, turning every failure into a one-line InputError."""
    import soundfile

    if not path.exists():
        raise InputError(f"{path}: no such file")
    if path.is_dir():
        raise InputError(f"{path}: is a directory, expected a sound file")
    try:
        handle = soundfile.SoundFile(str(path))
    except soundfile.LibsndfileError as exc:
        reason = str(exc).split(":", 1)[-1].strip() if ":" in str(exc) else str(exc)
        raise InputError(f"{path}: not a readable sound file ({reason})") from None
    except OSError as exc:
        raise InputError(f"{path}: cannot read: {exc.strerror or exc}") from None
    try:
        info = soundfile.info(str(path)).extra_info
    except Exception:  # extra_info is advisory
        info = ""
    cut = _TRUNCATED.search(info)
    if cut is not None:
        declared, held = int(cut.group(1)), int(cut.group(2))
        handle.close()
        raise InputError(
            f"{path}: truncated: the header declares {declared} bytes of samples, the file holds {held} "
            "(the recording was cut short; rewrite it or use a complete copy)"
        )
    if handle.frames == 0:
        handle.close()
        raise InputError(f"{path}: holds no samples")
    return handle


class RecordingSource(Source):
    kind = "recording"

    def __init__(self, path: Path, fs_hz: float, channels: int, block_frames: int, *,
                 loop: bool = False, pace: bool = True, speedup: float = 1.0) -> None:
        super().__init__(fs_hz, channels, block_frames)
        self.path = Path(path)
        self.loop = loop
        self.pace = pace
        self.speedup = float(speedup)
        self.passes = 0  # completed passes through the file
        self._file = None
        self._pacer: Pacer | None = None
        self._t_start = 0.0
        self._frames_out = 0
        self._gap_next = False

    def _open(self) -> None:
        handle = open_sound_file(self.path)
        problems = []
        if abs(handle.samplerate - self.fs_hz) > 1e-6:
            problems.append(f"sample rate {handle.samplerate} Hz but acquisition.sample_rate_hz = {self.fs_hz:g}")
        if handle.channels != self.channels:
            problems.append(f"{handle.channels} channel(s) but acquisition.channels = {self.channels}")
        if problems:
            handle.close()
            raise InputError(f"{self.path}: {'; '.join(problems)} (set acquisition to match the file)")
        self._file = handle
        self._pacer = Pacer(self.fs_hz, rate=self.speedup) if self.pace else None
        self._t_start = time.time()
        self._frames_out = 0
        self._gap_next = self.stats.restarts > 0

    def _read(self, timeout_s: float) -> Chunk | None:
        f = self._file
        if f is None or self._ended:
            return None
        remaining = f.frames - f.tell()
        if remaining <= 0:
            if not self.loop:
                self._ended = True
                log.info("recording %s ended after %d frames", self.path, self._frames_out)
                return None
            f.seek(0)
            self.passes += 1
            self._gap_next = True
            remaining = f.frames
        n = min(self.block_frames, remaining)
        if self._pacer is not None and not self._pacer.wait(n, timeout_s):
            return None
        try:
            data = f.read(n, dtype="float32", always_2d=True)
        except Exception as exc:  # libsndfile error on a damaged block
            raise InputError(f"{self.path}: read failed at frame {f.tell()}: {exc}") from None
        if data.shape[0] == 0:
            raise InputError(f"{self.path}: no samples at frame {f.tell()} of {f.frames} (damaged file)")
        if self._pacer is not None:
            self._pacer.advance(data.shape[0])
        t0 = self._t_start + self._frames_out / self.fs_hz
        self._frames_out += data.shape[0]
        gap, self._gap_next = self._gap_next, False
        return Chunk(t0_s=t0, frames=np.ascontiguousarray(data), gap=gap)

    def _close(self) -> None:
        f, self._file = self._file, None
        if f is not None:
            f.close()

    def _where(self) -> str:
        return f"file={str(self.path)!r}" + (" loop" if self.loop else "")


def from_settings(acquisition: Any, config_dir: Path | None = None, *, pace: bool = True,
                  full_scale_v: Any = None, **options: Any) -> RecordingSource:
    if not acquisition.recording:
        raise InputError("acquisition.recording: source 'recording' needs the path of a sound file")
    path = resolve_path(acquisition.recording, config_dir)
    return RecordingSource(path, acquisition.sample_rate_hz, acquisition.channels, acquisition.block_frames,
                           loop=acquisition.loop, pace=pace, speedup=acquisition.speedup, **options)
