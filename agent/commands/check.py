"""``rotorwatch check FILE``: validate a configuration (or a scenario) and print what the analysis derives.

Validation is the configuration models' (one line per problem: file, field path, what is wrong), the
analysis plan of every point at the acquisition's sampling rate (bands, spans and the demodulation band
must fit below Nyquist), and what ``rotorwatch run`` would refuse at start: the input the file names is
built the way the daemon builds it and checked without being started (a recording needs a path, and
that file its rate and channel count; a simulated input its scenario). No device is probed, nothing
goes on the network. ``--set`` overrides values as ``run --set`` does.

For a valid file it prints, per machine, the overall velocity band (and whether the machine's speed chose
it), the kinematic frequencies at the configured (or nominal) speed in orders and Hz: 1x, 2x, blade pass,
2xLF when the machine has a line frequency, and BPFO/BPFI/BSF/2xBSF/FTF of each bearing, with a warning
where two defects of one bearing search overlapping lines or a defect sits on a 2xLF line
(:mod:`rotorwatch.analysis.overlaps`); then per point the spectrum and envelope set-up and each band's
edges in Hz. Warnings (the file stays valid) also follow the machine they concern where the overall band
cuts off or clips the slowest 1x, the speed is outside ISO 20816-3's scope, the window is too short for
the band's low edge, or a shaft order in an order band lies close enough to 2xLF to lose power with it.
When only ``run`` would refuse the file, the table is printed and the refusal follows. Exit 0 when
valid, 2 otherwise.

A scenario file (a ``[scenario]`` table, see ``config/scenarios/``) is recognised: it is validated as a
scenario together with the machine configuration it names, and the command to replay it is printed.
"""

from __future__ import annotations

import argparse
import os
import sys
from pathlib import Path
from typing import TextIO

from .. import kinematics
from ..errors import ConfigError, InputError
from ..settings.models import Config, Machine
from ..settings.quantities import quantity


def add_parser(p: argparse.ArgumentParser) -> None:
    p.add_argument("config", metavar="FILE", help="machine configuration or scenario file (TOML)")
    p.add_argument("--rpm", type=float, default=None, help="print the frequency table at this speed instead of the configured one")
    p.add_argument("--set", action="append", default=[], metavar="KEY=VALUE", dest="overrides",
                   help="override a config value as 'run --set' does, e.g. --set 'acquisition.recording=\"rec.wav\"'")


def _run_problems(path: str, cfg: Config) -> list[str]:
    """What ``rotorwatch run`` would refuse at start: the configured input, built and checked."""
    from ..errors import RotorwatchError  # noqa: PLC0415
    from ..sources.base import configured_source  # noqa: PLC0415

    try:
        source = configured_source(cfg, Path(path).resolve().parent)
        source.check()
    except ConfigError as e:
        return [f"{path}: {line}; rotorwatch run would refuse this file" for line in e.problems]
    except (RotorwatchError, ValueError) as e:
        return [f"{path}: {str(e).splitlines()[0]}; rotorwatch run cannot play this input "
                "(--once stops with this error, a running daemon reports it and retries)"]
    return []


def _is_scenario(path: str) -> bool:
    from ..settings.loading import read_toml  # noqa: PLC0415

    try:
        doc = read_toml(path)
    except ConfigError:
        return False  # the configuration loader reports it
    return isinstance(doc.get("scenario"), dict) and "machines" not in doc


def _check_scenario(args: argparse.Namespace) -> int:
    from rotorwatch.simulators.scenario import load_scenario  # noqa: PLC0415

    if args.overrides:
        raise ConfigError([f"{args.config}: a scenario file: --set applies to machine configurations"])
    scenario = load_scenario(args.config)  # validates the scenario and the configuration it names
    cfg = scenario.config
    problems = _plan_problems(str(scenario.config_path), cfg)
    if problems:
        raise ConfigError(problems)
    spec = scenario.spec.scenario
    out = sys.stdout
    out.write(f"{args.config}: valid scenario {scenario.name!r}: {spec.duration_days:g} days of machine "
              f"{scenario.machine.id} ({os.path.relpath(scenario.config_path)}), {len(scenario.spec.change)} change(s), "
              f"{len(spec.expect)} expectation(s)\n")
    config_path = os.path.relpath(scenario.config_path)
    in_config = os.path.relpath(Path(args.config).resolve(), Path(scenario.config_path).resolve().parent)
    out.write(f"  replay it:   rotorwatch replay --scenario {args.config}\n")
    out.write(f"  stream it:   rotorwatch run --config {config_path} --set 'acquisition.source=\"simulated\"' "
              f"--set 'acquisition.scenario=\"{in_config}\"'\n")
    rpm = args.rpm if args.rpm is not None else scenario.machine.speed.nominal_rpm
    print_machine(scenario.machine, rpm, cfg.acquisition.sample_rate_hz, out, given=args.rpm is not None)
    return 0


