"""``rotorwatch devices``: the audio input devices PortAudio sees (attach its output to bug reports).

For each input-capable device: index, name, host API, maximum input channels and default sample rate.
With ``--config`` it also checks that the configured device accepts the configured rate and channel
count (``sounddevice.check_input_settings``), which is the I/O that ``rotorwatch check`` never does.
"""

from __future__ import annotations

import argparse
import sys

from ..errors import SourceUnavailable


def add_parser(p: argparse.ArgumentParser) -> None:
    p.add_argument("--config", metavar="FILE", help="also check the configured sound device and settings")


def run(args: argparse.Namespace) -> int:
    from ..sources import soundcard

    try:
        sd = soundcard.portaudio()
    except SourceUnavailable as exc:
        print(f"rotorwatch devices: {exc}", file=sys.stderr)
        return 1
    print(f"PortAudio: {sd.get_portaudio_version()[1]}")
    devices = soundcard.list_input_devices()
    if not devices:
        print("no audio input devices found (is the interface connected and its driver loaded? "
              "PortAudio lists devices only when a program starts)")
    else:
        default_in = sd.default.device[0]
        print(f"{'':2}{'index':>5}  {'name':<32} {'host API':<12} {'inputs':>6}  {'default rate':>12}")
        for d in devices:
            mark = "*" if d["index"] == default_in else " "
            print(f"{mark:2}{d['index']:>5}  {d['name'][:32]:<32} {d['hostapi'][:12]:<12} "
                  f"{d['max_input_channels']:>6}  {d['default_samplerate_hz']:>9.0f} Hz")
        print("* = default input")
    if args.config:
        return _check_config(args.config)
    return 0 if devices else 1


def _check_config(path: str) -> int:
    from ..settings.loading import load_config
    from ..sources import soundcard

    acq = load_config(path).acquisition
    if acq.source != "soundcard":
        print(f"{path}: acquisition.source = {acq.source!r}: no sound device to check")
        return 0
    sd = soundcard.portaudio()
    info = soundcard.find_device(acq.device)  # SourceUnavailable -> one line from the CLI
    try:
        sd.check_input_settings(device=info["index"], channels=acq.channels, dtype="float32",
                                samplerate=acq.sample_rate_hz)
    except (sd.PortAudioError, ValueError) as exc:
        raise SourceUnavailable(
            f"{path}: acquisition: device {info['name']!r} cannot capture {acq.channels} channel(s) "
            f"at {acq.sample_rate_hz:g} Hz float32: {exc}"
        ) from None
    print(f"{path}: device {info['name']!r} accepts {acq.channels} channel(s) at {acq.sample_rate_hz:g} Hz float32")
    return 0
