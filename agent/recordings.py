"""Recordings on disk, and the unit of their samples: the one reader every command uses.

``rotorwatch analyze``, ``rotorwatch replay --input``, ``rotorwatch calibrate --recording`` and the
daemon's ``recording`` source all open files through :func:`open_recording`, so a file reads the same
everywhere: the same checks, the same errors (one line naming the file), the same unit.

Formats
-------
- **Sound files** (WAV, FLAC, ... anything libsndfile reads): frames x channels. Float files hold the
  numbers as written; integer PCM files are read as fractions of full scale (+-1).
- **numpy .npz** archives: the sample rate as ``fs_hz`` (or ``fs``), the samples as ``channels``
  (2-D, frames x channels) or ``signal`` (1-D: one channel; 2-D: frames x channels), or, when the caller
  names them (replay: the point ids), one 1-D array per name. ``unit`` may name the unit.

Units
-----
A sample is in ``volts`` (the sensor's output at the input), ``g`` or ``m/s2``. Every recording this
project writes says which, in two places that travel with it:

- inside a WAV, in its INFO comment (``ICMT``): ``rotorwatch: unit=volts; volts_per_m_s2=0.0102,0.0102``
  (the sensitivities, per channel, of the sensors a volts file came from), see :func:`wav_comment`;
- in a JSON sidecar beside it (``FILE.json``, what ``rotorwatch simulate`` writes) with ``unit`` and,
  for volts, ``channels: {"0": {"volts_per_m_s2": ...}}``.

A ``.npz`` says it with a ``unit`` entry; an archive without one is taken as g (the convention of the
bearing-fault recordings the tests use), and :attr:`Unit.origin` says so for the output. A file that
says nothing has an unknown unit: :func:`decide_unit` then asks for ``--unit`` in one line, rather than
guess a number that could be wrong by a factor of ten.
"""

from __future__ import annotations

import json
import logging
import math
import re
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from .errors import InputError
from .settings.models import G_N

log = logging.getLogger(__name__)

UNITS = ("volts", "g", "m/s2")
_ALIASES = {"volts": "volts", "volt": "volts", "v": "volts", "g": "g", "m/s2": "m/s2", "m/s^2": "m/s2",
            "m/s\u00b2": "m/s2", "m s-2": "m/s2"}
NPZ_DEFAULT_UNIT = "g"
_RATE_KEYS = ("fs_hz", "fs")
_NPZ_META = {"fs_hz", "fs", "unit", "rpm", "fault", "source"}
# libsndfile's own header check: "data : 384000 (should be 191959)" when the file is cut short.
_TRUNCATED = re.compile(r"^\s*data\s*:\s*(\d+)\s*\(should be (\d+)\)", re.MULTILINE)
_COMMENT_UNIT = re.compile(r"\bunit\s*=\s*([^;\s]+)")
_COMMENT_SENS = re.compile(r"\bvolts_per_m_s2\s*=\s*([^;\s]+)")


def unit_name(text: Any) -> str | None:
    """A unit as written in a file or an option -> ``volts``, ``g`` or ``m/s2``; None if not one of them."""
    if text is None:
        return None
    return _ALIASES.get(str(text).strip().lower())


@dataclass(frozen=True)
class Unit:
    """What a file says about the unit of its samples."""

    name: str | None  # volts | g | m/s2; None: the file does not say
    origin: str  # where it was read, for messages: "WAV metadata", "sidecar rec.json", ".npz unit entry", ...
    volts_per_m_s2: tuple[float | None, ...] = ()  # per channel: the sensor a volts file came from, if recorded


def wav_comment(unit: str, volts_per_m_s2: Sequence[float | None] | None = None) -> str:
    """The INFO comment that tells a WAV's unit (and, for volts, the sensitivity of each channel)."""
    name = unit_name(unit)
    if name is None:
        raise ValueError(f"unit {unit!r}: expected one of {', '.join(UNITS)}")
    text = f"rotorwatch: unit={name}"
    if volts_per_m_s2:
        text += "; volts_per_m_s2=" + ",".join("-" if s is None else f"{s:.9g}" for s in volts_per_m_s2)
    return text