def _plan_problems(path: str, cfg: Config) -> list[str]:
    from ..analysis.plan import build_plan  # noqa: PLC0415

    fs = cfg.acquisition.sample_rate_hz
    problems = []
    for i, m in enumerate(cfg.machines):
        for p in m.points:
            try:
                plan = build_plan(m, p, fs)
            except InputError as e:
                problems.append(f"{path}: machines[{i}] ({m.id}), point {p.id!r} at {fs:g} Hz sampling: {e}")
                continue
            need_s = plan.min_samples / fs
            if m.analysis.window_s < need_s:
                problems.append(
                    f"{path}: machines[{i}].analysis.window_s = {m.analysis.window_s:g}: shorter than the {need_s:.3g} s "
                    f"point {p.id!r} needs ({plan.lines} lines to {plan.fmax_hz:g} Hz and {plan.envelope.lines} "
                    f"envelope lines to {plan.envelope.fmax_hz:g} Hz); lengthen it or ask for fewer lines"
                )
    return problems


def _speed_line(m: Machine, rpm: float, given: bool) -> str:
    s = m.speed
    if given:
        where = "given on the command line"
    elif s.mode == "fixed":
        where = "fixed"
    elif s.mode == "estimated":
        where = f"nominal; estimated within {s.min_rpm:g}-{s.max_rpm:g} r/min"
    else:
        where = f"nominal; measured by {'tachometer' if s.mode == 'tach' else 'MQTT'} when running"
    return f"speed {rpm:g} r/min ({where}), shaft frequency {rpm / 60.0:.3f} Hz"


def _bearing_warnings(m: Machine, rpm: float, out: TextIO) -> None:
    """Defect lines of one bearing that stand in each other's way, or on 2xLF lines (analysis/overlaps.py)."""
    from ..analysis.overlaps import defect_overlaps  # noqa: PLC0415

    for o in defect_overlaps(m, rpm):
        out.write(f"  warning: {o.text()}\n")


def _band_line(m: Machine) -> str:
    from ..settings import iso_band  # noqa: PLC0415

    lo, hi = m.overall.low_hz, m.overall.high_hz
    if m.overall.low_edge_by_speed:
        slow = lo == iso_band.SLOW_LOW_EDGE_HZ
        rule = (f"{iso_band.SLOW_SCOPE_MIN_RPM:g}-{iso_band.SLOW_MACHINE_RPM:g} r/min" if slow
                else f"above {iso_band.SLOW_MACHINE_RPM:g} r/min")
        why = (f"chosen by the slowest speed, {m.speed.lowest_rpm:g} r/min: ISO 20816-3 asks for {lo:g}-"
               f"{iso_band.HIGH_EDGE_HZ:g} Hz for machines running {rule} (from memory)")
    else:
        why = "as configured"
    return f"  overall velocity band {lo:g}-{hi:g} Hz, {why}\n"


