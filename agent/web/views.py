"""Pure functions that turn analysis records into what the status page draws.

Nothing here holds state or locks: :mod:`rotorwatch.web.board` calls these once per published update
(the costly part: downsampling spectra and waveforms, rounding numbers for JSON) and the HTTP server
only serialises the prepared dictionaries.

Downsampling keeps what an analyst looks for:

- a spectrum is cut into buckets of consecutive lines and each bucket keeps its *largest* line (at that
  line's frequency), so a narrow defect peak never disappears between two kept lines;
- a waveform bucket keeps its minimum and its maximum, in time order, so impacts and clipping stay
  visible (the usual "min/max envelope" decimation of oscilloscopes and plotting libraries).
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence

import numpy as np

from .. import kinematics
from ..alarms.projection import as_json as projection_json
from ..alarms.projection import describe as describe_projection
from ..analysis import labels, severity
from ..analysis.result import PointResult, Spectrum
from ..analysis.tachphase import readings as order_readings
from ..settings.models import Machine

#: Harmonics drawn per marker family (our own choice: enough to recognise a harmonic series).
MARKER_HARMONICS = {"shaft": 4, "blade_pass": 3, "bpfo": 5, "bpfi": 5, "bsf": 4, "ftf": 3, "electrical": 3}

def sig(x: float | None, digits: int = 4) -> float | None:
    """``x`` rounded to ``digits`` significant digits for JSON; NaN and infinities become ``None``."""
    if x is None:
        return None
    x = float(x)
    if not math.isfinite(x):
        return None
    return float(f"{x:.{digits}g}")


def sig_list(values: Iterable[float], digits: int = 4) -> list[float | None]:
    return [sig(v, digits) for v in values]


# ------------------------------------------------------------------------------------- downsampling
def peak_downsample(freqs_hz: np.ndarray, amplitude: np.ndarray, max_points: int) -> tuple[np.ndarray, np.ndarray]:
    """Keep at most ``max_points`` lines: the largest line of each bucket of consecutive lines."""
    freqs_hz = np.asarray(freqs_hz, dtype=float)
    amplitude = np.asarray(amplitude, dtype=float)
    n = amplitude.size
    if n <= max_points:
        return freqs_hz, amplitude
    per = math.ceil(n / max_points)
    n_buckets = math.ceil(n / per)
    padded = np.full(n_buckets * per, -np.inf)
    padded[:n] = np.where(np.isfinite(amplitude), amplitude, -np.inf)
    idx = padded.reshape(n_buckets, per).argmax(axis=1) + np.arange(n_buckets) * per
    idx = np.minimum(idx, n - 1)
    return freqs_hz[idx], amplitude[idx]


def minmax_downsample(values: np.ndarray, max_points: int) -> tuple[np.ndarray, np.ndarray]:
    """Indices and values of at most ``max_points`` samples: each bucket's min and max in time order."""
    values = np.asarray(values, dtype=float)
    n = values.size
    if n <= max_points:
        return np.arange(n), values
    n_buckets = max(1, max_points // 2)
    per = math.ceil(n / n_buckets)
    n_buckets = math.ceil(n / per)
    padded_hi = np.full(n_buckets * per, -np.inf)
    padded_lo = np.full(n_buckets * per, np.inf)
    padded_hi[:n] = values
    padded_lo[:n] = values
    base = np.arange(n_buckets) * per
    i_max = padded_hi.reshape(n_buckets, per).argmax(axis=1) + base
    i_min = padded_lo.reshape(n_buckets, per).argmin(axis=1) + base
    idx = np.sort(np.stack([np.minimum(i_min, i_max), np.maximum(i_min, i_max)], axis=1).ravel())
    return idx, values[idx]


# --------------------------------------------------------------------------------------- spectra
def spectrum_view(spectrum: Spectrum, max_points: int) -> dict:
    """A spectrum for the page. ``n_lines`` counts lines the way the configuration and ``rotorwatch
    check`` do: ``fmax / resolution``, the lines above 0 Hz (the DC bin is not a line)."""
    f, a = peak_downsample(spectrum.freqs_hz, spectrum.amplitude, max_points)
    freqs = np.asarray(spectrum.freqs_hz, dtype=float)
    n_bins = int(freqs.size)
    n_lines = int(np.count_nonzero(freqs > 0))
    df = float(freqs[1] - freqs[0]) if n_bins > 1 else None
    return {
        "unit": spectrum.unit,
        "n_lines": n_lines,
        "resolution_hz": sig(df),
        "fmax_hz": sig(float(freqs[-1])) if n_bins else None,
        "freqs_hz": sig_list(f, 6),
        "amplitude": sig_list(a, 4),
    }


def waveform_view(samples_m_s2: np.ndarray, fs_hz: float, span_s: float, max_points: int) -> dict:
    """The last ``span_s`` of a calibrated acceleration block, min/max-decimated."""
    x = np.asarray(samples_m_s2, dtype=float).ravel()
    n_keep = max(1, min(x.size, int(round(span_s * fs_hz))))
    x = x[-n_keep:]
    idx, vals = minmax_downsample(x, max_points)
    return {
        "unit": "m/s^2",
        "fs_hz": sig(fs_hz, 6),
        "span_s": sig(n_keep / fs_hz),
        "n_samples": int(n_keep),
        "t_ms": sig_list(idx * (1000.0 / fs_hz), 6),
        "values": sig_list(vals, 4),
    }


# --------------------------------------------------------------------------------------- markers
def _bearings_for_point(machine: Machine, point_id: str):
    point = machine.point(point_id)
    if point.bearing is not None:
        return [machine.bearing(point.bearing)]
    return list(machine.bearings)


def defect_markers(machine: Machine, point_id: str, rpm: float | None) -> list[dict]:
    """Kinematic frequencies and their harmonics at ``rpm`` for one point.

    Families: ``shaft`` (1x, 2x, ...), ``blade_pass``, ``electrical`` (2xLF and its harmonics, when the
    machine has a line frequency) and the rolling-bearing defect rates of the point's bearing (all
    bearings when the point names none). Frequencies come from
    :func:`rotorwatch.kinematics.frequency_table`, which the analysis uses too.
    """
    if rpm is None or not math.isfinite(rpm) or rpm <= 0:
        return []
    table = kinematics.frequency_table(machine, rpm)
    markers: list[dict] = []

    def add(family: str, label: str, base_hz: float, bearing: str | None = None) -> None:
        for k in range(1, MARKER_HARMONICS[family] + 1):
            markers.append({
                "family": family,
                "bearing": bearing,
                "k": k,
                "label": labels.harmonic(k, "1x" if family == "shaft" else label),
                "freq_hz": sig(k * base_hz, 6),
            })

    add("shaft", "1x", table["1x"])
    if "blade_pass" in table:
        add("blade_pass", "BP", table["blade_pass"])
    if "2xLF" in table:  # electrical lines: 2xLF, 4xLF, 6xLF
        for k in range(1, MARKER_HARMONICS["electrical"] + 1):
            markers.append({"family": "electrical", "bearing": None, "k": k, "label": labels.twice_line_frequency(k),
                            "freq_hz": sig(k * table["2xLF"], 6)})
    for b in _bearings_for_point(machine, point_id):
        for name in kinematics.DEFECTS:
            add(name, name.upper(), table[f"{name}:{b.id}"], b.id)
    return markers


def band_regions(machine: Machine, point_id: str, result: PointResult, values: dict) -> list[dict]:
    """Where each trended band lies at the current speed, on the spectrum it reads.

    Besides the configured bands: the overall-velocity range (on the velocity spectrum) and the
    envelope demodulation band (on the acceleration spectrum).
    """
    shaft_hz = result.rpm / 60.0 if result.rpm and math.isfinite(result.rpm) else None
    regions = []
    for band in machine.bands_for(point_id):
        if shaft_hz is None and band.follows_speed:
            continue
        parts = kinematics.band_edges_hz(machine, band, shaft_hz or 0.0)
        status = values.get(band.name)
        regions.append({
            "name": band.name,
            "kind": "band",
            "quantity": band.quantity,
            "parts_hz": [[sig(lo, 6), sig(hi, 6)] for lo, hi in parts],
            "state": status.state if status is not None else None,
        })
    overall = values.get("overall")
    regions.append({
        "name": "overall",
        "kind": "overall",
        "quantity": "velocity",
        "parts_hz": [[sig(machine.overall.low_hz, 6), sig(machine.overall.high_hz, 6)]],
        "state": overall.state if overall is not None else None,
    })
    lo, hi = result.envelope_band_hz
    regions.append({
        "name": "envelope band",
        "kind": "demodulation",
        "quantity": "acceleration",
        "parts_hz": [[sig(lo, 6), sig(hi, 6)]],
        "state": None,
    })
    return regions


# ------------------------------------------------------------------------------------------ values
def value_quantity(machine: Machine, name: str) -> str:
    if name == "overall":
        return "velocity"
    for band in machine.bands:
        if band.name == name:
            return band.quantity
    return "other"


def pending_level(status) -> str | None:
    """``alarm`` (or ``warning``) when the value is at or above that level but its state has not risen
    to it yet: the on-delay is running. The tracker raises a level as soon as its on-delay has run out,
    so a value at or above a level in a lower state is exactly one that waits out its on-delay
    (:class:`rotorwatch.alarms.levels.LevelTracker`)."""
    rank = {"learning": 0, "normal": 0, "warning": 1, "alarm": 2}
    if status.state not in rank or status.value is None or not math.isfinite(status.value):
        return None
    for kind, level in (("alarm", status.alarm_level), ("warning", status.warning_level)):
        if level is not None and status.value >= level and rank[status.state] < rank[kind]:
            return kind
    return None


def value_rows(machine: Machine, values: dict) -> list[dict]:
    """One row per trended value: the value, its effective levels, its state and a pending level."""
    rows = []
    order = ["overall"] + [b.name for b in machine.bands]
    for name in sorted(values, key=lambda n: (order.index(n) if n in order else len(order), n)):
        v = values[name]
        rows.append({
            "name": name,
            "quantity": value_quantity(machine, name),
            "value": sig(v.value),
            "unit": v.unit,
            "state": v.state,
            "pending": pending_level(v),
            "warning": sig(v.warning_level),
            "alarm": sig(v.alarm_level),
            "baseline": sig(v.baseline),
            "latched": bool(v.latched),
            "projection": projection_view(getattr(v, "projection", None), v.unit),
        })
    return rows


def projection_view(p, unit: str) -> dict | None:
    """A value's time to its levels for the page: the fields MQTT carries and one line of text."""
    if p is None:
        return None
    return {**(projection_json(p, sig) or {}), "text": describe_projection(p, unit)}


def iso_view(machine: Machine) -> dict:
    return {
        "group": machine.iso_group,
        "support": machine.support,
        "boundaries_mm_s": list(severity.boundaries(machine.iso_group, machine.support)),
        "zones": list(severity.ZONES),
    }


def waveform_stats(result: PointResult) -> dict:
    w = result.waveform
    return {
        "peak_m_s2": sig(w.peak_m_s2),
        "rms_m_s2": sig(w.rms_m_s2),
        "crest_factor": sig(w.crest_factor),
        "kurtosis": sig(w.kurtosis),
        "mean_m_s2": sig(w.mean_m_s2),
    }


def findings_view(result: PointResult) -> list[dict]:
    return [{**f.as_json(sig), "expected_hz": sig(f.expected_hz, 6), "measured_hz": sig(f.measured_hz, 6)}
            for f in result.findings]


def event_view(event) -> dict:
    return {
        "time_s": event.time_s,
        "machine": event.machine_id,
        "point": event.point_id,
        "value": event.value_name,
        "from": event.old_state,
        "to": event.new_state,
        "reading": sig(event.value),
        "unit": event.unit,
        "level": sig(event.level),
        "level_kind": event.level_kind,
        "reason": event.reason,
    }


def columns(samples: Sequence[dict], key: str) -> list:
    return [s.get(key) for s in samples]


def orders_view(result: PointResult) -> list[dict]:
    """With a tach: the tach-locked 1x and 2x (velocity RMS, phase at the pulse, frequency) for the page."""
    return [{"order": o.order, "velocity_mm_s": sig(o.velocity_mm_s), "phase_deg": sig(o.phase_deg, 4),
             "frequency_hz": sig(o.frequency_hz, 5)} for o in order_readings(result)]


#: The tach-locked order figures the page trends, with their units (the trend store's names).
ORDER_TREND_UNITS = {"velocity_mm_s": "mm/s", "phase_deg": "deg"}


def order_trend_sample(result: PointResult) -> dict:
    """``{"1x_velocity_mm_s": ..., "1x_phase_deg": ..., ...}`` of one update (empty without a tach)."""
    out = {}
    for row in orders_view(result):
        for key in ORDER_TREND_UNITS:
            out[f"{row['order']}_{key}"] = row[key]
    return out


def order_trend_series(samples: list[dict]) -> list[dict]:
    """Trend series of the tach-locked orders over the board's samples (none when no sample had a tach)."""
    names: list[str] = []
    for s in samples:
        names += [n for n in s.get("orders", {}) if n not in names]
    out = []
    for n in sorted(names):
        unit = next(u for k, u in ORDER_TREND_UNITS.items() if n.endswith(k))
        values = [s.get("orders", {}).get(n) for s in samples]
        out.append({"name": n, "quantity": "order", "unit": unit, "values": values,
                    "warning": [None] * len(values), "alarm": [None] * len(values), "state": [None] * len(values)})
    return out
