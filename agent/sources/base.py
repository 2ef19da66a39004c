"""The source interface: how blocks of samples reach the daemon, whatever produces them.

Every input (a sound interface, a simulated scenario, a WAV recording, a raw stream on stdin) is a
:class:`Source` that hands out :class:`Chunk` records: consecutive blocks of frames in **volts at the
input**, float32, shape ``[n_frames, channels]``, each stamped with the time of its first frame.

Using a source
--------------
::

    source = open_source(config.acquisition, config_dir, full_scale_v=channel_full_scale_v(config))
    source.start()                      # SourceUnavailable: retry later with backoff
    try:
        while running:
            chunk = source.read(timeout_s=2.0)
            if chunk is None:
                if source.ended:        # a recording without loop, or EOF on a raw stream
                    break
                continue                # nothing within the timeout: a stall (counted in stats)
            ...                         # chunk.gap / chunk.overflow: reset filter state, count it
    finally:
        source.close()                  # bounded in time, never hangs

Threading contract
------------------
- ``start()``, ``read()`` and ``describe()`` are called from ONE consumer thread (the daemon's
  acquisition loop). ``close()`` may be called from any thread, is idempotent, never blocks longer
  than :data:`CLOSE_TIMEOUT_S` and makes a ``read()`` waiting in another thread return within its
  timeout. ``start()`` after ``close()`` reopens the input and counts a restart.
- A source may run its own producer (PortAudio's callback thread, for instance). The producer only
  copies the data, sets flags and puts it on a bounded queue without blocking (``put_nowait``); a full
  queue drops the block, counts an overflow and marks the next chunk ``gap=True``. It never logs and
  never allocates beyond the copy.
- ``stats`` may be read from any thread. Each counter has a single writer (the producer writes
  ``overflows`` and ``dropped_frames``, the consumer the rest), so no lock is needed; take
  ``stats.snapshot()`` for a consistent copy.
- ``read(timeout_s)`` returns a :class:`Chunk`, or ``None`` when nothing arrived within ``timeout_s``
  (a stall: the daemon reports it) or when the input has ``ended``. It raises
  :class:`~rotorwatch.errors.SourceUnavailable` when the input is gone (a device unplugged, a stream
  closed by its peer); the daemon then closes the source and reopens it with backoff. A timeout
  shorter than one block (``block_frames / fs_hz``) makes a healthy paced source look stalled: use
  at least twice the block duration.

Clocks
------
``Chunk.t0_s`` is the time of the chunk's first frame on the source's clock: POSIX wall-clock seconds
for live inputs (sound interface, raw stream), the scenario clock for simulated input (seconds since
the scenario started; see :mod:`rotorwatch.sources.simulated` for ``speedup``), and for a recording
the wall time of ``start()`` plus the position in the file. Within an unbroken run of chunks,
``t0_s`` advances by exactly ``n_frames / fs_hz``; a chunk with ``gap=True`` starts a new run.

Adding an input kind (a DAQ driver, for example)
------------------------------------------------
1. Write ``agent/sources/<kind>.py`` with a class derived from :class:`Source` (implement ``_open``,
   ``_read`` and ``_close``; keep the callback rules above) and a module-level function
   ``from_settings(acquisition, config_dir, *, full_scale_v=None, **options) -> Source`` that reads
   what it needs from the :class:`~rotorwatch.settings.models.Acquisition` table (``device``,
   ``sample_rate_hz``, ``channels``, ``block_frames``) and turns unusable values into one-line errors
   (:class:`~rotorwatch.errors.SourceUnavailable` when retrying may help, ``InputError`` or
   ``ConfigError`` when it cannot). Apply ``full_scale_v`` if the driver delivers digital full-scale
   units; ignore it if it already delivers volts. Open no device or stream before ``start()``.
2. Add ``"<kind>": "rotorwatch.sources.<kind>"`` to :data:`BUILTIN_SOURCES` below and the name to
   ``BUILTIN_SOURCE_KINDS`` in ``agent/settings/source_kinds.py`` (config validation rejects unknown
   kinds before any I/O, naming the known ones).
3. Add tests under ``tests/unit/sources/`` (the file-backed parts) and ``tests/integration/`` (the
   real hardware path, through a real driver or simulator of it).
A plugin living outside the package can instead call :func:`register_source` at import time.
Modules are imported only when their kind is opened, so the daemon never loads PortAudio unless a
sound interface is configured.
"""

