"""``rotorwatch calibrate``: measure a point's sensitivity against a reference shaker, optionally write it.

Mount the point's accelerometer on a handheld reference shaker (common practice: 10 m/s^2 RMS at
159.2 Hz), then::

    rotorwatch calibrate --config site.toml --point de-h            # capture from the configured sound interface
    rotorwatch calibrate --config site.toml --point de-h --input shaker.wav
    rotorwatch calibrate --config site.toml --point ef3/de-h --write  # update the file (keeps site.toml.bak)

The tone's RMS volts come from :func:`rotorwatch.sources.calibration.measure_tone`; the sensitivity is
volts / reference level, printed in mV/(m/s^2) and mV/g. ``--write`` changes only the number of the
point's ``sensitivity_mv_per_g`` (or ``sensitivity_mv_per_m_s2``, whichever the file uses) in place,
editing the file as a TOML document (tomlkit), so comments and layout stay; the result is re-validated and must differ from the old configuration in that
one value, or nothing is written.
"""

from __future__ import annotations

import argparse
import os
import shutil
import tempfile
import time
import tomllib
from pathlib import Path
from typing import Any

import numpy as np

from ..durable import fsync_dir
from ..errors import ConfigError, InputError, SourceUnavailable
from ..settings.loading import load_config, validate
from ..settings.models import G_N, Config


def add_parser(p: argparse.ArgumentParser) -> None:
    p.add_argument("--config", required=True, metavar="FILE", help="machine configuration (TOML)")
    p.add_argument("--point", required=True, metavar="ID", help="measurement point id, or MACHINE/POINT")
    p.add_argument("--reference-m-s2", type=float, default=10.0, metavar="A",
                   help="reference acceleration, m/s^2 RMS (default 10)")
    p.add_argument("--reference-hz", type=float, default=159.2, metavar="F",
                   help="reference frequency, Hz (default 159.2)")
    p.add_argument("--seconds", type=float, default=5.0, help="seconds to measure (default 5)")
    p.add_argument("--settle-s", type=float, default=0.5, help="seconds skipped first (default 0.5)")
    p.add_argument("--input", metavar="WAV", help="measure a recording of the shaker instead of capturing")
    p.add_argument("--device", help="sound device (name or index) instead of acquisition.device")
    p.add_argument("--write", action="store_true", help="write the measured sensitivity into the config file")


# ------------------------------------------------------------------------------------------ capture
def find_point(config: Config, wanted: str, source: str):
    """(machine index, point index, machine, point) for ``POINT`` or ``MACHINE/POINT``."""
    machine_id, _, point_id = wanted.rpartition("/")
    hits = []
    for mi, m in enumerate(config.machines):
        if machine_id and m.id != machine_id:
            continue
        for pi, p in enumerate(m.points):
            if p.id == point_id:
                hits.append((mi, pi, m, p))
    known = [f"{m.id}/{p.id}" for m in config.machines for p in m.points]
    if not hits:
        raise ConfigError([f"{source}: --point {wanted!r}: no such point (known: {', '.join(known)})"])
    if len(hits) > 1:
        raise ConfigError([f"{source}: --point {wanted!r}: several machines have it; give MACHINE/POINT "
                           f"({', '.join(f'{h[2].id}/{h[3].id}' for h in hits)})"])
    return hits[0]


def record_from_file(path: Path, channel: int, seconds: float, settle_s: float) -> tuple[np.ndarray, float, str]:
    from ..recordings import open_recording

    with open_recording(path) as f:
        if f.unit.name not in (None, "volts"):
            raise InputError(f"{path}: samples in {f.unit.name} ({f.unit.origin}); a calibration needs the "
                             "sensor's output in volts")
        if channel >= f.n_channels:
            raise InputError(f"{path}: has {f.n_channels} channel(s), the point uses channel {channel}")
        fs = float(f.fs_hz)
        skip = int(settle_s * fs)
        if f.n_frames <= skip:
            skip = 0
        f.seek(skip)
        data = f.read(int(seconds * fs))
    return data[:, channel], fs, f"recording {str(path)!r}"


