"""Prometheus exposition: a custom collector over the latest update of every machine, and its server.

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

import logging
import platform
import ssl
import threading
from collections.abc import Iterable, Iterator
from pathlib import Path

from prometheus_client import CollectorRegistry, start_http_server
from prometheus_client.core import (
    CounterMetricFamily,
    GaugeMetricFamily,
    InfoMetricFamily,
    Metric,
)

from .. import __version__
from ..alarms.records import STATES, MachineUpdate
from ..alarms.sensor_checks import BLOCK_FAULTS, INPUT_FAULTS
from ..errors import RotorwatchError
from ..settings.models import Config
from ..settings.service import MetricsSettings
from .logs import fields
from .selfstats import COUNTERS, GAUGES, SelfStats

log = logging.getLogger(__name__)

P = "rotorwatch_"
ISO_ZONES = ("A", "B", "C", "D")
VALUE_STATES = ("learning", "normal", "warning", "alarm", "suppressed")
FINDING_STATES = ("normal", "warning", "alarm", "suppressed")
SPEED_SOURCES = ("fixed", "estimated", "tach", "mqtt", "nominal")
SENSOR_CHECKS = ("ok", *BLOCK_FAULTS, *INPUT_FAULTS)
MM_S = 1e-3  # mm/s -> m/s

#: Unit suffix of each band quantity in base SI units, and the factor from the analysis unit.
QUANTITY_METRIC_UNIT = {
    "velocity": ("meters_per_second", MM_S),
    "acceleration": ("meters_per_second_squared", 1.0),
    "envelope": ("meters_per_second_squared", 1.0),
}
_UNIT_HELP = {"meters_per_second": "m/s RMS", "meters_per_second_squared": "m/s^2 RMS"}

_UNLABELLED_COUNTERS = ("updates_skipped", "samples_captured", "input_overflows", "input_gaps", "source_stalls", "source_reopens",
                        "mqtt_messages_published", "mqtt_publish_failures", "mqtt_reconnects",
                        "mqtt_connect_failures")


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


class UpdateCollector:
    """Exposes the latest update of each machine plus the agent's own counts."""

    def __init__(self, config: Config, stats: SelfStats):
        self._lock = threading.Lock()
        self._latest: dict[str, MachineUpdate] = {}
        self._config = config
        self.stats = stats

    # -- writers (analysis thread) ---------------------------------------------------------------
    def observe(self, update: MachineUpdate) -> None:
        with self._lock:
            self._latest[update.machine_id] = update

    def set_config(self, config: Config) -> None:
        """After a reload: machines that are gone stop being exposed."""
        keep = {m.id for m in config.machines}
        with self._lock:
            self._config = config
            self._latest = {k: v for k, v in self._latest.items() if k in keep}

    # -- reader (HTTP thread) --------------------------------------------------------------------
    def describe(self) -> Iterable[Metric]:
        return []  # families depend on the configuration; collect() is cheap enough to call at register

    def collect(self) -> Iterator[Metric]:
        with self._lock:  # copy references only
            latest = dict(self._latest)
            config = self._config
        counters, gauges = self.stats.copy()
        yield from self._build_info(config)
        yield from self._measurements(config, latest)
        yield from self._self_stats(config, counters, gauges)

    # -- family builders -------------------------------------------------------------------------
    @staticmethod
    def _build_info(config: Config) -> Iterator[Metric]:
        info = InfoMetricFamily(f"{P}build", "rotorwatch version and Python runtime",
                                labels=["agent"])
        info.add_metric([config.site.agent_id], {"version": __version__, "python": platform.python_version()})
        yield info
        from ..sources.base import input_clock

        clock = input_clock(config.acquisition)
        time_info = InfoMetricFamily(f"{P}clock", "whose time the readings carry: wall, simulated or recording, "
                                     "and how many times faster than the wall clock it runs", labels=["agent"])
        time_info.add_metric([config.site.agent_id], {"clock": clock["clock"], "speedup": f"{clock['speedup']:g}",
                                                      "notice": clock["notice"] or "wall clock"})
        yield time_info

    def _measurements(self, config: Config, latest: dict[str, MachineUpdate]) -> Iterator[Metric]:
        agent = config.site.agent_id
        mp = ["agent", "machine", "point"]
        mpb = mp + ["band", "quantity"]
        overall = GaugeMetricFamily(f"{P}overall_velocity_meters_per_second",
                                    "overall velocity RMS in the machine's overall band (ISO 20816 measure), m/s",
                                    labels=mp)
        zone = EnumGauge(f"{P}iso_zone", "ISO 20816-3 evaluation zone of the overall velocity (1 for the current zone)",
                         mp, "zone")
        bands = {u: GaugeMetricFamily(f"{P}band_value_{u}", f"band value, {_UNIT_HELP[u]}", labels=mpb)
                 for u in ("meters_per_second", "meters_per_second_squared")}
        levels = {
            (kind, u): GaugeMetricFamily(f"{P}{kind}_level_{u}",
                                         f"effective {kind} level of a value (absolute or from the baseline), {_UNIT_HELP[u]}",
                                         labels=mpb)
            for kind in ("warning", "alarm") for u in ("meters_per_second", "meters_per_second_squared")
        }
        baselines = {u: GaugeMetricFamily(f"{P}baseline_{u}", f"learned baseline (median) of a value, {_UNIT_HELP[u]}",
                                          labels=mpb)
                     for u in ("meters_per_second", "meters_per_second_squared")}
        value_state = EnumGauge(f"{P}value_state", "alarm state of a trended value (1 for the current state)",
                                mp + ["band"], "state")
        latched = GaugeMetricFamily(f"{P}value_latched", "1 while a latched alarm waits for acknowledgement",
                                    labels=mp + ["band"])
        raises = CounterMetricFamily(f"{P}value_raises", "times a value was raised (to warning, or to alarm) since the agent started",
                                     labels=mp + ["band"])
        chatter = CounterMetricFamily(f"{P}value_chatter", "raises of a value that came soon after its last lowering "
                                      "(within alarms.chatter_window_updates): chatter", labels=mp + ["band"])
        finding_state = EnumGauge(f"{P}finding_state", "state a persisting finding raises (alarms.findings), "
                                  "1 for the current state", mp + ["finding"], "state")
        finding_chatter = CounterMetricFamily(f"{P}finding_chatter", "raises of a finding soon after its last clearing",
                                              labels=mp + ["finding"])
        wf_rms = GaugeMetricFamily(f"{P}waveform_rms_meters_per_second_squared", "acceleration RMS of the window, m/s^2", labels=mp)
        wf_peak = GaugeMetricFamily(f"{P}waveform_peak_meters_per_second_squared", "acceleration peak of the window, m/s^2", labels=mp)
        wf_mean = GaugeMetricFamily(f"{P}waveform_mean_meters_per_second_squared", "mean (DC) acceleration of the window, m/s^2", labels=mp)
        wf_crest = GaugeMetricFamily(f"{P}waveform_crest_factor_ratio", "crest factor (peak / RMS) of the window", labels=mp)
        wf_kurt = GaugeMetricFamily(f"{P}waveform_kurtosis_ratio", "kurtosis of the window (Pearson; Gaussian noise = 3)", labels=mp)
        sensor_ok = GaugeMetricFamily(f"{P}sensor_ok", "1 while the sensor checks pass", labels=mp)
        sensor_check = EnumGauge(f"{P}sensor_check", "outcome of the sensor checks: ok or the fault found (1 for the current one)",
                                 mp, "check")
        sensor_clipped = GaugeMetricFamily(f"{P}sensor_clipped_ratio",
                                           "share of the window's samples at the input range (0-1)", labels=mp)
        sensor_rms = GaugeMetricFamily(f"{P}sensor_rms_volts", "RMS of the raw input over the window, volts", labels=mp)
        sensor_mean = GaugeMetricFamily(f"{P}sensor_mean_volts", "mean (DC) of the raw input over the window, volts",
                                        labels=mp)
        point_state = EnumGauge(f"{P}point_state", "state of a measurement point (1 for the current state)", mp, "state")
        machine_state = EnumGauge(f"{P}machine_state", "state of a machine, from its points (1 for the current state)",
                                  ["agent", "machine"], "state")
        speed = GaugeMetricFamily(f"{P}shaft_speed_hertz", "shaft speed used by the analysis, Hz (rpm / 60)",
                                  labels=["agent", "machine"])
        speed_source = EnumGauge(f"{P}shaft_speed_source", "where the shaft speed came from (1 for the current source)",
                                 ["agent", "machine"], "source")

        quantities = {m.id: {b.name: b.quantity for b in m.bands} for m in config.machines}
        for mid, upd in sorted(latest.items()):
            q = quantities.get(mid, {})
            machine_state.add_enum([agent, mid], {s: s == upd.state for s in STATES})
            if _finite(upd.rpm):
                speed.add_metric([agent, mid], upd.rpm / 60.0)  # type: ignore[operator]
            src = upd.rpm_source if upd.rpm_source in SPEED_SOURCES else None
            if src is not None:
                speed_source.add_enum([agent, mid], {s: s == src for s in SPEED_SOURCES})
            for pid, pu in sorted(upd.points.items()):
                lp = [agent, mid, pid]
                point_state.add_enum(lp, {s: s == pu.state for s in STATES})
                h = pu.health
                sensor_ok.add_metric(lp, 1.0 if h.ok else 0.0)
                check = "ok" if h.ok else h.fault
                if check in SENSOR_CHECKS:
                    sensor_check.add_enum(lp, {c: c == check for c in SENSOR_CHECKS})
                if (h.ok and pu.result is not None) or h.fault in BLOCK_FAULTS:  # figures measured on samples
                    for fam, v in ((sensor_clipped, h.clipped_fraction), (sensor_rms, h.rms_v), (sensor_mean, h.mean_v)):
                        if _finite(v):
                            fam.add_metric(lp, v)
                r = pu.result
                if r is not None:
                    if _finite(r.overall_velocity_mm_s):
                        overall.add_metric(lp, r.overall_velocity_mm_s * MM_S)
                    if r.iso_zone in ISO_ZONES:
                        zone.add_enum(lp, {z: z == r.iso_zone for z in ISO_ZONES})
                    for name, value in sorted(r.bands.items()):
                        quantity = q.get(name)
                        if quantity is None or not _finite(value):
                            continue
                        unit, factor = QUANTITY_METRIC_UNIT[quantity]
                        bands[unit].add_metric(lp + [name, quantity], value * factor)
                    w = r.waveform
                    for fam, v in ((wf_rms, w.rms_m_s2), (wf_peak, w.peak_m_s2), (wf_mean, w.mean_m_s2),
                                   (wf_crest, w.crest_factor), (wf_kurt, w.kurtosis)):
                        if _finite(v):
                            fam.add_metric(lp, v)
                for fname, fst in sorted(pu.findings.items()):
                    if fst.state in FINDING_STATES:
                        finding_state.add_enum(lp + [fname], {s: s == fst.state for s in FINDING_STATES})
                    finding_chatter.add_metric(lp + [fname], float(fst.chatter))
                for name, vs in sorted(pu.values.items()):
                    quantity = "velocity" if name == "overall" else q.get(name)
                    if vs.state in VALUE_STATES:
                        value_state.add_enum(lp + [name], {s: s == vs.state for s in VALUE_STATES})
                    latched.add_metric(lp + [name], 1.0 if vs.latched else 0.0)
                    raises.add_metric(lp + [name], float(vs.raises))
                    chatter.add_metric(lp + [name], float(vs.chatter))
                    if quantity is None:
                        continue
                    unit, factor = QUANTITY_METRIC_UNIT[quantity]
                    for kind, level in (("warning", vs.warning_level), ("alarm", vs.alarm_level)):
                        if _finite(level):
                            levels[(kind, unit)].add_metric(lp + [name, quantity], level * factor)  # type: ignore[operator]
                    if _finite(vs.baseline):
                        baselines[unit].add_metric(lp + [name, quantity], vs.baseline * factor)  # type: ignore[operator]

        yield from (overall, zone, *bands.values(), *levels.values(), *baselines.values(), value_state, latched,
                    raises, chatter, finding_state, finding_chatter,
                    wf_rms, wf_peak, wf_mean, wf_crest, wf_kurt, sensor_ok, sensor_check, sensor_clipped,
                    sensor_rms, sensor_mean, point_state, machine_state, speed,
                    speed_source)

    @staticmethod
    def _self_stats(config: Config, counters: dict, gauges: dict) -> Iterator[Metric]:
        agent = config.site.agent_id
        by_name: dict[str, list[tuple[tuple, float]]] = {}
        for (name, labels), value in counters.items():
            by_name.setdefault(name, []).append((labels, value))
        for name in _UNLABELLED_COUNTERS:
            by_name.setdefault(name, [((), 0.0)])
        for m in config.machines:
            entries = by_name.setdefault("updates", [])
            if not any(dict(lbl).get("machine") == m.id for lbl, _ in entries):
                entries.append(((("machine", m.id),), 0.0))
        for name, entries in sorted(by_name.items()):
            label_names = sorted({k for labels, _ in entries for k, _ in labels})
            fam = CounterMetricFamily(f"{P}{name}", COUNTERS[name], labels=["agent", *label_names])
            for labels, value in sorted(entries):
                d = dict(labels)
                fam.add_metric([agent, *(d.get(k, "") for k in label_names)], value)
            yield fam
        g_by_name: dict[str, list[tuple[tuple, float]]] = {}
        for (name, labels), value in gauges.items():
            g_by_name.setdefault(name, []).append((labels, value))
        for name, entries in sorted(g_by_name.items()):
            label_names = sorted({k for labels, _ in entries for k, _ in labels})
            fam = GaugeMetricFamily(f"{P}{name}", GAUGES[name], labels=["agent", *label_names])
            for labels, value in sorted(entries):
                d = dict(labels)
                fam.add_metric([agent, *(d.get(k, "") for k in label_names)], value)
            yield fam