def write_wav(path: str | Path, frames: np.ndarray, fs_hz: float, unit: str,
              volts_per_m_s2: Sequence[float | None] | None = None) -> Path:
    """A float32 WAV whose INFO comment names the unit: how this project writes every recording."""
    import soundfile

    p = Path(path)
    data = np.asarray(frames, dtype=np.float32)
    if data.ndim == 1:
        data = data[:, None]
    comment = wav_comment(unit, volts_per_m_s2)
    try:
        with soundfile.SoundFile(str(p), "w", samplerate=int(round(fs_hz)), channels=data.shape[1],
                                 subtype="FLOAT", format="WAV") as f:
            f.comment = comment
            f.write(data)
    except (OSError, RuntimeError, soundfile.LibsndfileError) as e:
        raise InputError(f"{p}: cannot write: {e}") from None
    return p


def sidecar_path(path: str | Path) -> Path:
    return Path(path).with_suffix(".json")


# ------------------------------------------------------------------------------------------ reading
@dataclass
class Recording:
    """An opened recording. :meth:`read` hands out consecutive frames (float64, frames x channels)."""

    path: Path
    kind: str  # "sound" (libsndfile) or "npz"
    fs_hz: float
    n_frames: int
    n_channels: int
    sample_format: str  # libsndfile subtype (FLOAT, PCM_16, ...) or the .npz dtype
    integer: bool  # integer PCM: samples are fractions of full scale
    unit: Unit
    channel_names: tuple[str, ...] | None = None  # .npz arrays named by the caller, in channel order
    _handle: Any = field(default=None, repr=False)
    _data: np.ndarray | None = field(default=None, repr=False)
    _pos: int = 0

    def read(self, n_frames: int, dtype: Any = np.float64) -> np.ndarray:
        """The next ``n_frames`` frames (fewer at the end; none once the end is reached)."""
        n = max(0, int(n_frames))
        if self._data is not None:
            out = self._data[self._pos:self._pos + n]
            self._pos += out.shape[0]
            return np.asarray(out, dtype=dtype)
        import soundfile

        try:
            data = self._handle.read(n, dtype="float32" if np.dtype(dtype) == np.float32 else "float64",
                                     always_2d=True)
        except (RuntimeError, soundfile.LibsndfileError) as e:
            raise InputError(f"{self.path}: read failed at frame {self._pos}: {e}") from None
        self._pos += data.shape[0]
        return data

    def read_all(self, max_frames: int | None = None) -> np.ndarray:
        """Every frame from the start (at most ``max_frames``), float64."""
        self.seek(0)
        return self.read(self.n_frames if max_frames is None else min(max_frames, self.n_frames))

    def seek(self, frame: int) -> None:
        self._pos = int(frame)
        if self._handle is not None:
            self._handle.seek(self._pos)

    def tell(self) -> int:
        return self._pos

    @property
    def remaining(self) -> int:
        return self.n_frames - self._pos

    @property
    def duration_s(self) -> float:
        return self.n_frames / self.fs_hz

    def close(self) -> None:
        h, self._handle = self._handle, None
        if h is not None:
            h.close()

    def __enter__(self) -> Recording:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


def open_recording(path: str | Path, names: Sequence[str] | None = None) -> Recording:
    """Open a sound file or a ``.npz`` archive; every problem is an :class:`InputError` of one line.

    ``names``: for archives that hold one 1-D array per point, the names to look for (in that order).
    """
    p = Path(path)
    if not p.exists():
        raise InputError(f"{p}: no such file")
    if p.is_dir():
        raise InputError(f"{p}: is a directory, expected a recording")
    rec = _open_npz(p, names) if p.suffix.lower() == ".npz" else _open_sound(p)
    if rec.n_frames == 0:
        rec.close()
        raise InputError(f"{p}: holds no samples")
    if not (math.isfinite(rec.fs_hz) and rec.fs_hz > 0):
        rec.close()
        raise InputError(f"{p}: sample rate {rec.fs_hz:g} Hz: must be a positive number")
    return rec


