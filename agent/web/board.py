"""The status board: the latest state of every machine, kept for the built-in status page.

The daemon calls :meth:`StatusBoard.publish` after each pipeline step, from its processing thread; the
HTTP server's request threads call the view methods (:meth:`overview`, :meth:`point`, :meth:`trend`).
Threading contract: ``publish`` does the costly work (downsampling spectra to at most
``max_spectrum_points`` lines, the waveform to ``max_waveform_points`` samples, rounding for JSON)
*before* taking the lock, and the lock is held only to swap references in or to copy them out, so a
slow browser never delays the processing loop. Everything stored is immutable once published.

Memory is bounded: per point, one prepared update (spectra already downsampled; the full-resolution
spectra are dropped), and a trend ring of the last ``trend_length`` updates; the board keeps the last
``events_length`` alarm transitions of all machines.
"""

from __future__ import annotations

import dataclasses
import logging
import threading
import time
from collections import deque
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field

import numpy as np

from ..alarms.records import MachineUpdate, PointUpdate
from ..settings.models import Config, Machine
from ..settings.quantities import SPECTRA
from . import views
from .health import freshness, health

log = logging.getLogger(__name__)



@dataclass(frozen=True)
class _PreparedPoint:
    """What the page needs of one point's latest update, ready to serialise."""

    update: PointUpdate  # result without its full-resolution spectra
    spectra: dict  # quantity -> views.spectrum_view(...)
    waveform: dict | None
    markers: list
    regions: list
    values: list
    stats: dict | None
    findings: list
    orders: list = field(default_factory=list)  # with a tach: views.orders_view(...)


@dataclass
class _MachineEntry:
    update: MachineUpdate | None = None
    received_s: float | None = None
    revision: int = 0
    points: dict = field(default_factory=dict)  # point id -> _PreparedPoint
    trends: dict = field(default_factory=dict)  # point id -> deque of samples


