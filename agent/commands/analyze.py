"""``rotorwatch analyze FILE``: run the point analysis over one recording and report what it finds.

Input: a sound file (WAV, ...) or a numpy ``.npz`` archive, read by :mod:`rotorwatch.recordings`. The
unit of the samples comes from the file (WAV metadata, a ``FILE.json`` sidecar, a ``.npz`` ``unit``
entry; a ``.npz`` without one is g, and the output says so) or from ``--unit g|m/s2|volts``; a file
that names no unit needs ``--unit``. Volts are turned into acceleration with the sensitivity of the
point's sensor (``--config``) or, failing that, the sensitivity the file records. ``--channel`` picks
the channel (default: the point's ``sensor.channel`` with ``--config``, else 0). The recording is
analyzed as one block, up to ``--max-seconds`` (default 120 s) from its start.

The machine comes either from a configuration (``--config C --point P``, ``--machine M`` when the file
describes more than one machine) or from the command line (quick mode): ``--rpm``, one ``--bearing`` per
bearing (``n=9,d=0.3126in,D=1.537in,angle=0``; diameters in mm or in; ``name=`` optional, default b1,
b2, ...; or the four multiples ``bpfo=..,bpfi=..,bsf=..,ftf=..``), ``--blades``, ``--line-frequency`` (the
motor's supply, 50 or 60 Hz: 2xLF and its harmonics are then kept out of the speed and the order bands and
labelled as electrical lines; with ``--config`` it overrides the file). ``--envelope-band LO,HI``
fixes the demodulation band in both modes; ``--rpm`` also overrides a configuration's speed.

Output: a summary for a person, or with ``--format json`` one JSON document whose ``findings`` list holds
``name``, ``bearing``, ``series``, ``expected_hz`` (kinematic), ``measured_hz`` (where the line was found),
``prominence_db`` (how far its lines stand over the local floor), ``severity_m_s2`` (the RMS of its lines
in the envelope spectrum above the floor), ``harmonics_found`` and ``sidebands_found`` (empty when nothing
stands out); ``defect_prominence`` gives every defect's peak / floor ratio, finding or not. A file that cannot be read, is empty, too short or sampled too slowly for the asked analysis
gives one line naming the file and the limit, and exit code 2.
"""

from __future__ import annotations

import argparse
import json
import math
import re
import sys
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..errors import ConfigError, InputError
from ..recordings import UNITS, decide_unit, open_recording, to_m_s2
from ..settings.models import G_N
from ..settings.quantities import quantity

MIN_RATE_HZ = 1000.0
MAX_SECONDS = 120.0  # one block: longer recordings are cut, to bound memory (about 40 bytes per sample)
# Shock accelerometers reach about 1e5 g (1e6 m/s^2, common practice): larger samples are a wrong unit or a
# corrupt file, and their squares would overflow the spectra (velocity inf/NaN, no ISO zone).
MAX_PLAUSIBLE_M_S2 = 1e7


def add_parser(p: argparse.ArgumentParser) -> None:
    p.add_argument("file", metavar="FILE", help="recording: WAV (calibrated float samples) or .npz with signal and fs")
    src = p.add_argument_group("machine from a configuration")
    src.add_argument("--config", metavar="C", help="machine configuration file (TOML)")
    src.add_argument("--machine", metavar="M", help="machine id (needed when the file has several machines)")
    src.add_argument("--point", metavar="P", help="measurement point id (needed when the machine has several)")
    quick = p.add_argument_group("machine from the command line (quick mode)")
    quick.add_argument("--rpm", type=float, help="shaft speed in r/min (quick mode: required; with --config: overrides)")
    quick.add_argument("--bearing", action="append", default=[], metavar="SPEC",
                       help="n=9,d=0.3126in,D=1.537in,angle=0[,name=de] or bpfo=..,bpfi=..,bsf=..,ftf=.. (repeatable)")
    quick.add_argument("--blades", type=int, help="fan or impeller blade count")
    quick.add_argument("--line-frequency", type=float, metavar="HZ",
                       help="supply frequency of a direct-on-line motor, 50 or 60 Hz (2xLF is an electrical line)")
    p.add_argument("--envelope-band", metavar="LO,HI", help="fixed demodulation band in Hz (default: searched)")
    p.add_argument("--unit", choices=UNITS, default=None,
                   help="unit of the samples when the file does not name it (volts: with --config for the sensitivity)")
    p.add_argument("--channel", type=int, default=None,
                   help="channel, 0-based (default: the point's sensor.channel with --config, else 0)")
    p.add_argument("--format", choices=("text", "json"), default="text", help="output format (default text)")
    p.add_argument("--max-seconds", type=float, default=MAX_SECONDS,
                   help=f"analyze at most this many seconds from the start (default {MAX_SECONDS:g})")
    from ..history.command import add_element_arguments

    add_element_arguments(p)