from __future__ import annotations

import abc
import dataclasses
import importlib
import logging
import threading
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import ConfigError
from ..settings.source_kinds import add_source_kind

log = logging.getLogger(__name__)

#: ``close()`` returns after at most this many seconds, even if the driver hangs.
CLOSE_TIMEOUT_S = 2.0


# ---------------------------------------------------------------------------------------------- records
@dataclass(frozen=True, slots=True)
class Chunk:
    """A block of consecutive frames from a source.

    ``frames`` is float32 ``[n_frames, channels]`` in volts at the input. ``overflow`` is set when
    the driver or our queue reported an overrun before this chunk; ``gap`` when continuity before this
    chunk is broken: samples are known lost, or a simulated/looped stream jumped.
    """

    t0_s: float
    frames: np.ndarray
    overflow: bool = False
    gap: bool = False

    @property
    def n_frames(self) -> int:
        return int(self.frames.shape[0])

    def duration_s(self, fs_hz: float) -> float:
        return self.n_frames / fs_hz


@dataclass(slots=True)
class SourceStats:
    """Counters a source keeps about itself (each has one writing thread: see the module docstring)."""

    frames: int = 0          # frames handed out by read()
    chunks: int = 0          # chunks handed out by read()
    overflows: int = 0       # driver overruns + blocks dropped on a full queue
    dropped_frames: int = 0  # frames known lost (dropped blocks)
    gaps: int = 0            # chunks handed out with gap=True
    stalls: int = 0          # read() calls that returned None because nothing arrived in time
    restarts: int = 0        # start() calls after the first

    def snapshot(self) -> SourceStats:
        return dataclasses.replace(self)

    def as_dict(self) -> dict[str, int]:
        return dataclasses.asdict(self)


# ---------------------------------------------------------------------------------------------- source
class Source(abc.ABC):
    """Base of every input. Subclasses implement ``_open``, ``_read`` and ``_close``.

    The base class keeps the bookkeeping (stats, the started/closed state, the ``ended`` flag, the
    bounded close) so that each input only deals with its own driver.
    """

    #: the ``acquisition.source`` name of this kind
    kind: str = "?"
    #: what ``Chunk.t0_s`` counts: ``"wall"`` (POSIX seconds) or ``"scenario"`` (seconds of a scenario)
    clock: str = "wall"

    def __init__(self, fs_hz: float, channels: int, block_frames: int) -> None:
        if not fs_hz > 0:
            raise ValueError(f"fs_hz = {fs_hz!r}: must be positive")
        if channels < 1:
            raise ValueError(f"channels = {channels!r}: must be at least 1")
        self.fs_hz = float(fs_hz)
        self.channels = int(channels)
        self.block_frames = int(block_frames)
        self.stats = SourceStats()
        self._started_once = False
        self._running = False
        self._ended = False
        self._state_lock = threading.Lock()

    # -- public API ----------------------------------------------------------------------------
    @property
    def running(self) -> bool:
        return self._running

    @property
    def ended(self) -> bool:
        """True once a finite input is exhausted (no more chunks will come; not an error)."""
        return self._ended

    @property
    def block_duration_s(self) -> float:
        return self.block_frames / self.fs_hz

    def start(self) -> None:
        """Open the input and begin acquiring. Raises SourceUnavailable (retry) or InputError."""
        with self._state_lock:
            if self._running:
                return
            if self._started_once:
                self.stats.restarts += 1
            self._started_once = True
            self._ended = False
            self._open()
            self._running = True
        log.info("source started %s", self.describe())

    def read(self, timeout_s: float) -> Chunk | None:
        """The next chunk, or None if nothing came within ``timeout_s`` (or the input ended)."""
        if not self._running:
            if self._started_once:
                return None  # closed (possibly from another thread): nothing more
            raise RuntimeError(f"{self.kind} source: read() before start()")
        chunk = self._read(max(0.0, float(timeout_s)))
        if chunk is None:
            if not self._ended and self._running:
                self.stats.stalls += 1
            return None
        self.stats.frames += chunk.n_frames
        self.stats.chunks += 1
        if chunk.gap:
            self.stats.gaps += 1
        return chunk

    def close(self) -> None:
        """Stop acquiring and release the input; idempotent, bounded by CLOSE_TIMEOUT_S."""
        with self._state_lock:
            if not self._running:
                return
            self._running = False
        try:
            self._close()
        except Exception as exc:  # closing must never raise at the daemon
            log.warning("source %s: error while closing: %s", self.kind, exc)

    def check(self) -> None:
        """Raise what ``start()`` would refuse for good (InputError, ConfigError) without acquiring:
        a missing file, a wrong rate. Devices are not probed here (their absence is retried).
        The default has nothing to check."""
        return None

    def describe(self) -> str:
        """One line for logs and status: kind, where from, rate, channels."""
        return f"{self.kind} {self._where()} fs={self.fs_hz:g}Hz channels={self.channels}"

    def __enter__(self) -> Source:
        self.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    # -- for subclasses ------------------------------------------------------------------------
    @abc.abstractmethod
    def _open(self) -> None: ...

    @abc.abstractmethod
    def _read(self, timeout_s: float) -> Chunk | None:
        """Return the next chunk or None; set ``self._ended = True`` when a finite input is done."""

    @abc.abstractmethod
    def _close(self) -> None: ...

    def _where(self) -> str:
        return ""