def record_from_soundcard(config: Config, device, channel: int, seconds: float,
                          settle_s: float) -> tuple[np.ndarray, float, str]:
    from ..sources.base import channel_full_scale_v
    from ..sources.soundcard import SoundcardSource

    acq = config.acquisition
    src = SoundcardSource(device, acq.sample_rate_hz, acq.channels, acq.block_frames,
                          full_scale_v=channel_full_scale_v(config), stall_limit_s=5.0)
    fs = src.fs_hz
    want = int((seconds + settle_s) * fs)
    parts, got = [], 0
    src.start()
    try:
        deadline = time.monotonic() + seconds + settle_s + 10.0
        while got < want:
            chunk = src.read(timeout_s=2.0)
            if chunk is None:
                if time.monotonic() > deadline:
                    break
                continue
            parts.append(chunk.frames[:, channel].astype(np.float64))
            got += chunk.n_frames
        where = src.describe()
    finally:
        src.close()
    if got < want:
        raise SourceUnavailable(f"calibrate: captured only {got} of {want} frames from {where}")
    x = np.concatenate(parts)[int(settle_s * fs):want]
    return x, fs, where


# ------------------------------------------------------------------------------------------ writing
SENSITIVITY_KEYS = ("sensitivity_mv_per_g", "sensitivity_mv_per_m_s2")


def edit_sensitivity(text: str, machine_index: int, point_index: int, mv_per_m_s2: float) -> tuple[str, str, float]:
    """The file text with the point's sensitivity replaced: (new text, key used, value written).

    The file is edited as a TOML document (tomlkit), so its layout and comments stay as they were,
    whether the point is a ``[[machines.points]]`` table or an inline one."""
    import tomlkit  # noqa: PLC0415 (only the writing path needs it)

    try:
        doc: Any = tomlkit.parse(text)  # tomlkit 0.8 (the floor) types items as Item | Container
        sensor = doc["machines"][machine_index]["points"][point_index]["sensor"]
        doc_keys = [k for k in SENSITIVITY_KEYS if k in sensor]
    except (KeyError, IndexError, TypeError, tomlkit.exceptions.TOMLKitError):
        raise ConfigError(["cannot find the point's sensor table in the file: write the sensitivity by hand"]) from None
    if len(doc_keys) != 1:
        raise ConfigError([f"expected one sensitivity key in the point's sensor table, found {len(doc_keys)}: "
                           "write the sensitivity by hand"])
    key = doc_keys[0]
    value = mv_per_m_s2 * G_N if key == "sensitivity_mv_per_g" else mv_per_m_s2
    written = float(f"{value:.5g}")
    sensor[key] = written
    return tomlkit.dumps(doc), key, written


def write_sensitivity(path: Path, config: Config, machine_index: int, point_index: int,
                      mv_per_m_s2: float) -> tuple[str, float, Path]:
    text = path.read_text(encoding="utf-8")
    new_text, key, written = edit_sensitivity(text, machine_index, point_index, mv_per_m_s2)
    # the edit must change exactly that one value
    new_config = validate(Config, tomllib.loads(new_text), str(path))
    expected = config.model_dump()
    expected["machines"][machine_index]["points"][point_index]["sensor"][key] = written
    if new_config.model_dump() != expected:
        raise ConfigError([f"{path}: the edit would change more than the sensitivity; nothing written"])
    backup = path.with_name(path.name + ".bak")
    shutil.copy2(path, backup)
    with open(backup, "rb+") as b:
        os.fsync(b.fileno())
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="") as f:
            f.write(new_text)
            f.flush()
            os.fsync(f.fileno())  # the new text is on disk before the rename makes it the config
        shutil.copymode(path, tmp)
        os.replace(tmp, path)
        fsync_dir(path.parent)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise
    return key, written, backup