# ------------------------------------------------------------------------------------------- reading
@dataclass(frozen=True)
class Samples:
    """One channel of a recording in m/s^2, with what was read and how its unit is known."""

    x_m_s2: np.ndarray
    fs_hz: float
    n_file: int  # frames in the file
    channel: int
    unit: str
    unit_from: str


def read_recording(path: str, unit: str | None = None, channel: int | None = None, point: Any = None,
                   max_seconds: float | None = None) -> Samples:
    """Up to ``max_seconds`` of one channel of a recording, in m/s^2; InputError naming the file.

    ``point`` (a configured point, optional) gives the default channel and the sensor's sensitivity
    for volts.
    """
    rec = open_recording(path, names=[point.id] if point is not None else None)
    with rec:
        if not rec.fs_hz >= MIN_RATE_HZ:
            raise InputError(f"{path}: sample rate {rec.fs_hz:g} Hz is too low: the analysis needs at least {MIN_RATE_HZ:g} Hz")
        if channel is None:
            if rec.channel_names and point is not None and point.id in rec.channel_names:
                channel = rec.channel_names.index(point.id)
            elif point is not None and point.sensor.channel < rec.n_channels:
                channel = point.sensor.channel
            else:
                channel = 0
        if not 0 <= channel < rec.n_channels:
            raise InputError(f"{path}: --channel {channel}: the file has {rec.n_channels} channel(s), 0..{rec.n_channels - 1}")
        name, how = decide_unit(rec, unit)
        sens = None
        if name == "volts":
            recorded = rec.unit.volts_per_m_s2[channel] if channel < len(rec.unit.volts_per_m_s2) else None
            sens = point.sensor.volts_per_m_s2 if point is not None else recorded
            if sens is None:
                raise InputError(f"{path}: samples in volts ({how}) and no sensitivity to turn them into "
                                 "acceleration: give --config C --point P (the sensor's sensitivity), or --unit g or "
                                 "--unit m/s2 if the samples are acceleration")
            if point is not None and recorded is not None and abs(recorded / sens - 1.0) > 0.01:
                print(f"rotorwatch: note: {path} records a sensitivity of {recorded:.4g} V/(m/s^2) on channel "
                      f"{channel}; using the configured {sens:.4g} V/(m/s^2) of point {point.id}", file=sys.stderr)
        limit = rec.n_frames if max_seconds is None else min(rec.n_frames, int(max_seconds * rec.fs_hz))
        data = rec.read_all(limit)[:, channel]
    if rec.integer:
        if name == "volts" and point is not None:
            data = data * point.sensor.input_range_v  # full scale = the input range
        else:
            print(f"rotorwatch: note: {path} holds {rec.sample_format} integer samples, read with full scale = 1 "
                  f"{name}; calibrated recordings are float WAVs", file=sys.stderr)
    bad = int(np.count_nonzero(~np.isfinite(data)))
    if bad:
        raise InputError(f"{path}: {bad} samples are not finite numbers (NaN or inf)")
    accel = to_m_s2(data, name, sens)
    peak = float(np.max(np.abs(accel))) if accel.size else 0.0
    if not peak <= MAX_PLAUSIBLE_M_S2:
        raise InputError(f"{path}: samples reach {peak:.3g} m/s^2 ({name}, {how}): beyond any accelerometer's range "
                         f"(at most {MAX_PLAUSIBLE_M_S2:.0e} m/s^2 read here); check the unit and the file")
    return Samples(accel, rec.fs_hz, rec.n_frames, channel, name, how)


# ------------------------------------------------------------------------------------- quick machine
_LENGTH = re.compile(r"^([0-9]*\.?[0-9]+(?:[eE][-+]?[0-9]+)?)\s*(mm|in)$")