class StatusBoard:
    """Thread-safe holder of the latest :class:`MachineUpdate` per machine and its JSON views.

    ``clock`` gives wall-clock POSIX seconds (injected for tests); it stamps when each update arrived,
    from which the views tell how old the data is and whether it is stale (no update for
    ``stale_after_updates`` update intervals, at least ``min_stale_s``).
    """

    def __init__(
        self,
        config: Config,
        *,
        max_spectrum_points: int = 2000,
        max_waveform_points: int = 2000,
        waveform_span_s: float = 0.2,
        trend_length: int = 500,
        events_length: int = 100,
        stale_after_updates: float = 3.0,
        min_stale_s: float = 15.0,
        clock: Callable[[], float] = time.time,
    ) -> None:
        if max_spectrum_points < 16 or max_waveform_points < 16:
            raise ValueError("max_spectrum_points and max_waveform_points must be at least 16")
        if trend_length < 1 or events_length < 1:
            raise ValueError("trend_length and events_length must be at least 1")
        self.max_spectrum_points = int(max_spectrum_points)
        self.max_waveform_points = int(max_waveform_points)
        self.waveform_span_s = float(waveform_span_s)
        self.trend_length = int(trend_length)
        self.stale_after_updates = float(stale_after_updates)
        self.min_stale_s = float(min_stale_s)
        self._clock = clock
        self._lock = threading.Lock()
        self._config = config
        self._machines: dict[str, _MachineEntry] = {m.id: _MachineEntry() for m in config.machines}
        self._events: deque = deque(maxlen=int(events_length))
        self._revision = 0
        self._input = ("starting", "")  # the capture's state and reason (set_input)

    # ------------------------------------------------------------------------------ writing side
    def reconfigure(self, config: Config) -> None:
        """Adopt a reloaded configuration: machines that remain keep their data, new ones start empty."""
        with self._lock:
            self._config = config
            self._machines = {m.id: self._machines.get(m.id, _MachineEntry()) for m in config.machines}
            self._revision += 1

    def set_input(self, state: str, reason: str) -> None:
        """The input's state (``running``, ``stalled``, ``ended``, ...) and why, for the page."""
        with self._lock:
            if self._input != (state, reason):
                self._input = (state, reason)
                self._revision += 1

    def publish(self, update: MachineUpdate, blocks_v: Mapping[str, np.ndarray] | None = None) -> None:
        """Take one machine's update (and, optionally, the point's raw blocks in volts for the waveform).

        An update for a machine that is not in the configuration is ignored with a log line.
        """
        with self._lock:
            config = self._config
        try:
            machine = config.machine(update.machine_id)
        except KeyError:
            log.warning("status board: update for unknown machine %r ignored", update.machine_id)
            return
        prepared = {pid: self._prepare(machine, pu, (blocks_v or {}).get(pid)) for pid, pu in update.points.items()
                    if pid in {p.id for p in machine.points}}
        samples = {pid: self._trend_sample(update, pu) for pid, pu in update.points.items() if pid in prepared}
        slim = dataclasses.replace(update, points={pid: p.update for pid, p in prepared.items()})
        now = self._clock()
        with self._lock:
            entry = self._machines.get(update.machine_id)
            if entry is None:  # removed by a reload meanwhile
                return
            entry.update = slim
            entry.received_s = now
            entry.points = {**entry.points, **prepared}
            for pid, sample in samples.items():
                ring = entry.trends.get(pid)
                if ring is None:
                    ring = entry.trends[pid] = deque(maxlen=self.trend_length)
                ring.append(sample)
            self._events.extend(update.events)
            self._revision += 1
            entry.revision = self._revision

    def _prepare(self, machine: Machine, pu: PointUpdate, block_v: np.ndarray | None) -> _PreparedPoint:
        result = pu.result
        if result is None:
            return _PreparedPoint(pu, {}, None, [], [], views.value_rows(machine, pu.values), None, [])
        spectra = {q: views.spectrum_view(getattr(result, q), self.max_spectrum_points)
                   for q in SPECTRA if getattr(result, q) is not None}
        waveform = None
        if block_v is not None and np.asarray(block_v).size:
            sensor = machine.point(pu.point_id).sensor
            accel = np.asarray(block_v, dtype=float) / sensor.volts_per_m_s2
            waveform = views.waveform_view(accel, result.fs_hz, self.waveform_span_s, self.max_waveform_points)
        slim = dataclasses.replace(pu, result=dataclasses.replace(result, acceleration=None, velocity=None, envelope=None))
        return _PreparedPoint(
            update=slim,
            spectra=spectra,
            waveform=waveform,
            markers=views.defect_markers(machine, pu.point_id, result.rpm),
            regions=views.band_regions(machine, pu.point_id, result, pu.values),
            values=views.value_rows(machine, pu.values),
            stats=views.waveform_stats(result),
            findings=views.findings_view(result),
            orders=views.orders_view(result),
        )

    @staticmethod
    def _trend_sample(update: MachineUpdate, pu: PointUpdate) -> dict:
        return {
            "time_s": update.time_s,
            "rpm": views.sig(update.rpm, 6),
            "state": pu.state,
            "values": {n: (views.sig(v.value), views.sig(v.warning_level), views.sig(v.alarm_level), v.state)
                       for n, v in pu.values.items()},
            "orders": views.order_trend_sample(pu.result) if pu.result is not None else {},
        }

    # ------------------------------------------------------------------------------ reading side
    def revision(self, machine_id: str | None = None) -> int:
        """A number that grows with every change (of one machine, or of the board)."""
        with self._lock:
            if machine_id is None:
                return self._revision
            entry = self._machines.get(machine_id)
            return entry.revision if entry is not None else -1

    def _snapshot(self):
        with self._lock:
            return (self._config, {mid: dataclasses.replace(e, points=dict(e.points)) for mid, e in self._machines.items()},
                    list(self._events), self._revision)

    def _input_view(self, config: Config) -> dict:
        from ..sources.base import input_clock

        with self._lock:
            state, reason = self._input
        return {"source": config.acquisition.source, "state": state, "reason": reason,
                **input_clock(config.acquisition)}

    def _freshness(self, config: Config, received_s: float | None, now: float) -> tuple[float | None, bool]:
        return freshness(config, received_s, now, self.stale_after_updates, self.min_stale_s)

    def overview(self) -> dict:
        """Every machine and point: states with reasons, speed, overall velocity and ISO zone."""
        config, machines, events, revision = self._snapshot()
        now = self._clock()
        out = []
        for m in config.machines:
            entry = machines[m.id]
            up = entry.update
            age, stale = self._freshness(config, entry.received_s, now)
            points = []
            for p in m.points:
                prepared = entry.points.get(p.id)
                pu = prepared.update if prepared is not None else None
                res = pu.result if pu is not None else None
                points.append({
                    "id": p.id,
                    "name": p.name or p.id,
                    "bearing": p.bearing,
                    "direction": p.sensor.direction,
                    "state": pu.state if pu is not None else "no_data",
                    "reason": pu.reason if pu is not None else "waiting for the first update",
                    "overall_mm_s": views.sig(res.overall_velocity_mm_s) if res is not None else None,
                    "zone": res.iso_zone if res is not None else None,
                    "sensor": ({"ok": pu.health.ok, "fault": pu.health.fault, "reason": pu.health.reason}
                               if pu is not None else None),
                    "values": prepared.values if prepared is not None else [],
                })
            out.append({
                "id": m.id,
                "name": m.name or m.id,
                "kind": m.kind,
                "state": up.state if up is not None else "no_data",
                "reason": up.reason if up is not None else "waiting for the first update",
                "rpm": views.sig(up.rpm, 5) if up is not None else None,
                "rpm_source": up.rpm_source if up is not None else None,
                "time_s": up.time_s if up is not None else None,
                "age_s": views.sig(age, 3),
                "stale": stale,
                "revision": entry.revision,
                "iso": views.iso_view(m),
                "points": points,
            })
        return {
            "site": {"name": config.site.name, "agent_id": config.site.agent_id},
            "now_s": now,
            "revision": revision,
            "update_interval_s": config.acquisition.update_interval_s / config.acquisition.speedup,
            "input": self._input_view(config),
            "machines": out,
            "events": [views.event_view(e) for e in reversed(events)],
        }

    def _lookup(self, machine_id: str, point_id: str):
        config, machines, _, _ = self._snapshot()
        try:
            machine = config.machine(machine_id)
            machine.point(point_id)
        except KeyError:
            raise KeyError(f"no point {machine_id}/{point_id}") from None
        return config, machine, machines[machine_id]

    def point(self, machine_id: str, point_id: str) -> dict:
        """The latest spectra, markers, band regions, waveform and values of one point.

        Raises :class:`KeyError` for an unknown machine or point.
        """
        config, machine, entry = self._lookup(machine_id, point_id)
        prepared = entry.points.get(point_id)
        p = machine.point(point_id)
        age, stale = self._freshness(config, entry.received_s, self._clock())
        base = {
            "machine": machine_id,
            "point": point_id,
            "name": p.name or p.id,
            "bearing": p.bearing,
            "revision": entry.revision,
            "age_s": views.sig(age, 3),
            "stale": stale,
        }
        if prepared is None:
            return {**base, "state": "no_data", "reason": "waiting for the first update", "time_s": None,
                    "rpm": None, "spectra": {}, "markers": [], "regions": [], "waveform": None,
                    "values": [], "stats": None, "findings": [], "orders": [], "sensor": None}
        pu = prepared.update
        res = pu.result
        return {
            **base,
            "state": pu.state,
            "reason": pu.reason,
            "time_s": res.time_s if res is not None else (entry.update.time_s if entry.update else None),
            "rpm": views.sig(res.rpm, 5) if res is not None else None,
            "rpm_source": res.rpm_source if res is not None else None,
            "overall_mm_s": views.sig(res.overall_velocity_mm_s) if res is not None else None,
            "zone": res.iso_zone if res is not None else None,
            "envelope_band_hz": [views.sig(x, 6) for x in res.envelope_band_hz] if res is not None else None,
            "sensor": {"ok": pu.health.ok, "fault": pu.health.fault, "reason": pu.health.reason},
            "spectra": prepared.spectra,
            "markers": prepared.markers,
            "regions": prepared.regions,
            "waveform": prepared.waveform,
            "values": prepared.values,
            "stats": prepared.stats,
            "findings": prepared.findings,
            "orders": prepared.orders,
        }

    def trend(self, machine_id: str, point_id: str) -> dict:
        """The last ``trend_length`` updates of one point: each value with its warning and alarm levels."""
        _, machine, entry = self._lookup(machine_id, point_id)
        with self._lock:
            samples = list(entry.trends.get(point_id, ()))
        names: list[str] = []
        for s in samples:
            for n in s["values"]:
                if n not in names:
                    names.append(n)
        order = ["overall"] + [b.name for b in machine.bands]
        names.sort(key=lambda n: (order.index(n) if n in order else len(order), n))
        units = {}
        if entry.points.get(point_id) is not None:
            units = {r["name"]: r["unit"] for r in entry.points[point_id].values}
        series = []
        for n in names:
            got = [s["values"].get(n) for s in samples]
            series.append({
                "name": n,
                "quantity": views.value_quantity(machine, n),
                "unit": units.get(n, ""),
                "values": [g[0] if g else None for g in got],
                "warning": [g[1] if g else None for g in got],
                "alarm": [g[2] if g else None for g in got],
                "state": [g[3] if g else None for g in got],
            })
        series += views.order_trend_series(samples)
        return {
            "machine": machine_id,
            "point": point_id,
            "revision": entry.revision,
            "length": len(samples),
            "capacity": self.trend_length,
            "time_s": views.columns(samples, "time_s"),
            "rpm": views.columns(samples, "rpm"),
            "state": views.columns(samples, "state"),
            "series": series,
        }

    def health(self) -> tuple[bool, str]:
        """(healthy, reason): healthy when every machine has published recently."""
        config, machines, _, _ = self._snapshot()
        return health(config, {m: e.received_s for m, e in machines.items()}, self._clock(),
                      self.stale_after_updates, self.min_stale_s)