# ------------------------------------------------------------------------------------------ command
def run(args: argparse.Namespace) -> int:
    from ..sources.calibration import measure_tone, mv_per_g, sensitivity_mv_per_m_s2
    from ..sources.coupling import highpass_gain

    path = Path(args.config)
    config = load_config(path)
    mi, pi, machine, point = find_point(config, args.point, str(path))
    sensor = point.sensor
    for name, v in (("--reference-m-s2", args.reference_m_s2), ("--reference-hz", args.reference_hz),
                    ("--seconds", args.seconds)):
        if not v > 0:
            raise InputError(f"{name} = {v:g}: must be positive")
    if args.settle_s < 0:
        raise InputError(f"--settle-s = {args.settle_s:g}: must not be negative")

    if args.input:
        x, fs, where = record_from_file(Path(args.input), sensor.channel, args.seconds, args.settle_s)
    else:
        if config.acquisition.source != "soundcard" and args.device is None:
            raise InputError(f"{path}: acquisition.source = {config.acquisition.source!r}: calibrate captures "
                             "from a sound interface (set source = \"soundcard\", or give --device or --input WAV)")
        device = args.device if args.device is not None else config.acquisition.device
        if isinstance(device, str) and device.isdigit():
            device = int(device)
        x, fs, where = record_from_soundcard(config, device, sensor.channel, args.seconds, args.settle_s)

    tone = measure_tone(x, fs, args.reference_hz)
    if tone.peak_abs_v >= 0.98 * sensor.input_range_v:
        raise InputError(f"{where}: channel {sensor.channel} clips ({tone.peak_abs_v:.4g} V of the "
                         f"{sensor.input_range_v:g} V input range): lower the gain or the level")
    if tone.residual_ratio > 0.3:
        raise InputError(f"{where}: channel {sensor.channel}: no clean tone at {args.reference_hz:g} Hz "
                         f"(tone {tone.rms_v:.4g} V RMS, everything else {tone.residual_rms_v:.4g} V RMS): "
                         "is the shaker running, and on this point's sensor?")
    rms_v = tone.rms_v
    if sensor.ac_coupling_corner_hz is not None:
        rms_v /= float(highpass_gain(tone.frequency_hz, sensor.ac_coupling_corner_hz))
    s_m_s2 = sensitivity_mv_per_m_s2(rms_v, args.reference_m_s2)
    s_g = mv_per_g(s_m_s2)
    configured = sensor.volts_per_m_s2 * 1000.0
    print(f"point {machine.id}/{point.id} (channel {sensor.channel}), {tone.n_samples / fs:.2f} s from {where}")
    print(f"tone {tone.frequency_hz:.3f} Hz, {tone.rms_v:.6g} V RMS (flat-top check {tone.welch_rms_v:.6g} V), "
          f"rest {100 * tone.residual_ratio:.2f} % of the tone")
    if sensor.ac_coupling_corner_hz is not None:
        print(f"corrected for AC coupling at {sensor.ac_coupling_corner_hz:g} Hz: {rms_v:.6g} V RMS")
    if abs(tone.frequency_hz / args.reference_hz - 1) > 0.01:
        print(f"warning: the tone is {100 * (tone.frequency_hz / args.reference_hz - 1):+.2f} % off "
              f"{args.reference_hz:g} Hz: check the shaker setting")
    print(f"sensitivity {s_m_s2:.5g} mV/(m/s^2) = {s_g:.5g} mV/g at {args.reference_m_s2:g} m/s^2 RMS; "
          f"configured {configured:.5g} mV/(m/s^2) ({100 * (s_m_s2 / configured - 1):+.2f} %)")
    if args.write:
        key, written, backup = write_sensitivity(path, config, mi, pi, s_m_s2)
        print(f"wrote {key} = {written:.5g} for {machine.id}/{point.id} into {path} (previous file: {backup})")
    return 0