def _number(spec: str, key: str, text: str) -> float:
    try:
        v = float(text)
    except ValueError:
        raise InputError(f"--bearing {spec!r}: {key}={text!r} is not a number") from None
    if not math.isfinite(v):
        raise InputError(f"--bearing {spec!r}: {key}={text!r} is not a finite number")
    return v


def parse_bearing(spec: str, index: int) -> dict[str, Any]:
    """``--bearing`` text -> Bearing fields (diameters converted to mm when their units differ)."""
    fields: dict[str, str] = {}
    for part in filter(None, (s.strip() for s in spec.split(","))):
        key, sep, value = part.partition("=")
        if not sep or not value:
            raise InputError(f"--bearing {spec!r}: {part!r} is not key=value")
        fields[key.strip()] = value.strip()
    known = {"name", "n", "d", "D", "angle", "bpfo", "bpfi", "bsf", "ftf"}
    unknown = sorted(set(fields) - known)
    if unknown:
        raise InputError(f"--bearing {spec!r}: unknown key {', '.join(unknown)} (known: {', '.join(sorted(known))})")
    out: dict[str, Any] = {"id": fields.get("name", f"b{index}")}
    multiples: list[str] = [k for k in ("bpfo", "bpfi", "bsf", "ftf") if k in fields]
    if multiples:
        for k in multiples:
            out[k] = _number(spec, k, fields[k])
        return out
    for k in ("n", "d", "D"):
        if k not in fields:
            raise InputError(f"--bearing {spec!r}: needs n (elements), d (element diameter) and D (pitch diameter), "
                             "e.g. n=9,d=0.3126in,D=1.537in,angle=0")
    n = _number(spec, "n", fields["n"])
    if n != int(n):
        raise InputError(f"--bearing {spec!r}: n={fields['n']}: the number of elements must be a whole number")
    lengths = {}
    for k in ("d", "D"):
        m = _LENGTH.match(fields[k])
        if m is None:
            raise InputError(f"--bearing {spec!r}: {k}={fields[k]!r}: give a length with its unit, mm or in (e.g. {k}=0.3126in)")
        lengths[k] = (float(m.group(1)), m.group(2))
    unit = lengths["d"][1] if lengths["d"][1] == lengths["D"][1] else "mm"
    to_unit = {("in", "mm"): 25.4, ("mm", "mm"): 1.0, ("in", "in"): 1.0}
    out.update(elements=int(n), diameter_unit=unit,
               element_diameter=lengths["d"][0] * to_unit[(lengths["d"][1], unit)],
               pitch_diameter=lengths["D"][0] * to_unit[(lengths["D"][1], unit)],
               contact_angle_deg=_number(spec, "angle", fields.get("angle", "0")))
    return out


def _model_error(what: str, e: Exception) -> InputError:
    from pydantic import ValidationError  # noqa: PLC0415

    if isinstance(e, ValidationError):
        err = e.errors(include_url=False)[0]
        loc = ".".join(str(x) for x in err["loc"])
        msg = err["msg"].removeprefix("Value error, ")
        return InputError(f"{what}: {loc + ': ' if loc else ''}{msg}")
    return InputError(f"{what}: {e}")


def quick_machine(args: argparse.Namespace, envelope_band: tuple[float, float] | None):
    """A one-point machine from the command-line options."""
    from ..settings import models  # noqa: PLC0415

    if args.rpm is None:
        raise InputError("give --rpm (and --bearing for bearing findings), or --config C --point P")
    bearings = []
    for i, spec in enumerate(args.bearing, start=1):
        fields = parse_bearing(spec, i)
        try:
            bearings.append(models.Bearing(**fields))
        except Exception as e:  # pydantic ValidationError
            raise _model_error(f"--bearing {spec!r}", e) from None
    bands: list[dict[str, Any]] = [{"name": "1x", "quantity": "velocity", "feature": "shaft", "harmonics": 1},
                                   {"name": "2x", "quantity": "velocity", "low_order": 1.9, "high_order": 2.1}]
    if args.blades:
        bands.append({"name": "blade-pass", "quantity": "velocity", "feature": "blade_pass", "harmonics": 2})
    for b in bearings:
        for feature in ("bpfo", "bpfi", "bsf"):
            bands.append({"name": f"{b.id}-{feature}", "quantity": "envelope", "feature": feature, "bearing": b.id})
    try:
        return models.Machine(
            id="recording",
            speed=models.Speed(mode="fixed", rpm=args.rpm),
            bearings=bearings,
            blades=args.blades,
            line_frequency_hz=args.line_frequency,
            points=[models.Point(id="p1", sensor=models.Sensor(channel=0, sensitivity_mv_per_g=1000.0))],
            bands=[models.band_from(b) for b in bands],
            analysis=models.Analysis(envelope=models.Envelope(band_hz=envelope_band)),
        )
    except Exception as e:  # pydantic ValidationError
        raise _model_error("quick-mode machine (--rpm/--bearing/--blades/--line-frequency)", e) from None


