"""JSON payloads the daemon publishes over MQTT, built from :class:`MachineUpdate` records.

Pure functions, no I/O: the MQTT publisher turns them into bytes with :func:`encode`. The topic tree
and every payload are documented with examples in deploy/mqtt-topics.md; change both together.

Units are in the key names (``_mm_s``, ``_m_s2``, ``_hz``) or, for band values whose unit depends on
the band's quantity, in a ``unit`` field beside the value. Non-finite numbers become ``null``.
"""

from __future__ import annotations

import json
import math
from datetime import UTC, datetime
from typing import Any

from ... import __version__
from ...alarms.projection import as_json as projection_json
from ...alarms.records import AlarmEvent, MachineUpdate, PointUpdate, ValueStatus
from ...alarms.sensor_checks import BLOCK_FAULTS
from ...analysis.tachphase import readings as order_readings
from ...settings.models import Machine
from ..quantities import band_quantities, payload_unit

#: Carried in every state payload so no dashboard mistakes the agent for a trip system.
ADVISORY = ("condition monitoring only: not a protection or trip system; act on alarms through "
            "your site's procedures")

SCHEMA = 2  # bumped when a payload changes incompatibly (2: findings' fields renamed, see deploy/mqtt-topics.md)


def num(x: Any, digits: int = 6) -> float | None:
    """A finite float rounded to ``digits`` significant digits, else None."""
    if x is None:
        return None
    try:
        v = float(x)
    except (TypeError, ValueError):
        return None
    if not math.isfinite(v):
        return None
    if v == 0.0:
        return 0.0
    return float(f"{v:.{digits}g}")


def iso_time(time_s: float) -> str:
    """POSIX seconds -> ``2026-03-01T12:00:05.250Z`` (UTC, milliseconds)."""
    dt = datetime.fromtimestamp(time_s, tz=UTC)
    return dt.strftime("%Y-%m-%dT%H:%M:%S.") + f"{dt.microsecond // 1000:03d}Z"


def encode(payload: dict[str, Any]) -> bytes:
    return json.dumps(payload, allow_nan=False, separators=(",", ":"), ensure_ascii=False).encode("utf-8")


def value_payload(v: ValueStatus, quantity: str | None = None) -> dict[str, Any]:
    out: dict[str, Any] = {
        "value": num(v.value),
        "unit": v.unit,
        "state": v.state,
        "warning_level": num(v.warning_level),
        "alarm_level": num(v.alarm_level),
        "baseline": num(v.baseline),
        "latched": bool(v.latched),
        "reason": getattr(v, "reason", ""),
        "drop_warning_level": num(v.drop_warning_level),
        "drop_alarm_level": num(v.drop_alarm_level),
        "raises": int(v.raises),
        "chatter": int(v.chatter),
        "projection": projection_json(v.projection, num, iso_time),
    }
    if quantity is not None:
        out["quantity"] = quantity
    return out


def data_quality_payload(point: PointUpdate, counts: dict[str, Any] | None = None) -> dict[str, Any]:
    """The data-quality block of a point: what the sensor checks measured on the window (``null`` when
    nothing was measured: a stalled input, an overflow, no samples) and the counts ``counts`` gives
    (``sensor_faults``: entries into each fault kind on this point; ``input_overflows``,
    ``input_gaps``, ``source_stalls``: the agent's input, since the agent started)."""
    h = point.health
    measured = (h.ok and point.result is not None) or h.fault in BLOCK_FAULTS
    out: dict[str, Any] = {
        "sensor_ok": bool(h.ok),
        "fault": h.fault,
        "clipped_fraction": num(h.clipped_fraction) if measured else None,
        "rms_v": num(h.rms_v) if measured else None,
        "mean_v": num(h.mean_v) if measured else None,
    }
    out.update(counts or {})
    return out


def availability_payload(online: bool) -> bytes:
    return b"online" if online else b"offline"


def machine_state_payload(update: MachineUpdate, agent_id: str, machine: Machine | None = None) -> dict[str, Any]:
    rpm = num(update.rpm)
    return {
        "schema": SCHEMA,
        "agent": agent_id,
        "machine": update.machine_id,
        "name": machine.name if machine is not None else "",
        "state": update.state,
        "reason": update.reason,
        "rpm": rpm,
        "shaft_speed_hz": num(rpm / 60.0) if rpm is not None else None,
        "rpm_source": update.rpm_source,
        "time": iso_time(update.time_s),
        "time_s": num(update.time_s, 15),
        "points": {pid: p.state for pid, p in update.points.items()},
        "notice": ADVISORY,
    }


def point_state_payload(update: MachineUpdate, point: PointUpdate, agent_id: str,
                        machine: Machine | None = None, quality: dict[str, Any] | None = None) -> dict[str, Any]:
    quantities = band_quantities(machine)
    result = point.result
    overall = point.values.get("overall")
    out: dict[str, Any] = {
        "schema": SCHEMA,
        "agent": agent_id,
        "machine": update.machine_id,
        "point": point.point_id,
        "state": point.state,
        "reason": point.reason,
        "time": iso_time(update.time_s),
        "time_s": num(update.time_s, 15),
        "sensor": {"ok": point.health.ok, "fault": point.health.fault, "reason": point.health.reason},
        "overall": {
            "velocity_mm_s": num(result.overall_velocity_mm_s) if result is not None else None,
            "iso_zone": result.iso_zone if result is not None else None,
            "state": overall.state if overall is not None else None,
            "warning_level_mm_s": num(overall.warning_level) if overall is not None else None,
            "alarm_level_mm_s": num(overall.alarm_level) if overall is not None else None,
            "baseline_mm_s": num(overall.baseline) if overall is not None else None,
        },
        "values": {name: value_payload(v, quantities.get(name)) for name, v in point.values.items()},
        "findings": {
            name: {"state": f.state, "present": bool(f.present), "seen": int(f.seen), "window": int(f.window),
                   "strength": num(f.strength), "bearing": f.bearing, "reason": f.reason,
                   "raises": int(f.raises), "chatter": int(f.chatter)}
            for name, f in point.findings.items()
        },
        "data_quality": data_quality_payload(point, quality),
        "notice": ADVISORY,
    }
    return out