def make_registry(collector: UpdateCollector) -> CollectorRegistry:
    """A fresh registry holding only our collector (no process/platform defaults)."""
    registry = CollectorRegistry(auto_describe=False)
    registry.register(collector)
    return registry


class MetricsServer:
    """``start_http_server`` on ``settings.bind``:``settings.port`` (0 picks a free port)."""

    def __init__(self, settings: MetricsSettings, registry: CollectorRegistry, base_dir: Path):
        self.settings = settings
        self.registry = registry
        self.base_dir = base_dir
        self._server = None
        self._thread: threading.Thread | None = None
        self.port: int | None = None

    def _path(self, name: str | None) -> str | None:
        if name is None:
            return None
        p = Path(name)
        return str(p if p.is_absolute() else self.base_dir / p)

    def start(self) -> int:
        s = self.settings
        cert, key = self._path(s.tls_cert_file), self._path(s.tls_key_file)
        try:
            self._server, self._thread = start_http_server(s.port, addr=s.bind, registry=self.registry,
                                                           certfile=cert, keyfile=key)
        except (OSError, ssl.SSLError) as e:
            what = f"TLS cert {cert} / key {key}" if cert else f"{s.bind}:{s.port}"
            raise RotorwatchError(f"metrics.bind/port: cannot serve /metrics on {s.bind}:{s.port} ({what}): "
                                  f"{getattr(e, 'strerror', None) or e}") from None
        self.port = int(self._server.server_address[1])
        log.info("metrics endpoint listening", extra=fields(addr=s.bind, port=self.port,
                                                           scheme="https" if cert else "http"))
        return self.port

    def stop(self) -> None:
        if self._server is not None:
            self._server.shutdown()
            self._server.server_close()
            if self._thread is not None:
                self._thread.join(timeout=5.0)
            self._server = None