def _open_sound(p: Path) -> Recording:
    import soundfile

    try:
        handle = soundfile.SoundFile(str(p))
    except soundfile.LibsndfileError as exc:
        reason = str(exc).split(":", 1)[-1].strip() if ":" in str(exc) else str(exc)
        raise InputError(f"{p}: not a readable sound file ({reason})") from None
    except (OSError, RuntimeError) as exc:
        raise InputError(f"{p}: cannot read: {getattr(exc, 'strerror', None) or exc}") from None
    try:
        extra = handle.extra_info
    except Exception:  # noqa: BLE001 - advisory only
        extra = ""
    cut = _TRUNCATED.search(extra or "")
    if cut is not None:
        handle.close()
        raise InputError(
            f"{p}: truncated: the header declares {int(cut.group(1))} bytes of samples, the file holds "
            f"{int(cut.group(2))} (the recording was cut short; rewrite it or use a complete copy)"
        )
    subtype = handle.subtype
    integer = subtype.startswith("PCM") or subtype in ("ULAW", "ALAW")
    try:
        comment = handle.comment or ""
    except Exception:  # noqa: BLE001 - metadata is advisory
        comment = ""
    unit = _unit_from_comment(comment, handle.channels) or _unit_from_sidecar(p, handle.channels)
    if unit is None:
        unit = Unit(None, f"no unit in its metadata and no sidecar {sidecar_path(p).name}")
    return Recording(p, "sound", float(handle.samplerate), int(handle.frames), int(handle.channels), subtype,
                     integer, unit, _handle=handle)


def _sensitivities(values: Sequence[Any], n_channels: int) -> tuple[float | None, ...]:
    out: list[float | None] = []
    for v in list(values)[:n_channels]:
        try:
            x = float(v)
        except (TypeError, ValueError):
            x = math.nan
        out.append(x if math.isfinite(x) and x > 0 else None)
    return tuple(out)


def _unit_from_comment(comment: str, n_channels: int) -> Unit | None:
    if "rotorwatch" not in comment:
        return None
    m = _COMMENT_UNIT.search(comment)
    if m is None:
        return None
    name = unit_name(m.group(1))
    if name is None:
        return Unit(None, f"WAV metadata (unit={m.group(1)!r} is not one of {', '.join(UNITS)})")
    s = _COMMENT_SENS.search(comment)
    sens = _sensitivities(s.group(1).split(","), n_channels) if s else ()
    return Unit(name, "WAV metadata", sens)


def _unit_from_sidecar(p: Path, n_channels: int) -> Unit | None:
    side = sidecar_path(p)
    if not side.is_file():
        return None
    try:
        doc = json.loads(side.read_text(encoding="utf-8"))
    except (OSError, ValueError, UnicodeDecodeError) as e:
        raise InputError(f"{side}: the recording's sidecar cannot be read: {e}") from None
    if not isinstance(doc, dict) or "unit" not in doc:
        return None
    name = unit_name(doc["unit"])
    if name is None:
        raise InputError(f"{side}: unit = {doc['unit']!r}: expected one of {', '.join(UNITS)}")
    chans = doc.get("channels")
    if not isinstance(chans, dict):
        chans = {}
    sens = _sensitivities([(chans.get(str(c)) or {}).get("volts_per_m_s2") for c in range(n_channels)], n_channels)
    return Unit(name, f"sidecar {side.name}", sens if any(s is not None for s in sens) else ())


