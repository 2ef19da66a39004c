"""Prometheus exposition: a custom collector over the latest update of every machine and the agent's
own counts (:mod:`rotorwatch.selfstats`); served by :mod:`.server`.

The collector holds the newest :class:`MachineUpdate` per machine; :meth:`UpdateCollector.observe` (the
analysis thread) swaps it in under a lock, and :meth:`UpdateCollector.collect` (the HTTP thread) copies
the references under the same lock and builds the metric families outside it, so a scrape never holds
up analysis. Records are frozen, so a copied reference cannot change underneath a scrape.

Names carry the ``rotorwatch_`` prefix and base SI units (velocity in m/s, acceleration in m/s^2,
speed in Hz, times in seconds); counters end in ``_total``. Band values get one metric name per unit,
with the band's quantity as a label. States are exposed as one series per possible state, the current
one at 1, the state in a short label of its own (``zone``, ``state``, ``check``, ``source``) rather than
in a label named after the metric (``prometheus_client.Enum``'s convention), so a query reads
``rotorwatch_iso_zone{zone="D"} == 1``. deploy/metrics.md lists every name; change both together.
"""

from __future__ import annotations

import platform
import threading
import time
from collections.abc import Callable, Iterable, Iterator, Mapping

from prometheus_client.core import (
    CounterMetricFamily,
    GaugeMetricFamily,
    InfoMetricFamily,
    Metric,
)
from prometheus_client.registry import Collector

from ... import __version__
from ...alarms.records import STATES, MachineUpdate, PointUpdate, ValueStatus
from ...alarms.sensor_checks import BLOCK_FAULTS, INPUT_FAULTS
from ...analysis.result import PointResult
from ...analysis.tachphase import readings as order_readings
from ...selfstats import SelfStats
from ...settings.models import Config
from ...web.health import health
from ..quantities import METRIC_UNIT_HELP, MM_S, metric_unit

P = "rotorwatch_"
ISO_ZONES = ("A", "B", "C", "D")
VALUE_STATES = ("learning", "normal", "warning", "alarm", "suppressed")
FINDING_STATES = ("normal", "warning", "alarm", "suppressed")
SPEED_SOURCES = ("fixed", "estimated", "tach", "mqtt", "nominal")
SENSOR_CHECKS = ("ok", *BLOCK_FAULTS, *INPUT_FAULTS)


class EnumGauge(GaugeMetricFamily):
    """One gauge series per possible value of an enumeration, 1 for the current one: the value is the
    short label ``label`` (``zone="A"``)."""

    def __init__(self, name: str, documentation: str, labels: list[str], label: str):
        super().__init__(name, documentation, labels=[*labels, label])

    def add_enum(self, labels: list[str], choices: dict[str, bool]) -> None:
        for value, on in choices.items():
            self.add_metric([*labels, value], 1.0 if on else 0.0)


def _finite(x: float | None) -> bool:
    return x is not None and x == x and x not in (float("inf"), float("-inf"))


