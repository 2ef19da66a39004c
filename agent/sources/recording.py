"""A recording (a sound file or a .npz archive) played as if it were a device.

The file is read by :mod:`rotorwatch.recordings`, the reader every command uses, and handed out in
volts at the input. The unit is the file's own (WAV metadata, a ``FILE.json`` sidecar, a ``.npz``
``unit`` entry; a ``.npz`` without one is g): volts pass as they are, g and m/s^2 become volts through
the sensitivity of the sensor configured on each channel (``volts_per_m_s2``, one per channel). A file
that names no unit is taken as volts, as a sound interface would have recorded it; an integer PCM
file's full scale reads as +-1 V (libsndfile normalises it). The file must have the configured sample
rate and channel count: a mismatch is a one-line error, not a silent resample.

Paced (the default) a chunk is handed out when it is due at ``speedup`` times real time (see
:mod:`rotorwatch.sources.pacing`); ``pace=False`` hands chunks out as fast as they are read (tests,
batch replays). ``t0_s`` is the wall time of ``start()`` plus the file position in seconds of the
recording (continuing across loops), so with ``speedup = 1`` it tracks the wall clock.

At the end of the file: with ``loop`` the file starts again and the first chunk of the new pass has
``gap=True`` (the signal jumps); without, ``read()`` returns None and :attr:`ended` becomes True. The
last chunk of a pass may be shorter than ``block_frames``, so a loop seam always falls on a chunk edge.

Missing, unreadable, empty and truncated files raise :class:`InputError` with one line naming the file.
A file deleted or replaced while it plays is noticed within ``CHECK_S`` (its path no longer names the
file that was opened): ``read()`` raises :class:`InputError` naming it, so the input is reported
unavailable (and reopened, with back-off, when a file is put back) rather than playing on from the
deleted file's open handle.
"""

from __future__ import annotations

import logging
import os
import time
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import ConfigError, InputError
from ..recordings import Recording, open_recording
from ..settings.models import G_N
from .base import Chunk, Source, resolve_path
from .pacing import Pacer

log = logging.getLogger(__name__)

CHECK_S = 1.0  # how often (monotonic seconds) the path is checked to still name the opened file


class RecordingSource(Source):
    kind = "recording"

    def __init__(self, path: Path, fs_hz: float, channels: int, block_frames: int, *,
                 loop: bool = False, pace: bool = True, speedup: float = 1.0,
                 volts_per_m_s2: Sequence[float | None] | None = None) -> None:
        super().__init__(fs_hz, channels, block_frames)
        self.path = Path(path)
        self.volts_per_m_s2 = list(volts_per_m_s2) if volts_per_m_s2 is not None else None
        self.unit: str | None = None  # the unit of the file's samples, once opened
        self._scale: np.ndarray | None = None  # per channel: file unit -> volts
        self.loop = loop
        self.pace = pace
        self.speedup = float(speedup)
        self.passes = 0  # completed passes through the file
        self._file: Recording | None = None
        self._pacer: Pacer | None = None
        self._t_start = 0.0
        self._frames_out = 0
        self._gap_next = False
        self._identity: tuple[int, int] | None = None  # (st_dev, st_ino) of the file opened
        self._checked_at = 0.0

    def check(self) -> None:
        """What ``start()`` would refuse, without starting: the file, its rate, channels and unit."""
        self._open_file().close()

    def _open_file(self) -> Recording:
        rec = open_recording(self.path)
        problems = []
        if abs(rec.fs_hz - self.fs_hz) > 1e-6:
            problems.append(f"sample rate {rec.fs_hz:g} Hz but acquisition.sample_rate_hz = {self.fs_hz:g}")
        if rec.n_channels != self.channels:
            problems.append(f"{rec.n_channels} channel(s) but acquisition.channels = {self.channels}")
        if problems:
            rec.close()
            raise InputError(f"{self.path}: {'; '.join(problems)} (set acquisition to match the file)")
        unit = rec.unit.name or "volts"
        scale = np.ones(self.channels)
        if unit != "volts":
            per_unit = G_N if unit == "g" else 1.0
            sens = self.volts_per_m_s2 or []
            missing = [c for c in range(self.channels) if c >= len(sens) or sens[c] is None]
            if missing:
                rec.close()
                raise InputError(f"{self.path}: samples in {unit} ({rec.unit.origin}) but no sensor is configured "
                                 f"on channel(s) {', '.join(map(str, missing))} to turn them into volts")
            scale = np.array([per_unit * float(sens[c]) for c in range(self.channels)])  # type: ignore[arg-type]
        self.unit = unit
        self._scale = None if unit == "volts" else scale.astype(np.float32)
        if rec.unit.name is None:
            log.info("recording %s names no unit: its samples are taken as volts at the input", self.path)
        return rec

    def _file_identity(self) -> tuple[int, int] | None:
        try:
            st = os.stat(self.path)
        except OSError:
            return None
        return (st.st_dev, st.st_ino)

    def _check_still_there(self) -> None:
        now = time.monotonic()
        if now - self._checked_at < CHECK_S:
            return
        self._checked_at = now
        if self._file_identity() != self._identity:
            raise InputError(f"{self.path}: the recording was deleted or replaced while it played; "
                             "the input stops until a file is there again")

    def _open(self) -> None:
        self._identity = self._file_identity()
        self._checked_at = time.monotonic()
        self._file = f = self._open_file()
        f.seek(0)
        self._pacer = Pacer(self.fs_hz, rate=self.speedup) if self.pace else None
        self._t_start = time.time()
        self._frames_out = 0
        self._gap_next = self.stats.restarts > 0

    def _read(self, timeout_s: float) -> Chunk | None:
        f = self._file
        if f is None or self._ended:
            return None
        self._check_still_there()
        remaining = f.remaining
        if remaining <= 0:
            if not self.loop:
                self._ended = True
                log.info("recording %s ended after %d frames", self.path, self._frames_out)
                return None
            f.seek(0)
            self.passes += 1
            self._gap_next = True
            remaining = f.n_frames
        n = min(self.block_frames, remaining)
        if self._pacer is not None and not self._pacer.wait(n, timeout_s):
            return None
        data = f.read(n, dtype=np.float32)
        if data.shape[0] == 0:
            raise InputError(f"{self.path}: no samples at frame {f.tell()} of {f.n_frames} (damaged file)")
        if self._scale is not None:
            data = data * self._scale
        if self._pacer is not None:
            self._pacer.advance(data.shape[0])
        t0 = self._t_start + self._frames_out / self.fs_hz
        self._frames_out += data.shape[0]
        gap, self._gap_next = self._gap_next, False
        return Chunk(t0_s=t0, frames=np.ascontiguousarray(data, dtype=np.float32), gap=gap)

    def _close(self) -> None:
        f, self._file = self._file, None
        if f is not None:
            f.close()

    def _where(self) -> str:
        return f"file={str(self.path)!r}" + (" loop" if self.loop else "")


def from_settings(acquisition: Any, config_dir: Path | None = None, *, pace: bool = True,
                  full_scale_v: Any = None, **options: Any) -> RecordingSource:
    if not acquisition.recording:
        raise ConfigError(["acquisition.recording: source 'recording' needs the path of a recording "
                           "(a sound file or .npz), e.g. --set 'acquisition.recording=\"rec.wav\"'"])
    path = resolve_path(acquisition.recording, config_dir)
    return RecordingSource(path, acquisition.sample_rate_hz, acquisition.channels, acquisition.block_frames,
                           loop=acquisition.loop, pace=pace, speedup=acquisition.speedup, **options)