def machine_warnings(m: Machine) -> list[str]:
    """What a person should know about a valid machine: bands that miss the 1x, windows too short, 2xLF."""
    from ..analysis.narrowband import MIN_WINDOW_EDGE_PRODUCT, electrical_half_width_hz  # noqa: PLC0415
    from ..settings import iso_band  # noqa: PLC0415

    out = []
    low_rpm = m.speed.lowest_rpm
    f1 = low_rpm / 60.0
    lo = m.overall.low_hz
    assert lo is not None  # filled by the machine's speed when not configured
    iso_lo, _ = iso_band.overall_band_hz(low_rpm)
    if low_rpm < iso_band.SLOW_SCOPE_MIN_RPM:
        out.append(f"{low_rpm:g} r/min is below ISO 20816-3's scope ({iso_band.SLOW_SCOPE_MIN_RPM:g} r/min and up); "
                   "its zone boundaries are only a guide here")
    if f1 < lo:
        out.append(f"the overall band's low edge ({lo:g} Hz) cuts off the 1x at {f1:.3g} Hz ({low_rpm:g} r/min): "
                   f"the overall velocity and its ISO zone miss the shaft-rate vibration"
                   + (f"; ISO 20816-3 asks for {iso_lo:g}-1000 Hz at this speed (from memory): set overall.low_hz = "
                      f"{iso_lo:g} or leave it out" if iso_lo < lo else ""))
    elif f1 < 1.2 * lo:
        out.append(f"the 1x at {f1:.3g} Hz ({low_rpm:g} r/min) lies within 20 % of the overall band's low edge "
                   f"({lo:g} Hz), where a tone reads low"
                   + (f"; ISO 20816-3 asks for {iso_lo:g}-1000 Hz at this speed (from memory)" if iso_lo < lo else ""))
    need_s = MIN_WINDOW_EDGE_PRODUCT / lo
    if m.analysis.window_s < need_s:
        out.append(f"analysis.window_s = {m.analysis.window_s:g} s is too short for the overall band's {lo:g} Hz low "
                   f"edge: tones near it may read more than 2 % off; use at least {need_s:.3g} s")
    lf = m.line_frequency_hz
    if lf is not None:
        df = 1.0 / m.analysis.window_s
        rpm = m.speed.nominal_rpm
        in_bands: set[int] = set()  # shaft orders that order or feature bands read
        for band in m.bands:
            if quantity(band.quantity).demodulated or not band.follows_speed:
                continue
            for lo, hi in kinematics.band_edges_hz(m, band, rpm / 60.0):
                in_bands.update(k for k in range(1, 11) if lo <= k * rpm / 60.0 <= hi)
        for k in sorted(in_bands):
            hz = k * rpm / 60.0
            h = max(int(round(hz / (2 * lf))), 1)
            line = 2 * lf * h
            half = float(electrical_half_width_hz(line, df))
            if abs(hz - line) < half + 2 * df:
                name = "2xLF" if h == 1 else f"{2 * h}xLF"
                out.append(f"the {k}x at {hz:.2f} Hz lies {abs(hz - line):.2f} Hz from {name} ({line:g} Hz): the "
                           f"order bands leave out {line - half:.2f}-{line + half:.2f} Hz as electrical, so part of "
                           f"this {k}x goes with it; a longer window_s narrows that stretch")
    return out