def config_machine(args: argparse.Namespace, envelope_band: tuple[float, float] | None):
    from ..settings.loading import load_config  # noqa: PLC0415

    cfg = load_config(args.config)
    ids = [m.id for m in cfg.machines]
    if args.machine is None:
        if len(ids) > 1:
            raise ConfigError([f"{args.config}: holds machines {', '.join(ids)}: choose one with --machine"])
        machine = cfg.machines[0]
    elif args.machine in ids:
        machine = cfg.machine(args.machine)
    else:
        raise ConfigError([f"{args.config}: no machine {args.machine!r}; known: {', '.join(ids)}"])
    points = [p.id for p in machine.points]
    if args.point is None:
        if len(points) > 1:
            raise ConfigError([f"{args.config}: machine {machine.id} has points {', '.join(points)}: choose one with --point"])
        point = machine.points[0]
    elif args.point in points:
        point = machine.point(args.point)
    else:
        raise ConfigError([f"{args.config}: machine {machine.id} has no point {args.point!r}; known: {', '.join(points)}"])
    if args.line_frequency is not None:
        machine = _with_line_frequency(machine, args.line_frequency)
    if envelope_band is not None:
        env = machine.analysis.envelope.model_copy(update={"band_hz": envelope_band})
        machine = machine.model_copy(update={"analysis": machine.analysis.model_copy(update={"envelope": env})})
    return machine, point


def _with_line_frequency(machine, hz: float):
    from ..settings import models  # noqa: PLC0415

    try:
        doc = machine.model_dump()
        if machine.overall.low_edge_by_speed:
            doc["overall"]["low_hz"] = None  # still chosen by the speed
        return models.Machine.model_validate({**doc, "line_frequency_hz": hz})
    except Exception as e:  # pydantic ValidationError
        raise _model_error(f"--line-frequency {hz:g}", e) from None


def parse_band(text: str | None) -> tuple[float, float] | None:
    if text is None:
        return None
    parts = text.split(",")
    try:
        lo, hi = (float(v) for v in parts)
    except ValueError:
        raise InputError(f"--envelope-band {text!r}: give two frequencies in Hz, LO,HI (e.g. 2000,7000)") from None
    if not (0 < lo < hi and math.isfinite(hi)):
        raise InputError(f"--envelope-band {text!r}: need 0 < LO < HI")
    return lo, hi


