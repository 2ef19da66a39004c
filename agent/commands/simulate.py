"""``rotorwatch simulate SCENARIO --out DIR``: write a scenario's signals to WAV files.

One WAV per requested day, named ``<scenario>-day<D>.wav``: float32, one column per input channel
(column c is the sensor on channel c, as a sound interface would record it; channels without a sensor
carry the input's noise floor). Samples are the sensor output in VOLTS by default, with every sensor
fault of the scenario applied; ``--quantity accel`` writes the housing acceleration in m/s^2 instead,
before the sensor (no faults). The unit travels with the file twice: in the WAV's own metadata (with
the sensitivity of each channel's sensor, see :mod:`rotorwatch.recordings`) and in a JSON file beside
it that also records the channel map, sample rate, the true speed and what each point carried at that
moment, so the file can be analyzed (``rotorwatch analyze FILE.wav``) or replayed (``rotorwatch replay
--config C --input FILE.wav``) without the scenario and without saying its unit again.
"""

from __future__ import annotations

import argparse
import json
from pathlib import Path

import numpy as np

from ..errors import InputError


def add_parser(p: argparse.ArgumentParser) -> None:
    p.add_argument("scenario", help="scenario file (TOML), e.g. config/scenarios/demo-outer-race.toml")
    p.add_argument("--out", required=True, help="directory for the WAV and JSON files (created if missing)")
    p.add_argument("--day", type=float, action="append", metavar="D",
                   help="scenario day of a snapshot; repeat for several (default: the first and the last day)")
    p.add_argument("--seconds", type=float, default=None, metavar="S",
                   help="length of each snapshot (default: the machine's analysis.window_s)")
    p.add_argument("--fs", type=float, default=None, metavar="HZ",
                   help="sample rate (default: the configuration's acquisition.sample_rate_hz)")
    p.add_argument("--quantity", choices=("volts", "accel"), default="volts",
                   help="volts: sensor output with faults (default); accel: housing acceleration in m/s^2")


def run(args: argparse.Namespace) -> int:
    from rotorwatch.simulators.render import ScenarioRenderer
    from rotorwatch.simulators.scenario import DAY_S, load_scenario

    from ..recordings import write_wav

    scenario = load_scenario(args.scenario)
    renderer = ScenarioRenderer(scenario)
    machine = renderer.machine
    fs = float(args.fs if args.fs is not None else scenario.config.acquisition.sample_rate_hz)
    seconds = float(args.seconds if args.seconds is not None else machine.analysis.window_s)
    if not seconds > 0:
        raise InputError(f"--seconds {seconds:g}: must be positive")
    if not (fs > 0 and fs == int(fs)):
        raise InputError(f"--fs {fs:g}: a WAV file needs a whole number of samples per second")
    duration_days = scenario.spec.scenario.duration_days
    days = args.day if args.day else [0.0, duration_days]
    for d in days:
        if not 0 <= d:
            raise InputError(f"--day {d:g}: must be 0 or later (the scenario runs 0..{duration_days:g} days)")
    out = Path(args.out)
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as e:
        raise InputError(f"--out {out}: cannot create the directory: {e.strerror}") from None

    channels = max(p.sensor.channel for p in machine.points) + 1
    stem = scenario.path.stem
    for d in days:
        t_s = d * DAY_S
        if args.quantity == "volts":
            signals = renderer.snapshot(t_s, seconds, fs)
        else:
            signals = renderer.snapshot_accel(t_s, seconds, fs)
        n = len(next(iter(signals.values())))
        frames = np.zeros((n, channels), dtype=np.float32)
        for p in machine.points:
            frames[:, p.sensor.channel] = signals[p.id]
        wav = out / f"{stem}-day{d:06.2f}.wav"
        unit = "volts" if args.quantity == "volts" else "m/s2"
        sens: list[float | None] = [None] * channels
        for p in machine.points:
            sens[p.sensor.channel] = p.sensor.volts_per_m_s2
        write_wav(wav, frames, fs, unit, sens if unit == "volts" else None)
        meta = {
            "scenario": str(scenario.path),
            "machine": machine.id,
            "day": d,
            "time_s": t_s,
            "seconds": seconds,
            "sample_rate_hz": fs,
            "unit": unit,
            "true_rpm": renderer.true_rpm(t_s),
            "channels": {
                str(p.sensor.channel): {"point": p.id, "volts_per_m_s2": p.sensor.volts_per_m_s2} for p in machine.points
            },
            "severities": renderer.severities(t_s),
        }
        wav.with_suffix(".json").write_text(json.dumps(meta, indent=2) + "\n")
        print(f"{wav}  day {d:g}  {n} frames x {channels} ch  {meta['unit']}  {meta['true_rpm']:.1f} rpm")
    return 0