def _open_npz(p: Path, names: Sequence[str] | None) -> Recording:
    import zipfile

    try:
        with np.load(p, allow_pickle=False) as z:
            entries = {k: np.asarray(z[k]) for k in z.files}
    except (OSError, ValueError, zipfile.BadZipFile, EOFError) as e:
        raise InputError(f"{p}: cannot read as .npz: {e}") from None
    rate_key = next((k for k in _RATE_KEYS if k in entries), None)
    if rate_key is None:
        raise InputError(f"{p}: .npz lacks fs_hz (or fs), the sample rate in Hz "
                         f"(has: {', '.join(sorted(entries)) or 'nothing'})")
    rate = entries[rate_key]
    if rate.size != 1 or not np.issubdtype(rate.dtype, np.number) or np.iscomplexobj(rate):
        raise InputError(f"{p}: {rate_key} must be one number (Hz), got shape {rate.shape} of {rate.dtype}")
    fs = float(rate.reshape(-1)[0])
    channel_names = None
    if "channels" in entries or "signal" in entries:
        key = "channels" if "channels" in entries else "signal"
        data = entries[key]
        if key == "signal":
            data = np.squeeze(data) if data.ndim > 2 else data
        if data.ndim == 1:
            data = data[:, None]
        if data.ndim != 2:
            raise InputError(f"{p}: {key!r} has shape {data.shape}: expected (frames,) or (frames, channels)")
        _check_numbers(p, key, data)
    else:
        wanted = [n for n in (names or []) if n in entries]
        if not wanted:
            expected = f"arrays named {', '.join(names)}, " if names else ""
            others = sorted(set(entries) - _NPZ_META)
            raise InputError(f"{p}: no samples: expected {expected}'signal' or a 2-D 'channels' "
                             f"(has: {', '.join(others) or 'nothing but ' + ', '.join(sorted(entries))})")
        cols = []
        for n in wanted:
            x = entries[n]
            if x.ndim != 1:
                raise InputError(f"{p}: {n!r} has shape {x.shape}: expected one channel (1-D)")
            _check_numbers(p, n, x)
            cols.append(x)
        lengths = sorted({len(x) for x in cols})
        if len(lengths) != 1:
            raise InputError(f"{p}: the arrays differ in length ({', '.join(map(str, lengths))} frames)")
        data = np.stack(cols, axis=1)
        channel_names = tuple(wanted)
    if "unit" in entries:
        raw = entries["unit"]
        text = str(raw.reshape(-1)[0]) if raw.size == 1 else None
        name = unit_name(text)
        if name is None:
            raise InputError(f"{p}: unit = {text!r}: expected one of {', '.join(UNITS)}")
        unit = Unit(name, ".npz unit entry")
    else:
        unit = Unit(NPZ_DEFAULT_UNIT, f".npz without a unit entry: taken as {NPZ_DEFAULT_UNIT}")
    return Recording(p, "npz", fs, int(data.shape[0]), int(data.shape[1]), str(data.dtype), False, unit,
                     channel_names, _data=np.asarray(data, dtype=np.float64))


def _check_numbers(p: Path, key: str, x: np.ndarray) -> None:
    if not np.issubdtype(x.dtype, np.number) or np.iscomplexobj(x):
        raise InputError(f"{p}: {key} must hold real numbers, got {x.dtype}")


# -------------------------------------------------------------------------------------------- units
def decide_unit(rec: Recording, given: str | None, *, option: str = "--unit") -> tuple[str, str]:
    """The unit to read ``rec`` in, and how it is known: the file's own word, else ``given``.

    A file that names its unit and a ``given`` unit that differs is an error (one of them is wrong); a
    file that says nothing and no ``given`` unit is an error that names the fix.
    """
    want = unit_name(given) if given is not None else None
    if given is not None and want is None:
        raise InputError(f"{option} {given}: expected one of {', '.join(UNITS)}")
    have = rec.unit.name
    if have is not None and rec.unit.origin.startswith(".npz without"):
        have = None if want is not None else have  # a default, not the file's word: an option overrides it
    if have is not None:
        if want is not None and want != have:
            raise InputError(f"{rec.path}: its {rec.unit.origin} says the samples are in {have}, but {option} "
                             f"says {want}: drop {option} (or correct the file's unit)")
        return have, rec.unit.origin
    if want is not None:
        return want, f"{option} {want}"
    if rec.integer:
        return "volts", f"integer {rec.sample_format} samples: fractions of full scale"
    raise InputError(f"{rec.path}: the unit of its samples is unknown ({rec.unit.origin}): give {option} g, "
                     f"{option} m/s2 or {option} volts (volts with --config for the sensor's sensitivity)")


def to_m_s2(x: np.ndarray, unit: str, volts_per_m_s2: float | None = None) -> np.ndarray:
    """Samples in ``unit`` -> acceleration in m/s^2 (volts need the sensor's sensitivity)."""
    if unit == "m/s2":
        return np.asarray(x, dtype=float)
    if unit == "g":
        return np.asarray(x, dtype=float) * G_N
    if unit == "volts":
        if not volts_per_m_s2:
            raise ValueError("volts -> m/s^2 needs the sensor's sensitivity")
        return np.asarray(x, dtype=float) / volts_per_m_s2
    raise ValueError(f"unit {unit!r}: expected one of {', '.join(UNITS)}")


def to_volts(x: np.ndarray, unit: str, volts_per_m_s2: float) -> np.ndarray:
    """Samples in ``unit`` -> the sensor's output in volts (acceleration through its sensitivity)."""
    if unit == "volts":
        return np.asarray(x, dtype=float)
    return to_m_s2(x, unit) * volts_per_m_s2