# ------------------------------------------------------------------------------------------- report
def build_report(path: str, machine, point, result, fs_hz: float, n: int) -> dict[str, Any]:
    from ..analysis.labels import kinematic_lines, match_line, strongest_peaks  # noqa: PLC0415

    band_q = {b.name: b.quantity for b in machine.bands_for(point.id)}
    shaft_hz = result.rpm / 60.0
    peaks = []
    env = result.envelope
    if env is not None and env.freqs_hz.size > 2:
        bearing_ids = [point.bearing] if point.bearing else None
        lines = kinematic_lines(machine, shaft_hz, float(env.freqs_hz[-1]) * 1.05, bearing_ids)
        df = float(env.freqs_hz[1] - env.freqs_hz[0])
        for hz, amp in strongest_peaks(env.freqs_hz, env.amplitude, count=8, min_hz=max(2.0, 0.25 * shaft_hz)):
            line = match_line(hz, lines, df)
            peaks.append({"frequency_hz": round(hz, 3), "amplitude_m_s2": amp,
                          "matches": line.label if line else None, "bearing": line.bearing if line else None,
                          "electrical": bool(line and line.kind == "electrical")})
    w = result.waveform
    return {
        "file": path,
        "fs_hz": fs_hz,
        "n_samples": n,
        "duration_s": n / fs_hz,
        "machine": machine.id,
        "point": point.id,
        "rpm": result.rpm,
        "rpm_source": result.rpm_source,
        "shaft_hz": shaft_hz,
        "speed_change_pct": result.speed_change_pct,
        "order_tracked": result.order_tracked,
        "speed_unsteady": result.speed_unsteady,
        "overall_velocity_mm_s": result.overall_velocity_mm_s,
        "overall_band_hz": [machine.overall.low_hz, machine.overall.high_hz],
        "line_frequency_hz": machine.line_frequency_hz,
        "iso_zone": result.iso_zone,
        "iso_group": machine.iso_group,
        "support": machine.support,
        "waveform": {"rms_m_s2": w.rms_m_s2, "peak_m_s2": w.peak_m_s2, "crest_factor": w.crest_factor,
                     "kurtosis": w.kurtosis, "mean_m_s2": w.mean_m_s2},
        "envelope_band_hz": list(result.envelope_band_hz),
        "envelope_band_searched": machine.analysis.envelope.band_hz is None,
        "envelope_kurtosis": result.envelope_kurtosis,
        "bands": {name: {"value": v, "unit": quantity(band_q[name]).unit, "quantity": band_q[name]} for name, v in result.bands.items()},
        "findings": [f.as_json() for f in result.findings],
        "defect_prominence": dict(result.defect_prominence),
        "envelope_peaks": peaks,
    }


def _speed_change_lines(r: dict[str, Any]) -> list[str]:
    change = r.get("speed_change_pct")
    if change is None or (abs(change) < 0.1 and not r.get("speed_unsteady")):
        return []
    if r.get("speed_unsteady"):
        how = ("more than the steady limit: order lines and bearing findings rest on the estimated speed ramp"
               + (", resampled along it" if r.get("order_tracked") else " and are smeared") + "; less certain")
    elif r.get("order_tracked"):
        how = "order bands and envelope resampled to shaft angle"
    else:
        how = "within the steady limit"
    return [f"  speed change      {change:+.2f} % within the recording ({how})"]


def format_text(r: dict[str, Any]) -> str:
    w = r["waveform"]
    lo, hi = r["envelope_band_hz"]
    how = "searched" if r["envelope_band_searched"] else "fixed"
    sk = f", spectral kurtosis {r['envelope_kurtosis']:.2f}" if r["envelope_kurtosis"] is not None else ""
    cut = f" (first {r['duration_s']:.2f} s of {r['file_duration_s']:.2f} s)" if r["file_duration_s"] > r["duration_s"] else ""
    lines = [
        f"{r['file']}: {r['duration_s']:.2f} s at {r['fs_hz']:g} Hz ({r['n_samples']} samples){cut}, "
        f"machine {r['machine']} point {r['point']}",
        f"  samples           channel {r['channel']} in {r['unit']} ({r['unit_from']})",
        f"  speed             {r['rpm']:.1f} r/min ({r['rpm_source']}), 1x = {r['shaft_hz']:.2f} Hz"
        + (f"; line frequency {r['line_frequency_hz']:g} Hz (2xLF {2 * r['line_frequency_hz']:g} Hz, electrical)"
           if r.get("line_frequency_hz") else ""),
        *_speed_change_lines(r),
        f"  overall velocity  {r['overall_velocity_mm_s']:.3f} mm/s RMS ({r['overall_band_hz'][0]:g}-{r['overall_band_hz'][1]:g} Hz): "
        f"ISO 20816-3 zone {r['iso_zone']} (group {r['iso_group']}, {r['support']})",
        f"  waveform          RMS {w['rms_m_s2']:.4g} m/s^2 ({w['rms_m_s2'] / G_N:.4g} g), peak {w['peak_m_s2']:.4g} m/s^2, "
        f"crest factor {w['crest_factor']:.2f}, kurtosis {w['kurtosis']:.2f}",
        f"  envelope band     {lo:.0f}-{hi:.0f} Hz ({how}{sk})",
    ]
    if r["bands"]:
        lines.append("  bands")
        for name, b in r["bands"].items():
            lines.append(f"    {name:<18}{b['quantity']:<14}{b['value']:.4g} {b['unit']}")
    if r["findings"]:
        lines.append("  findings (strongest first)")
        for f in r["findings"]:
            if f.get("kind", "bearing") != "bearing":  # shaft, drive, flow, electrical, gear: its sentence
                sev_mm_s = f"{f['severity_mm_s']:.2f} mm/s" if f["severity_mm_s"] is not None else "-"
                lines.append(f"    {f['name']:<5} {f['sentence']} (severity {sev_mm_s}, confidence {f['confidence']})")
                continue
            series = f" as {f['series']}" if f["series"] and f["series"] != f["name"] else ""
            sev = f"{f['severity_m_s2']:.3g} m/s^2" if f["severity_m_s2"] is not None else "-"
            h, s = f["harmonics_found"], f["sidebands_found"]
            lines.append(f"    {f['name']:<5} bearing {f['bearing']}: severity {sev} (envelope), line at "
                         f"{f['measured_hz']:.2f} Hz{series} (expected {f['expected_hz']:.2f} Hz), "
                         f"{f['prominence_db']:.1f} dB over the local floor "
                         f"({h} harmonic{'s' if h != 1 else ''}, {s} sideband{'s' if s != 1 else ''})")
    else:
        lines.append("  findings          none: no bearing defect line stands out clearly")
    if r["envelope_peaks"]:
        lines.append("  strongest envelope peaks")
        several = len({p["bearing"] for p in r["envelope_peaks"] if p["bearing"]}) > 1
        for p in r["envelope_peaks"]:
            name = p["matches"] or "-"
            if p["bearing"] and several:
                name += f", bearing {p['bearing']}"
            if p["electrical"]:
                name += " (electrical)"
            lines.append(f"    {p['frequency_hz']:8.2f} Hz  {p['amplitude_m_s2']:.4g} m/s^2  {name}")
    return "\n".join(lines)