class _Families:
    """The measurement families of one scrape, filled machine by machine (names: deploy/metrics.md)."""

    def __init__(self) -> None:
        mp = ["agent", "machine", "point"]
        mpb = mp + ["band", "quantity"]
        units = ("meters_per_second", "meters_per_second_squared")
        self.overall = GaugeMetricFamily(f"{P}overall_velocity_meters_per_second",
                                         "overall velocity RMS in the machine's overall band (ISO 20816 measure), m/s",
                                         labels=mp)
        self.zone = EnumGauge(f"{P}iso_zone", "ISO 20816-3 evaluation zone of the overall velocity (1 for the current zone)",
                              mp, "zone")
        self.bands = {u: GaugeMetricFamily(f"{P}band_value_{u}", f"band value, {METRIC_UNIT_HELP[u]}", labels=mpb)
                      for u in units}
        self.levels = {
            (kind, u): GaugeMetricFamily(f"{P}{kind}_level_{u}",
                                         f"effective {kind} level of a value (absolute or from the baseline), {METRIC_UNIT_HELP[u]}",
                                         labels=mpb)
            for kind in ("warning", "alarm") for u in units
        }
        self.baselines = {u: GaugeMetricFamily(f"{P}baseline_{u}", f"learned baseline (median) of a value, {METRIC_UNIT_HELP[u]}",
                                               labels=mpb)
                          for u in units}
        self.value_state = EnumGauge(f"{P}value_state", "alarm state of a trended value (1 for the current state)",
                                     mp + ["band"], "state")
        self.latched = GaugeMetricFamily(f"{P}value_latched", "1 while a latched alarm waits for acknowledgement",
                                         labels=mp + ["band"])
        self.raises = CounterMetricFamily(f"{P}value_raises", "times a value was raised (to warning, or to alarm) since the agent started",
                                          labels=mp + ["band"])
        self.chatter = CounterMetricFamily(f"{P}value_chatter", "raises of a value that came soon after its last lowering "
                                           "(within alarms.chatter_window_updates): chatter", labels=mp + ["band"])
        self.time_to_level = GaugeMetricFamily(
            f"{P}value_time_to_level_seconds", "time until a rising value's trend reaches its level (alarms.projection): "
            "the fitted line's crossing (bound=projected) and its interval (earliest, latest); absent when not rising",
            labels=mp + ["band", "level", "bound"])
        self.finding_state = EnumGauge(f"{P}finding_state", "state a persisting finding raises (alarms.findings), "
                                       "1 for the current state", mp + ["finding"], "state")
        self.finding_chatter = CounterMetricFamily(f"{P}finding_chatter", "raises of a finding soon after its last clearing",
                                                   labels=mp + ["finding"])
        self.waveform = (
            GaugeMetricFamily(f"{P}waveform_rms_meters_per_second_squared", "acceleration RMS of the window, m/s^2", labels=mp),
            GaugeMetricFamily(f"{P}waveform_peak_meters_per_second_squared", "acceleration peak of the window, m/s^2", labels=mp),
            GaugeMetricFamily(f"{P}waveform_mean_meters_per_second_squared", "mean (DC) acceleration of the window, m/s^2", labels=mp),
            GaugeMetricFamily(f"{P}waveform_crest_factor_ratio", "crest factor (peak / RMS) of the window", labels=mp),
            GaugeMetricFamily(f"{P}waveform_kurtosis_ratio", "kurtosis of the window (Pearson; Gaussian noise = 3)", labels=mp),
        )
        self.orders = (
            GaugeMetricFamily(f"{P}order_velocity_meters_per_second", "velocity RMS of a tach-locked order (1x, 2x), m/s",
                              labels=mp + ["order"]),
            GaugeMetricFamily(f"{P}order_phase_degrees", "phase of a tach-locked order's velocity at the tach pulse, "
                              "degrees 0-360 (the angle its positive peak leads the pulse by)", labels=mp + ["order"]),
            GaugeMetricFamily(f"{P}order_frequency_hertz", "frequency of a tach-locked order (order x the pulses' mean speed), Hz",
                              labels=mp + ["order"]),
        )
        self.sensor_ok = GaugeMetricFamily(f"{P}sensor_ok", "1 while the sensor checks pass", labels=mp)
        self.sensor_check = EnumGauge(f"{P}sensor_check", "outcome of the sensor checks: ok or the fault found (1 for the current one)",
                                      mp, "check")
        self.sensor_figures = (
            GaugeMetricFamily(f"{P}sensor_clipped_ratio", "share of the window's samples at the input range (0-1)", labels=mp),
            GaugeMetricFamily(f"{P}sensor_rms_volts", "RMS of the raw input over the window, volts", labels=mp),
            GaugeMetricFamily(f"{P}sensor_mean_volts", "mean (DC) of the raw input over the window, volts", labels=mp),
        )
        self.point_state = EnumGauge(f"{P}point_state", "state of a measurement point (1 for the current state)", mp, "state")
        self.machine_state = EnumGauge(f"{P}machine_state", "state of a machine, from its points (1 for the current state)",
                                       ["agent", "machine"], "state")
        self.speed = GaugeMetricFamily(f"{P}shaft_speed_hertz", "shaft speed used by the analysis, Hz (rpm / 60)",
                                       labels=["agent", "machine"])
        self.speed_source = EnumGauge(f"{P}shaft_speed_source", "where the shaft speed came from (1 for the current source)",
                                      ["agent", "machine"], "source")

    def add_machine(self, lm: list[str], upd: MachineUpdate) -> None:
        self.machine_state.add_enum(lm, {s: s == upd.state for s in STATES})
        if _finite(upd.rpm):
            self.speed.add_metric(lm, upd.rpm / 60.0)  # type: ignore[operator]
        if upd.rpm_source in SPEED_SOURCES:
            self.speed_source.add_enum(lm, {s: s == upd.rpm_source for s in SPEED_SOURCES})

    def add_health(self, lp: list[str], pu: PointUpdate) -> None:
        self.point_state.add_enum(lp, {s: s == pu.state for s in STATES})
        h = pu.health
        self.sensor_ok.add_metric(lp, 1.0 if h.ok else 0.0)
        check = "ok" if h.ok else h.fault
        if check in SENSOR_CHECKS:
            self.sensor_check.add_enum(lp, {c: c == check for c in SENSOR_CHECKS})
        if (h.ok and pu.result is not None) or h.fault in BLOCK_FAULTS:  # figures measured on samples
            for fam, v in zip(self.sensor_figures, (h.clipped_fraction, h.rms_v, h.mean_v), strict=True):
                if _finite(v):
                    fam.add_metric(lp, v)

    def add_result(self, lp: list[str], r: PointResult, band_quantity: Mapping[str, str]) -> None:
        if _finite(r.overall_velocity_mm_s):
            self.overall.add_metric(lp, r.overall_velocity_mm_s * MM_S)
        if r.iso_zone in ISO_ZONES:
            self.zone.add_enum(lp, {z: z == r.iso_zone for z in ISO_ZONES})
        for name, value in sorted(r.bands.items()):
            quantity = band_quantity.get(name)
            if quantity is None or not _finite(value):
                continue
            unit, factor = metric_unit(quantity)
            self.bands[unit].add_metric(lp + [name, quantity], value * factor)
        w = r.waveform
        for fam, v in zip(self.waveform, (w.rms_m_s2, w.peak_m_s2, w.mean_m_s2, w.crest_factor, w.kurtosis), strict=True):
            if _finite(v):
                fam.add_metric(lp, v)
        for o in order_readings(r):
            for fam, v in zip(self.orders, (o.velocity_mm_s * MM_S, o.phase_deg, o.frequency_hz), strict=True):
                if _finite(v):
                    fam.add_metric(lp + [o.order], v)

    def add_findings(self, lp: list[str], pu: PointUpdate) -> None:
        for fname, fst in sorted(pu.findings.items()):
            if fst.state in FINDING_STATES:
                self.finding_state.add_enum(lp + [fname], {s: s == fst.state for s in FINDING_STATES})
            self.finding_chatter.add_metric(lp + [fname], float(fst.chatter))

    def add_values(self, lp: list[str], pu: PointUpdate, band_quantity: Mapping[str, str]) -> None:
        for name, vs in sorted(pu.values.items()):
            quantity = "velocity" if name == "overall" else band_quantity.get(name)
            if vs.state in VALUE_STATES:
                self.value_state.add_enum(lp + [name], {s: s == vs.state for s in VALUE_STATES})
            self.latched.add_metric(lp + [name], 1.0 if vs.latched else 0.0)
            self.raises.add_metric(lp + [name], float(vs.raises))
            self.chatter.add_metric(lp + [name], float(vs.chatter))
            self.add_time_to_level(lp + [name], vs)
            if quantity is None:
                continue
            unit, factor = metric_unit(quantity)
            for kind, level in (("warning", vs.warning_level), ("alarm", vs.alarm_level)):
                if _finite(level):
                    self.levels[(kind, unit)].add_metric(lp + [name, quantity], level * factor)  # type: ignore[operator]
            if _finite(vs.baseline):
                self.baselines[unit].add_metric(lp + [name, quantity], vs.baseline * factor)  # type: ignore[operator]

    def add_time_to_level(self, lv: list[str], vs: ValueStatus) -> None:
        p = vs.projection
        if p is None:
            return
        for e in p.levels:
            if e.status == "rising":
                for bound, at in (("projected", e.time_s), ("earliest", e.earliest_s), ("latest", e.latest_s)):
                    if at is not None:
                        self.time_to_level.add_metric(lv + [e.level, bound], at - p.time_s)
            elif e.status == "reached":
                for bound in ("projected", "earliest", "latest"):
                    self.time_to_level.add_metric(lv + [e.level, bound], 0.0)

    def all(self) -> tuple[Metric, ...]:
        return (self.overall, self.zone, *self.bands.values(), *self.levels.values(), *self.baselines.values(),
                self.value_state, self.latched, self.raises, self.chatter, self.time_to_level, self.finding_state, self.finding_chatter,
                *self.waveform, *self.orders, self.sensor_ok, self.sensor_check, *self.sensor_figures, self.point_state,
                self.machine_state, self.speed, self.speed_source)


