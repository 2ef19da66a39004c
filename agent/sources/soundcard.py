"""A sound interface as a source, through PortAudio (the ``sounddevice`` package).

Capture runs in PortAudio's callback thread. The callback keeps sounddevice's real-time contract
(``Stream`` docstring; ``examples/rec_unlimited.py``): it copies the block, notes the overflow flag
and the arrival time, and puts the copy on a bounded queue with ``put_nowait``. Nothing else: no
logging, no locks, no waiting. A full queue (the consumer fell behind by more than ``queue_s``
seconds) drops the block, counts an overflow and marks the next chunk ``gap=True``.

Failure handling, as measured through PulseAudio's ALSA plugin (tests/integration/test_capture.py):

- A device that stops delivering (a stalled converter, a source removed from the sound server) keeps
  the stream "active" with no callbacks. ``read()`` returns None per timeout (stalls) and raises
  :class:`SourceUnavailable` once nothing has come for ``stall_limit_s``.
- A driver error (the server dies, a USB interface is unplugged) ends the stream; the finished
  callback fires and the next ``read()`` raises :class:`SourceUnavailable` within 0.1 s.
- ``stream.stop()`` can wait forever for a drain once data stop; ``close()`` therefore uses
  ``abort()`` in a watchdog thread and returns after at most ``CLOSE_TIMEOUT_S``.
- PortAudio lists devices only when it initialises. Reopening after a failure re-initialises it (when
  no other stream of ours is open) so a re-plugged interface is found again.

``sounddevice`` is imported only here and only when a sound interface is used; a missing PortAudio
library becomes one line telling what to install.
"""

from __future__ import annotations

import logging
import queue
import threading
import time
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import SourceUnavailable
from .base import CLOSE_TIMEOUT_S, Chunk, Source, StreamClock, bounded_call

log = logging.getLogger(__name__)

_streams_lock = threading.Lock()
_open_streams = 0  # streams of ours currently open: PortAudio may be re-initialised only at zero


def portaudio():
    """The ``sounddevice`` module, or a one-line SourceUnavailable when PortAudio is missing."""
    try:
        import sounddevice
    except OSError as exc:  # "PortAudio library not found"
        err = SourceUnavailable(
            f"sound interface: {exc} (install it: apt-get install libportaudio2)"
        )
        err.retry = False
        raise err from None
    return sounddevice


# Each PortAudio re-initialisation keeps about 12 KB that is never given back (measured: 300 re-inits
# added 3.5 MB). While a device stays unplugged the daemon keeps retrying, so re-scans are spaced out:
# 1 s after the first, doubling to at most 10 minutes (under 2 MB a day), and the spacing starts over
# once a stream opens again.
_REINIT_FIRST_S = 1.0
_REINIT_MAX_S = 600.0
_reinit_state = {"next": 0.0, "interval": _REINIT_FIRST_S}


def reinitialise() -> bool:
    """Re-scan the devices (PortAudio enumerates only at initialisation). Skipped while a stream is
    open, because terminating PortAudio would close it, and while the spacing above says to wait;
    returns whether it ran."""
    sd = portaudio()
    with _streams_lock:
        if _open_streams:
            return False
        now = time.monotonic()
        if now < _reinit_state["next"]:
            return False
        sd._terminate()
        sd._initialize()
        _reinit_state["next"] = now + _reinit_state["interval"]
        _reinit_state["interval"] = min(_reinit_state["interval"] * 2.0, _REINIT_MAX_S)
        return True


def _reinit_spacing_reset() -> None:
    with _streams_lock:
        _reinit_state["next"] = 0.0
        _reinit_state["interval"] = _REINIT_FIRST_S


def list_input_devices() -> list[dict[str, Any]]:
    """Input-capable devices: index, name, host API, max input channels, default rate."""
    sd = portaudio()
    hostapis = sd.query_hostapis()
    out = []
    for dev in sd.query_devices():
        if dev["max_input_channels"] < 1:
            continue
        out.append({
            "index": dev["index"],
            "name": dev["name"],
            "hostapi": hostapis[dev["hostapi"]]["name"],
            "max_input_channels": dev["max_input_channels"],
            "default_samplerate_hz": dev["default_samplerate"],
        })
    return out


def _device_summary() -> str:
    devices = list_input_devices()
    if not devices:
        return "no input devices found (check the interface is connected; run 'rotorwatch devices')"
    shown = ", ".join(f"{d['index']} {d['name']!r} ({d['max_input_channels']} in)" for d in devices[:12])
    more = f", ... ({len(devices)} in all)" if len(devices) > 12 else ""
    return f"input devices: {shown}{more}"


def find_device(device: str | int | None) -> dict[str, Any]:
    """The PortAudio device info for ``device`` (name substring, index, or None = default input)."""
    sd = portaudio()
    try:
        return dict(sd.query_devices(device, "input"))
    except (ValueError, sd.PortAudioError) as exc:
        what = "no default input device" if device is None else str(exc).rstrip(".")
        raise SourceUnavailable(f"soundcard device {device!r}: {what}; {_device_summary()}") from None