def run(args: argparse.Namespace) -> int:
    from ..analysis.point import PointAnalyzer  # noqa: PLC0415

    band = parse_band(args.envelope_band)
    if args.config is not None:
        machine, point = config_machine(args, band)
    else:
        if args.machine or args.point:
            raise InputError("--machine and --point need --config")
        machine = quick_machine(args, band)
        point = machine.points[0]
    if args.rpm is not None and not (math.isfinite(args.rpm) and args.rpm > 0):
        raise InputError(f"--rpm {args.rpm:g}: must be a speed above 0")
    if not (math.isfinite(args.max_seconds) and args.max_seconds > 0):
        raise InputError(f"--max-seconds {args.max_seconds:g}: must be a positive number of seconds")
    if args.at is not None:  # one element of a history, through the history reader
        from ..history.command import element_samples

        if args.config is None:
            raise InputError("--at needs --config (the machine the history belongs to)")
        x_el, fs_el, name = element_samples(args, machine, point)
        rec = Samples(x_el, fs_el, x_el.size, point.sensor.channel, "m/s2", f"history element {name}")
    else:
        rec = read_recording(args.file, args.unit, args.channel, point if args.config is not None else None,
                             args.max_seconds)
    x, fs, n_file = rec.x_m_s2, rec.fs_hz, rec.n_file
    # the recording is one update: its length is the window (envelope lines are sized to fit it)
    machine = machine.model_copy(update={"analysis": machine.analysis.model_copy(update={"window_s": x.size / fs})})
    try:
        analyzer = PointAnalyzer(machine, point, fs)
        result = analyzer.analyze(x, rpm=args.rpm, keep_spectra=True)
    except InputError as e:
        raise InputError(f"{args.file}: {e}") from None
    report = build_report(args.file, machine, point, result, fs, x.size)
    report["file_duration_s"] = n_file / fs
    report.update(channel=rec.channel, unit=rec.unit, unit_from=rec.unit_from)
    if args.format == "json":
        json.dump(report, sys.stdout, indent=2, allow_nan=False, default=_json_default)
        sys.stdout.write("\n")
    else:
        print(format_text(report))
    return 0


def _json_default(o: Any) -> Any:
    if isinstance(o, (np.floating, np.integer)):
        return o.item()
    raise TypeError(f"not JSON serialisable: {type(o).__name__}")