# ------------------------------------------------------------------------------------------- helpers
class StreamClock:
    """Timestamps for live chunks: contiguous while the stream is unbroken, re-anchored otherwise.

    Each chunk's wall-clock arrival gives a measured start time ``arrival - n/fs`` (latency and
    jitter included). Within an unbroken run the clock just advances by ``n/fs`` so chunk times
    tile exactly; when the measured time departs from the running clock by more than
    ``resync_s`` (drift of the converter clock against the system clock, a stall, a gap) the clock
    re-anchors to the measurement.
    """

    def __init__(self, fs_hz: float, resync_s: float = 0.05) -> None:
        self.fs_hz = fs_hz
        self.resync_s = resync_s
        self._next: float | None = None

    def reset(self) -> None:
        self._next = None

    def stamp(self, arrival_s: float, n_frames: int, gap: bool = False) -> float:
        measured = arrival_s - n_frames / self.fs_hz
        if gap or self._next is None or abs(measured - self._next) > self.resync_s:
            t0 = measured
        else:
            t0 = self._next
        self._next = t0 + n_frames / self.fs_hz
        return t0


def bounded_call(fn: Callable[[], Any], timeout_s: float, what: str) -> bool:
    """Run ``fn`` in a daemon thread and wait at most ``timeout_s``; False if it did not finish.

    Used to close drivers that may hang (PortAudio's stop/abort on a stalled device): the thread is
    abandoned if it does not return, so the caller never hangs.
    """
    errors: list[BaseException] = []

    def target() -> None:
        try:
            fn()
        except BaseException as exc:  # reported below
            errors.append(exc)

    worker = threading.Thread(target=target, name=f"close-{what}", daemon=True)
    worker.start()
    worker.join(timeout_s)
    if worker.is_alive():
        log.warning("%s did not return within %.1f s; abandoned", what, timeout_s)
        return False
    if errors:
        log.warning("%s failed: %s", what, errors[0])
    return True


def as_frames(data: np.ndarray, channels: int, where: str) -> np.ndarray:
    """Check and convert a block to float32 ``[n, channels]`` (1-D is taken as one channel)."""
    arr = np.asarray(data)
    if arr.ndim == 1:
        arr = arr[:, None]
    if arr.ndim != 2 or arr.shape[1] != channels:
        raise ValueError(f"{where}: block shape {arr.shape}: expected (frames, {channels})")
    return np.ascontiguousarray(arr, dtype=np.float32)


def resolve_path(name: str, config_dir: Path | None) -> Path:
    """A file named in the config: absolute, or relative to the config file's folder."""
    p = Path(name).expanduser()
    if not p.is_absolute() and config_dir is not None:
        p = Path(config_dir) / p
    return p


def channel_full_scale_v(config: Any) -> list[float]:
    """Per input channel, the volts of digital full scale: the ``input_range_v`` of the sensor wired to
    it (1.0 V for channels no point uses; a tach channel too). For sources that deliver digital
    full-scale units (sound interfaces), this turns samples into volts at the input."""
    scale = [1.0] * int(config.acquisition.channels)
    for machine in config.machines:
        for point in machine.points:
            ch = point.sensor.channel
            if ch < len(scale):
                scale[ch] = float(point.sensor.input_range_v)
    return scale