class SoundcardSource(Source):
    """Capture ``channels`` channels at ``fs_hz`` from a PortAudio input device, float32.

    ``full_scale_v`` (one value, or one per channel) is the input voltage of digital full scale
    (+-1.0): samples are multiplied by it so chunks are in volts at the input.
    """

    kind = "soundcard"

    def __init__(self, device: str | int | None, fs_hz: float, channels: int, block_frames: int, *,
                 full_scale_v: float | Sequence[float] | None = None, queue_s: float = 10.0,
                 stall_limit_s: float = 10.0, latency: str | float = "high") -> None:
        super().__init__(fs_hz, channels, block_frames)
        self.device = device
        self.stall_limit_s = float(stall_limit_s)
        self.latency = latency
        scale = np.ones(channels, dtype=np.float32)
        if full_scale_v is not None:
            scale[:] = np.broadcast_to(np.asarray(full_scale_v, dtype=np.float32), (channels,))
        self._scale = None if np.all(scale == 1.0) else scale
        n_blocks = max(8, int(np.ceil(queue_s * fs_hz / block_frames)))
        self._queue: queue.Queue = queue.Queue(maxsize=n_blocks)
        self._clock = StreamClock(fs_hz)
        self._stream = None
        self._finished = threading.Event()
        self._device_name = str(device)
        self._hostapi = ""
        self._last_data_mono = 0.0
        # written by the callback only
        self._pending_overflow = False
        self._pending_gap = False

    # -- callback (PortAudio thread): copy + flags + put_nowait --------------------------------
    def _callback(self, indata, frames, time_info, status) -> None:
        if status.input_overflow:
            self.stats.overflows += 1
            self._pending_overflow = True
        try:
            self._queue.put_nowait((time.time(), indata.copy(), self._pending_overflow, self._pending_gap))
        except queue.Full:
            self.stats.overflows += 1
            self.stats.dropped_frames += frames
            self._pending_overflow = True
            self._pending_gap = True
        else:
            self._pending_overflow = False
            self._pending_gap = False

    def _on_finished(self) -> None:
        self._finished.set()

    # -- Source --------------------------------------------------------------------------------
    def _open(self) -> None:
        global _open_streams
        sd = portaudio()
        if self.stats.restarts:
            reinitialise()
        try:
            info = find_device(self.device)
        except SourceUnavailable:
            if not reinitialise():
                raise
            info = find_device(self.device)
        self._device_name = info["name"]
        self._hostapi = sd.query_hostapis(info["hostapi"])["name"]
        where = f"soundcard device {self._device_name!r}"
        if info["max_input_channels"] < self.channels:
            raise SourceUnavailable(
                f"{where}: acquisition.channels = {self.channels}: the device has only "
                f"{info['max_input_channels']} input channel(s)"
            )
        try:
            sd.check_input_settings(device=info["index"], channels=self.channels, dtype="float32",
                                    samplerate=self.fs_hz)
        except (sd.PortAudioError, ValueError) as exc:
            raise SourceUnavailable(
                f"{where}: cannot capture {self.channels} channel(s) at {self.fs_hz:g} Hz float32: {exc} "
                "(is it connected and not in use by another program?)"
            ) from None
        while not self._queue.empty():
            self._queue.get_nowait()
        self._finished.clear()
        self._clock.reset()
        self._pending_overflow = self._pending_gap = False
        try:
            stream = sd.InputStream(device=info["index"], samplerate=self.fs_hz, channels=self.channels,
                                    dtype="float32", blocksize=self.block_frames, latency=self.latency,
                                    callback=self._callback, finished_callback=self._on_finished)
        except (sd.PortAudioError, ValueError) as exc:
            raise SourceUnavailable(f"{where}: cannot open the input stream: {exc}") from None
        with _streams_lock:
            _open_streams += 1
        try:
            stream.start()
        except sd.PortAudioError as exc:
            self._release(stream)
            raise SourceUnavailable(f"{where}: cannot start the input stream: {exc}") from None
        self._stream = stream
        self._last_data_mono = time.monotonic()
        _reinit_spacing_reset()

    def _read(self, timeout_s: float) -> Chunk | None:
        deadline = time.monotonic() + timeout_s
        while True:
            try:
                arrival, data, overflow, gap = self._queue.get(timeout=max(0.0, min(0.1, deadline - time.monotonic())))
                break
            except queue.Empty:
                pass
            if not self._running:
                return None
            now = time.monotonic()
            if self._finished.is_set():
                raise SourceUnavailable(
                    f"soundcard device {self._device_name!r}: the input stream stopped "
                    "(device removed or driver error)"
                )
            if now - self._last_data_mono > self.stall_limit_s:
                raise SourceUnavailable(
                    f"soundcard device {self._device_name!r}: no samples for {now - self._last_data_mono:.1f} s "
                    "(device stalled or removed)"
                )
            if now >= deadline:
                return None
        self._last_data_mono = time.monotonic()
        if self._scale is not None:
            data *= self._scale
        t0 = self._clock.stamp(arrival, data.shape[0], gap=gap)
        return Chunk(t0_s=t0, frames=data, overflow=overflow, gap=gap)

    def _close(self) -> None:
        stream, self._stream = self._stream, None
        if stream is not None:
            self._release(stream)

    def _release(self, stream) -> None:
        global _open_streams

        def stop() -> None:
            stream.abort()
            stream.close()

        if bounded_call(stop, CLOSE_TIMEOUT_S, f"abort of soundcard device {self._device_name!r}"):
            with _streams_lock:
                _open_streams -= 1
        # else: PortAudio still holds the stream; keep it counted so nobody re-initialises under it

    def _where(self) -> str:
        api = f" ({self._hostapi})" if self._hostapi else ""
        return f"device={self._device_name!r}{api}"

    @property
    def latency_s(self) -> float | None:
        stream = self._stream
        return None if stream is None else float(stream.latency)


def from_settings(acquisition: Any, config_dir: Path | None = None, *,
                  full_scale_v: float | Sequence[float] | None = None, **options: Any) -> SoundcardSource:
    return SoundcardSource(acquisition.device, acquisition.sample_rate_hz, acquisition.channels,
                           acquisition.block_frames, full_scale_v=full_scale_v, **options)