def point_metrics_payload(update: MachineUpdate, point: PointUpdate, agent_id: str,
                          machine: Machine | None = None, quality: dict[str, Any] | None = None) -> dict[str, Any] | None:
    """The periodic measurement record of one point, or None when the point has no result."""
    r = point.result
    if r is None:
        return None
    quantities = band_quantities(machine)
    w = r.waveform
    return {
        "schema": SCHEMA,
        "agent": agent_id,
        "machine": update.machine_id,
        "point": point.point_id,
        "time": iso_time(r.time_s),
        "time_s": num(r.time_s, 15),
        "rpm": num(r.rpm),
        "rpm_source": r.rpm_source,
        "speed_change_pct": num(r.speed_change_pct) if r.speed_change_pct is not None else None,
        "order_tracked": r.order_tracked,
        "speed_unsteady": r.speed_unsteady,
        "overall_velocity_mm_s": num(r.overall_velocity_mm_s),
        "iso_zone": r.iso_zone,
        "bands": {
            name: {"value": num(v), "unit": payload_unit(quantities.get(name)),
                   "quantity": quantities.get(name)}
            for name, v in r.bands.items()
        },
        "waveform": {
            "rms_m_s2": num(w.rms_m_s2),
            "peak_m_s2": num(w.peak_m_s2),
            "crest_factor": num(w.crest_factor),
            "kurtosis": num(w.kurtosis),
            "mean_m_s2": num(w.mean_m_s2),
        },
        "envelope_band_hz": [num(r.envelope_band_hz[0]), num(r.envelope_band_hz[1])],
        "envelope_band_source": r.envelope_band_source,
        "envelope_band_review": band_review_payload(r.envelope_band_review),
        "findings": [f.as_json(num) for f in r.findings],
        "orders": orders_payload(r),
        "sample_rate_hz": num(r.fs_hz),
        "n_samples": int(r.n_samples),
        "data_quality": data_quality_payload(point, quality),
    }


def orders_payload(result: Any) -> dict[str, Any] | None:
    """With a tach: the tach-locked 1x and 2x (velocity RMS, phase at the pulse in degrees, frequency);
    None without a tach (:mod:`rotorwatch.analysis.tachphase`)."""
    got = order_readings(result)
    if not got:
        return None
    return {o.order: {"velocity_mm_s": num(o.velocity_mm_s), "phase_deg": num(o.phase_deg, 5),
                      "frequency_hz": num(o.frequency_hz)} for o in got}


def band_review_payload(review: Any) -> dict[str, Any] | None:
    """A kept demodulation band set against this update's search (None when no review ran)."""
    if review is None:
        return None
    return {"kept_hz": [num(review.kept_hz[0]), num(review.kept_hz[1])], "kept_score": num(review.kept_score),
            "best_hz": [num(review.best_hz[0]), num(review.best_hz[1])], "best_score": num(review.best_score),
            "criterion": review.criterion, "clearly_better": bool(review.clearly_better)}


def event_payload(event: AlarmEvent, agent_id: str) -> dict[str, Any]:
    return {
        "schema": SCHEMA,
        "agent": agent_id,
        "kind": "transition",
        "time": iso_time(event.time_s),
        "time_s": num(event.time_s, 15),
        "machine": event.machine_id,
        "point": event.point_id,
        "value_name": event.value_name,
        "old_state": event.old_state,
        "new_state": event.new_state,
        "value": num(event.value),
        "unit": event.unit,
        "level": num(event.level),
        "level_kind": event.level_kind,
        "reason": event.reason,
    }


def agent_event_payload(kind: str, message: str, agent_id: str, time_s: float, **detail: Any) -> dict[str, Any]:
    """An event about the agent itself (a rejected command, a rejected reload, a stalled source)."""
    return {
        "schema": SCHEMA,
        "agent": agent_id,
        "kind": kind,
        "time": iso_time(time_s),
        "time_s": num(time_s, 15),
        "message": message,
        **detail,
    }


def command_result_payload(agent_id: str, time_s: float, command: str | None, ok: bool,
                           message: str, request_id: Any = None, **detail: Any) -> dict[str, Any]:
    return {
        "schema": SCHEMA,
        "agent": agent_id,
        "id": request_id,
        "command": command,
        "ok": ok,
        "message": message,
        "time": iso_time(time_s),
        **detail,
    }


def hello_payload(agent_id: str, site_name: str, machines: list[str],
                  clock: dict[str, Any] | None = None) -> dict[str, Any]:
    """Retained description of the agent (``<prefix>/<agent>/info``); ``clock``: whose time the
    payloads carry (:func:`rotorwatch.sources.base.input_clock`: simulated or recorded input may run
    faster than the wall clock)."""
    out = {"schema": SCHEMA, "agent": agent_id, "site": site_name, "version": __version__,
           "machines": machines, "notice": ADVISORY}
    if clock is not None:
        out["clock"] = clock
    return out