def input_clock(acquisition: Any) -> dict[str, Any]:
    """How the times of this input relate to the wall clock, for people (page, metrics, MQTT).

    ``clock`` is ``wall`` for live input (a sound interface, a raw stream), ``simulated`` for a
    scenario and ``recording`` for a file; ``speedup`` is how many times faster than the wall clock
    those times run; ``notice`` says it in a few words (empty for the wall clock).
    """
    kind = acquisition.source
    speedup = float(acquisition.speedup)
    x = f"x{speedup:g}"
    if kind == "simulated":
        return {"clock": "simulated", "speedup": speedup,
                "notice": f"simulated time, {x}" if speedup != 1 else "simulated input, real time"}
    if kind == "recording":
        return {"clock": "recording", "speedup": speedup,
                "notice": f"recorded input, played {x}" if speedup != 1 else "recorded input, real time"}
    return {"clock": "wall", "speedup": 1.0, "notice": ""}


def channel_sensitivity_v_per_m_s2(config: Any) -> list[float | None]:
    """Per input channel, the sensitivity (V per m/s^2) of the sensor wired to it, None where no point
    uses the channel. A recording in g or m/s^2 plays through these into volts at the input."""
    sens: list[float | None] = [None] * int(config.acquisition.channels)
    for machine in config.machines:
        for point in machine.points:
            ch = point.sensor.channel
            if ch < len(sens):
                sens[ch] = float(point.sensor.volts_per_m_s2)
    return sens


def simulated_segment_s(config: Any) -> float:
    """Seconds of unbroken signal per segment of a sped-up simulation: the longest analysis window plus
    one update interval, so every segment holds at least one full window at an update time."""
    acq = config.acquisition
    longest = max(m.analysis.window_s for m in config.machines)
    return longest + acq.update_interval_s + 2 * acq.block_frames / acq.sample_rate_hz


def configured_source(config: Any, config_dir: Path | None) -> Source:
    """The source ``rotorwatch run`` opens for ``config`` (built, not started): the daemon's and
    ``rotorwatch check``'s, so check refuses what run would."""
    options: dict[str, Any] = {}
    if config.acquisition.source == "simulated":
        options["segment_s"] = simulated_segment_s(config)
    elif config.acquisition.source == "recording":
        options["volts_per_m_s2"] = channel_sensitivity_v_per_m_s2(config)
    return open_source(config.acquisition, config_dir, full_scale_v=channel_full_scale_v(config), **options)


# ------------------------------------------------------------------------------------------- registry
#: acquisition.source name -> module implementing ``from_settings(acquisition, config_dir, **options)``
BUILTIN_SOURCES: dict[str, str] = {
    "soundcard": "rotorwatch.sources.soundcard",
    "simulated": "rotorwatch.sources.simulated",
    "recording": "rotorwatch.sources.recording",
    "stdin": "rotorwatch.sources.stdin",
}

SourceFactory = Callable[..., Source]
_registered: dict[str, SourceFactory] = {}


def register_source(kind: str, factory: SourceFactory) -> None:
    """Register ``factory(acquisition, config_dir, **options) -> Source`` for ``acquisition.source == kind``;
    configurations accept the kind from then on."""
    _registered[kind] = factory
    add_source_kind(kind)


def source_kinds() -> list[str]:
    return sorted(set(BUILTIN_SOURCES) | set(_registered))


def _factory(kind: str) -> SourceFactory:
    if kind in _registered:
        return _registered[kind]
    module_name = BUILTIN_SOURCES.get(kind)
    if module_name is None:
        raise ConfigError([f"acquisition.source = {kind!r}: unknown input kind (known: {', '.join(source_kinds())})"])
    module = importlib.import_module(module_name)
    return module.from_settings


def open_source(acquisition: Any, config_dir: Path | None = None, *,
                full_scale_v: float | Sequence[float] | None = None, **options: Any) -> Source:
    """Build (not start) the source ``acquisition.source`` names.

    ``config_dir`` anchors relative paths (scenario, recording). ``full_scale_v`` (one value or one per
    channel, see :func:`channel_full_scale_v`) scales digital full scale to volts for sound
    interfaces; inputs that already deliver volts ignore it. Other ``options`` go to the kind's
    factory (``pace=False`` for simulated and recorded input, for instance).
    """
    factory = _factory(acquisition.source)
    return factory(acquisition, config_dir, full_scale_v=full_scale_v, **options)