class UpdateCollector(Collector):
    """Exposes the latest update of each machine plus the agent's own counts."""

    def __init__(self, config: Config, stats: SelfStats, clock: Callable[[], float] = time.monotonic):
        self._lock = threading.Lock()
        self._latest: dict[str, MachineUpdate] = {}
        self._received_s: dict[str, float] = {}  # machine -> clock() when its latest update came
        self._config = config
        self._clock = clock
        self.stats = stats

    # -- writers (analysis thread) ---------------------------------------------------------------
    def observe(self, update: MachineUpdate) -> None:
        with self._lock:
            self._latest[update.machine_id] = update
            self._received_s[update.machine_id] = self._clock()

    def health(self) -> tuple[bool, str]:
        """(healthy, reason) for ``/healthz``: every machine updated recently."""
        with self._lock:
            config, received = self._config, dict(self._received_s)
        return health(config, received, self._clock())

    def set_config(self, config: Config) -> None:
        """After a reload: machines that are gone stop being exposed."""
        keep = {m.id for m in config.machines}
        with self._lock:
            self._config = config
            self._latest = {k: v for k, v in self._latest.items() if k in keep}
            self._received_s = {k: v for k, v in self._received_s.items() if k in keep}

    # -- reader (HTTP thread) --------------------------------------------------------------------
    def describe(self) -> Iterable[Metric]:
        return []  # families depend on the configuration; collect() is cheap enough to call at register

    def collect(self) -> Iterator[Metric]:
        with self._lock:  # copy references only
            latest = dict(self._latest)
            config = self._config
        yield from self._build_info(config)
        yield from self._measurements(config, latest)
        yield from self._self_stats(config)

    # -- family builders -------------------------------------------------------------------------
    @staticmethod
    def _build_info(config: Config) -> Iterator[Metric]:
        info = InfoMetricFamily(f"{P}build", "rotorwatch version and Python runtime",
                                labels=["agent"])
        info.add_metric([config.site.agent_id], {"version": __version__, "python": platform.python_version()})
        yield info
        from ...sources.base import input_clock

        clock = input_clock(config.acquisition)
        time_info = InfoMetricFamily(f"{P}clock", "whose time the readings carry: wall, simulated or recording, "
                                     "and how many times faster than the wall clock it runs", labels=["agent"])
        time_info.add_metric([config.site.agent_id], {"clock": clock["clock"], "speedup": f"{clock['speedup']:g}",
                                                      "notice": clock["notice"] or "wall clock"})
        yield time_info

    def _measurements(self, config: Config, latest: dict[str, MachineUpdate]) -> Iterator[Metric]:
        fams = _Families()
        agent = config.site.agent_id
        machines = {m.id: m for m in config.machines}
        for mid, upd in sorted(latest.items()):
            m = machines.get(mid)
            q = {b.name: b.quantity for b in m.bands} if m is not None else {}
            fams.add_machine([agent, mid], upd)
            for pid, pu in sorted(upd.points.items()):
                lp = [agent, mid, pid]
                fams.add_health(lp, pu)
                if pu.result is not None:
                    fams.add_result(lp, pu.result, q)
                fams.add_findings(lp, pu)
                fams.add_values(lp, pu, q)
        yield from fams.all()

    def _self_stats(self, config: Config) -> Iterator[Metric]:
        for m in config.machines:  # every configured machine's update count, from 0
            self.stats.updates.labels(machine=m.id)
        return self.stats.families(config.site.agent_id)