def print_machine(m: Machine, rpm: float, fs_hz: float, out: TextIO, given: bool = False) -> None:
    from ..analysis.plan import build_plan  # noqa: PLC0415
    from ..analysis.severity import boundaries  # noqa: PLC0415

    f = rpm / 60.0
    title = f"machine {m.id}" + (f" ({m.name})" if m.name else "")
    out.write(f"\n{title}\n")
    out.write(f"  {_speed_line(m, rpm, given)}\n")
    ab, bc, cd = boundaries(m.iso_group, m.support)
    out.write(f"  ISO 20816-3 group {m.iso_group}, {m.support} support: zone boundaries A/B {ab:g}, B/C {bc:g}, "
              f"C/D {cd:g} mm/s RMS over {m.overall.low_hz:g}-{m.overall.high_hz:g} Hz\n")
    out.write(_band_line(m))
    if m.line_frequency_hz is not None:
        out.write(f"  line frequency {m.line_frequency_hz:g} Hz: 2xLF ({2 * m.line_frequency_hz:g} Hz) and its harmonics "
                  "are electrical lines, kept out of the speed estimate and the order bands\n")
    for w in machine_warnings(m):
        out.write(f"  warning: {w}\n")
    out.write(f"  {'frequency':<22}{'order':>10}{'Hz':>12}\n")
    rows = [("1x", 1.0), ("2x", 2.0)]
    if m.blades:
        rows.append((f"blade pass ({m.blades} blades)", float(m.blades)))
    for name, order in rows:
        out.write(f"  {name:<22}{order:>10.5f}{order * f:>12.2f}\n")
    if m.line_frequency_hz is not None:
        lf2 = 2 * m.line_frequency_hz
        out.write(f"  {'2xLF (electrical)':<22}{lf2 / f:>10.5f}{lf2:>12.2f}\n")
    for b in m.bearings:
        mult = kinematics.bearing_multiples(b)
        out.write(f"  bearing {b.id}" + (f" ({b.name})" if b.name else "") + "\n")
        for name, order in (("BPFO", mult.bpfo), ("BPFI", mult.bpfi), ("BSF", mult.bsf),
                            ("2xBSF", 2 * mult.bsf), ("FTF", mult.ftf)):
            out.write(f"    {name:<20}{order:>10.5f}{order * f:>12.2f}\n")
    _bearing_warnings(m, rpm, out)
    for p in m.points:
        plan = build_plan(m, p, fs_hz)
        env = plan.envelope
        band = (f"{env.band_hz[0]:g}-{env.band_hz[1]:g} Hz" if env.band_hz is not None
                else f"searched above {env.auto_min_hz:g} Hz")
        out.write(f"  point {p.id}" + (f" ({p.name})" if p.name else "") + f", channel {p.sensor.channel}"
                  + (f", bearing {p.bearing}" if p.bearing else "") + "\n")
        lines = int(round(plan.fmax_hz / plan.df_hz))
        grown = f" (of {plan.lines} asked: finer for the slowest 1x)" if lines > plan.lines * 1.01 else ""
        out.write(f"    spectrum: {lines} lines{grown} to {plan.fmax_hz:g} Hz at {fs_hz:g} Hz sampling "
                  f"(segments of {plan.n_per_seg} samples, {plan.df_hz:.4g} Hz resolution); needs blocks of "
                  f"at least {plan.min_samples / fs_hz:.3g} s, window {m.analysis.window_s:g} s\n")
        out.write(f"    overall and bands: the whole window's spectrum, {1.0 / m.analysis.window_s:.3g} Hz lines\n")
        capped = f" (of {env.lines_asked} asked: limited by window_s)" if env.lines < env.lines_asked else ""
        out.write(f"    envelope: band {band}, {env.lines} lines{capped} to {env.fmax_hz:g} Hz "
                  f"({env.df_hz:.3g} Hz resolution)\n")
        bands = m.bands_for(p.id)
        if not bands:
            out.write("    no bands\n")
            continue
        out.write(f"    {'band':<18}{'quantity':<14}edges (Hz)\n")
        for band_cfg in bands:
            edges = kinematics.band_edges_hz(m, band_cfg, f)
            text = ", ".join(f"{lo:.2f}-{hi:.2f}" for lo, hi in edges)
            out.write(f"    {band_cfg.name:<18}{band_cfg.quantity:<14}{text}\n")


def run(args: argparse.Namespace) -> int:
    from ..settings.loading import load_config  # noqa: PLC0415

    path = args.config
    if args.rpm is not None and not args.rpm > 0:
        raise ConfigError([f"--rpm = {args.rpm:g}: must be a speed above 0"])
    if _is_scenario(path):
        return _check_scenario(args)
    try:
        cfg = load_config(path, tuple(args.overrides))
    except ConfigError as e:
        if any(p.endswith("machines: Field required") for p in e.problems):
            raise ConfigError([p + " (check takes a machine configuration, with [[machines]], or a scenario file, "
                               "with a [scenario] table)" if p.endswith("machines: Field required") else p
                               for p in e.problems]) from None
        raise
    problems = _plan_problems(path, cfg)
    if problems:
        raise ConfigError(problems)
    out = sys.stdout
    n_points = sum(len(m.points) for m in cfg.machines)
    out.write(f"{path}: valid ({len(cfg.machines)} machine{'s' if len(cfg.machines) != 1 else ''}, "
              f"{n_points} point{'s' if n_points != 1 else ''}, {cfg.acquisition.sample_rate_hz:g} Hz sampling)\n")
    for m in cfg.machines:
        rpm = args.rpm if args.rpm is not None else m.speed.nominal_rpm
        print_machine(m, rpm, cfg.acquisition.sample_rate_hz, out, given=args.rpm is not None)
    refused = _run_problems(path, cfg)
    if refused:
        out.flush()
        raise ConfigError(refused)
    return 0
