"""The monitoring daemon: capture -> ring buffers -> rolling analysis -> MQTT, Prometheus, status page,
trend store and evidence snapshots.

Threads and who owns what:

- the **main thread** owns the signals (SIGTERM/SIGINT stop, SIGHUP reloads), the pipelines (one
  :class:`~rotorwatch.pipeline.MachinePipeline` per machine, not thread-safe) and the analysis loop;
  commands from MQTT and the status page are queued to it;
- the **capture thread** (:mod:`rotorwatch.service.capture`) only reads the source into the rings;
- paho's network thread, the metrics HTTP thread and the status page thread only read snapshots.

The analysis loop runs an update every ``acquisition.update_interval_s`` on the **source clock** (for
simulated input, the scenario clock: a sped-up scenario gives sped-up updates). If an update takes
longer than the interval, the missed ones are skipped and counted; capture is never held up.

Start order: metrics and MQTT first (in the background, a missing broker never blocks), the source
last. Stop order: the source first, then the current update finishes, states and retained
``offline`` are published, MQTT disconnects (bounded), HTTP servers stop, baselines are saved.
systemd: ``READY=1`` after the first good update, ``WATCHDOG=1`` from the analysis loop.
"""

from __future__ import annotations

import logging
import math
import queue
import signal
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from .. import __version__
from ..alarms.records import MachineUpdate, SensorHealth
from ..analysis.running_speed import outside_reading
from ..errors import ConfigError, RotorwatchError
from ..settings.loading import load_config
from ..settings.models import Config, Machine
from . import payloads
from .capture import FINITE_SOURCES, Capture
from .commands import Command, CommandRejected, parse_command
from .evidence import Evidence
from .logs import RepeatLimiter, fields
from .metrics import MetricsServer, UpdateCollector, make_registry
from .mqtt import MqttLink
from .notify import Notifier
from .publisher import UpdatePublisher
from .ring import Ring
from .selfstats import SelfStats
from .speed import SpeedBoard

log = logging.getLogger(__name__)

PipelineFactory = Callable[[Config, Machine, Path], Any]
SourceFactory = Callable[[Config, Path], Any]


@dataclass
class RunOptions:
    state_dir: str | None = None
    max_updates: int | None = None  # stop after this many update rounds (tests, --once)
    duration_s: float | None = None  # stop after this many wall seconds (tests)
    overrides: tuple[str, ...] = ()  # --set section.key=value, applied at start and on every reload
    stop_timeout_s: float = 5.0
    # --once: an input that cannot be opened before the first update ends the run (exit 2) instead of
    # being retried with back-off as a long-running daemon does
    fail_fast: bool = False
    # READY=1 goes out after the first good update; if the input stays away this long after start,
    # it goes out anyway (the daemon is up and reporting the fault), so systemd does not kill it.
    ready_grace_s: float = 30.0


def default_pipeline_factory(config: Config, machine: Machine, state_dir: Path) -> Any:
    from ..pipeline import MachinePipeline

    # spectra are kept for the status page and the evidence snapshots
    return MachinePipeline(config, machine, state_dir=state_dir, keep_spectra=True)


def default_source_factory(config: Config, config_dir: Path) -> Any:
    from ..sources.base import configured_source

    return configured_source(config, config_dir)


def simulated_segment_s(config: Config) -> float:
    from ..sources.base import simulated_segment_s as segment_s

    return segment_s(config)


def monitor_of(pipeline: Any) -> Any:
    """The pipeline's alarm monitor (``MachineMonitor``), for acknowledge and no-input updates."""
    return getattr(pipeline, "monitor", pipeline)


@dataclass
class MachineRuntime:
    machine: Machine
    pipeline: Any
    n_window: int
    channels: dict[str, int]  # point -> input channel
    tach_channel: int | None
    last_update: MachineUpdate | None = None
    last_blocks: dict[str, np.ndarray] | None = None  # the windows of the last analyzed update (volts)


@dataclass
class _Request:
    """A command queued to the analysis loop; ``done`` is set with ``reply`` for waiting callers."""

    command: Command | None
    raw: bytes | None = None
    origin: str = "mqtt"
    done: threading.Event = field(default_factory=threading.Event)
    reply: dict | None = None


class Daemon:
    def __init__(self, config_path: str | Path, options: RunOptions | None = None, *,
                 notifier: Notifier | None = None,
                 pipeline_factory: PipelineFactory = default_pipeline_factory,
                 source_factory: SourceFactory = default_source_factory):
        self.config_path = Path(config_path)
        self.config_dir = self.config_path.resolve().parent
        self.options = options or RunOptions()
        self.notifier = notifier or Notifier()
        self._pipeline_factory = pipeline_factory
        self._source_factory = source_factory
        self.stats = SelfStats()
        self._stop = threading.Event()
        self._wake = threading.Event()
        self._reload_requested = threading.Event()
        self._requests: queue.Queue[_Request] = queue.Queue(maxsize=64)
        self._limiter = RepeatLimiter(300.0)
        self.config: Config | None = None
        self.runtimes: dict[str, MachineRuntime] = {}
        self.rings: dict[int, Ring] = {}
        self.capture: Capture | None = None
        self.link: MqttLink | None = None
        self.publisher: UpdatePublisher | None = None
        self.metrics_server: MetricsServer | None = None
        self.collector: UpdateCollector | None = None
        self.status_board = None
        self.status_server = None
        self.speeds: SpeedBoard | None = None
        self.state_dir: Path | None = None
        self.evidence: Evidence | None = None
        self.spool = None  # rotorwatch.storage.spool.Spool when [mqtt] delivery = "spool"
        self.rounds = 0
        self._next_due: float | None = None
        self._run_id: int | None = None
        self._last_no_input_report = 0.0
        self._faults_now: dict[tuple[str, str], str | None] = {}  # (machine, point) -> sensor fault kind now
        self._stop_reason = "stopped"
        self._started = time.monotonic()

    # ============================================================================== life cycle
    def request_stop(self, reason: str = "stop requested") -> None:
        self._stop_reason = reason
        self._stop.set()
        self._wake.set()

    def request_reload(self) -> None:
        self._reload_requested.set()
        self._wake.set()

    def _install_signals(self) -> None:
        if threading.current_thread() is not threading.main_thread():
            return
        signal.signal(signal.SIGTERM, lambda s, f: self.request_stop("SIGTERM"))
        signal.signal(signal.SIGINT, lambda s, f: self.request_stop("SIGINT"))
        signal.signal(signal.SIGHUP, lambda s, f: self.request_reload())

    def run(self) -> int:
        """Run until stopped; returns the exit status. Bad configuration raises ConfigError."""
        self._install_signals()
        config = load_config(self.config_path, self.options.overrides)
        self.config = config
        self.state_dir = self._state_dir(config)
        self.speeds = SpeedBoard(config)
        self.collector = UpdateCollector(config, self.stats)
        self.runtimes = self._build_runtimes(config)  # ConfigError from the pipelines: exit non-zero
        self._warn_exposed_secrets(config)
        self._preflight(config)  # what the source would refuse, before anything starts (exit 2)
        self.evidence = Evidence(config, self.state_dir)  # StorageError (one line) if the stores cannot open
        self._open_spool(config)
        log.info("rotorwatch starting", extra=fields(
            version=__version__, config=str(self.config_path), agent=config.site.agent_id,
            machines=",".join(self.runtimes), source=config.acquisition.source, state_dir=str(self.state_dir)))
        started = self._started = time.monotonic()
        try:
            self._start_sinks(config)  # publishers first ...
            self._start_capture(config)  # ... the source last
            self.notifier.status("waiting for the first update")
            while not self._stop.is_set():
                self._loop_once()
                if self.options.max_updates is not None and self.rounds >= self.options.max_updates:
                    self.request_stop(f"--max-updates {self.options.max_updates} reached")
                if self.options.duration_s is not None and time.monotonic() - started >= self.options.duration_s:
                    self.request_stop(f"--duration {self.options.duration_s:g} s reached")
        finally:
            self._shutdown()
        return 0

    def _preflight(self, config: Config) -> None:
        """Build the source and let it check what ``start()`` would refuse.

        A configuration that cannot work (a recording or a scenario without a path, a scenario that does
        not load) ends the start-up in one line (ConfigError, exit 2). A file that is missing, damaged or
        of the wrong rate ends it only with ``fail_fast`` (``--once``); a long-running daemon reports
        the input unavailable and retries, as for a device that is missing now (never probed here)."""
        from ..errors import InputError

        try:
            source = self._source_factory(config, self.config_dir)
            check = getattr(source, "check", None)
            if check is not None:
                check()
        except ConfigError as e:
            raise ConfigError([p if not p.startswith("acquisition.") else f"{self.config_path}: {p}"
                               for p in e.problems]) from None
        except InputError as e:
            if self.options.fail_fast:
                raise
            log.warning(f"input not usable yet, retrying: {e}", extra=fields(source=config.acquisition.source))

    def _warn_exposed_secrets(self, config: Config) -> None:
        from .secret_files import readable_by_all, warning_line

        for setting, path, mode in readable_by_all(config, self.config_dir):
            log.warning(warning_line(setting, path, mode))

    def _state_dir(self, config: Config) -> Path:
        p = Path(self.options.state_dir if self.options.state_dir is not None else config.storage.state_dir).expanduser()
        try:
            p.mkdir(parents=True, exist_ok=True)
        except OSError as e:
            raise RotorwatchError(f"state folder {str(p)!r}: cannot create it: {e.strerror or e}") from None
        return p

    def _build_runtimes(self, config: Config, keep: dict[str, MachineRuntime] | None = None) -> dict[str, MachineRuntime]:
        keep = keep or {}
        fs = config.acquisition.sample_rate_hz
        out = {}
        for m in config.machines:
            old = keep.get(m.id)
            if old is not None and old.machine == m and self.config is not None \
                    and self.config.acquisition.sample_rate_hz == fs:
                out[m.id] = old
                continue
            pipeline = self._pipeline_factory(config, m, self.state_dir)  # type: ignore[arg-type]
            n = max(16, int(round(m.analysis.window_s * fs)))
            out[m.id] = MachineRuntime(m, pipeline, n, {p.id: p.sensor.channel for p in m.points},
                                       m.speed.tach_channel if m.speed.mode == "tach" else None)
        return out

    def _ring_layout(self, config: Config, runtimes: dict[str, MachineRuntime]) -> dict[int, int]:
        """input channel -> ring capacity (the window plus two blocks of slack)."""
        layout = {}
        for rt in runtimes.values():
            chans = list(rt.channels.values()) + ([rt.tach_channel] if rt.tach_channel is not None else [])
            for ch in chans:
                layout[ch] = max(layout.get(ch, 0), rt.n_window + 2 * config.acquisition.block_frames)
        return layout

    @staticmethod
    def _stall_after_s(config: Config) -> float:
        """Wall seconds without samples after which the source counts as stalled: two update intervals
        (of wall time), but never less than four blocks or half a second."""
        acq = config.acquisition
        sped = acq.source in ("simulated", "recording")
        wall_interval = acq.update_interval_s / (acq.speedup if sped else 1.0)
        # a recording is paced at speedup x real time; a simulation streams at real time between its jumps
        block_wall = acq.block_frames / acq.sample_rate_hz / (acq.speedup if acq.source == "recording" else 1.0)
        return max(2.0 * wall_interval, 4.0 * block_wall, 0.5)

    # ---------------------------------------------------------------------------------- sinks
    def _start_sinks(self, config: Config) -> None:
        if config.metrics is not None:
            self.metrics_server = MetricsServer(config.metrics, make_registry(self.collector), self.config_dir)  # type: ignore[arg-type]
            self.metrics_server.start()
        if config.mqtt is not None:
            self._start_mqtt(config)
        if config.status_page is not None:
            self._start_status_page(config)

    def _open_spool(self, config: Config) -> None:
        if config.mqtt is not None and config.mqtt.delivery == "spool" and self.spool is None:
            from ..storage.spool import Spool

            self.spool = Spool.in_state_dir(self.state_dir, config.storage.spool)  # type: ignore[arg-type]

    def _start_mqtt(self, config: Config) -> None:
        assert config.mqtt is not None and self.speeds is not None
        self._open_spool(config)
        spool = self.spool if config.mqtt.delivery == "spool" else None
        link = MqttLink(config.mqtt, config.site.agent_id, self.config_dir, self.stats,
                        on_command=self._queue_mqtt_command, on_message=self.speeds.offer,
                        extra_topics=self.speeds.topics, spool=spool, forwarding=config.storage.forwarding)
        link.start()  # raises a one-line RotorwatchError for unusable TLS/password files
        self.link = link
        self.publisher = UpdatePublisher(link, config)
        self.publisher.publish_info()

    def _start_status_page(self, config: Config) -> None:
        from ..web.board import StatusBoard
        from ..web.server import StatusServer

        sp = config.status_page
        assert sp is not None
        token = None
        if sp.token_file is not None:
            token = Path(sp.token_file) if Path(sp.token_file).is_absolute() else self.config_dir / sp.token_file
        self.status_board = StatusBoard(config)
        self.status_server = StatusServer(self.status_board, sp.bind, sp.port, token_file=token,
                                          on_acknowledge=self._web_acknowledge, on_snapshot=self._web_snapshot)
        self.status_server.start()

    def _stop_sinks(self) -> None:
        if self.link is not None:
            try:
                self.link.stop()
            except Exception as e:  # noqa: BLE001 - shutdown goes on
                log.warning("error stopping mqtt", extra=fields(error=str(e)))
            self.link = None
        for name in ("metrics_server", "status_server"):
            server = getattr(self, name)
            if server is not None:
                try:
                    server.stop()
                except Exception as e:  # noqa: BLE001
                    log.warning(f"error stopping the {name.replace('_', ' ')}", extra=fields(error=str(e)))
                setattr(self, name, None)

    # -------------------------------------------------------------------------------- capture
    def _start_capture(self, config: Config) -> None:
        layout = self._ring_layout(config, self.runtimes)
        self.rings = {ch: Ring(cap) for ch, cap in layout.items()}
        self.capture = Capture(config.acquisition, self.config_dir, self.rings, self.stats,
                               lambda: self._source_factory(config, self.config_dir),
                               stall_after_s=self._stall_after_s(config), wake=self._wake)
        self._next_due = None
        self._run_id = None
        self.capture.start()

    def _stop_capture(self) -> None:
        if self.capture is not None:
            self.capture.stop(self.options.stop_timeout_s)
            self.capture = None

    def _shutdown(self) -> None:
        log.info("rotorwatch stopping", extra=fields(reason=self._stop_reason))
        self.notifier.stopping()
        self._stop_capture()  # the source first; the current update already finished (same thread)
        self._answer_pending("the daemon is stopping")
        if self.publisher is not None:
            for rt in self.runtimes.values():
                if rt.last_update is not None:
                    self.publisher.publish_update(rt.last_update, metrics=False)
        for rt in self.runtimes.values():
            self._close_pipeline(rt)
        if self.evidence is not None:
            self.evidence.close()
        self._stop_sinks()
        if self.spool is not None:
            self.spool.close()
            self.spool = None
        self.notifier.close()
        log.info("rotorwatch stopped", extra=fields(updates=self.rounds))

    @staticmethod
    def _close_pipeline(rt: MachineRuntime) -> None:
        closer = getattr(rt.pipeline, "close", None) or getattr(monitor_of(rt.pipeline), "close", None)
        if closer is not None:
            try:
                closer()
            except Exception as e:  # noqa: BLE001 - saving baselines must not stop shutdown
                log.warning("error saving machine state", extra=fields(machine=rt.machine.id, error=str(e)))

    # ============================================================================== the loop
    def _loop_once(self) -> None:
        self.notifier.watchdog()
        if self._reload_requested.is_set():
            self._reload_requested.clear()
            self._reload("SIGHUP")
        self._serve_requests()
        if self.link is not None:
            self.link.tick()
        self._spool_stats()
        self._wake.wait(0.2)
        self._wake.clear()
        if self._stop.is_set():
            return
        cap = self.capture
        if cap is None:
            return
        status = cap.status
        if self.status_board is not None:
            self.status_board.set_input(status.state, status.reason)
        if status.state == "ended" and self.config is not None and self.config.acquisition.source in FINITE_SOURCES:
            self._input_ended(status)
            return
        if status.state == "unavailable" and self.options.fail_fast and self.rounds == 0:
            raise RotorwatchError(f"input {self.config.acquisition.source if self.config else ''}: {status.reason}")
        if status.state in ("stalled", "unavailable", "ended"):
            self._report_no_input(status)
            if not self.notifier.ready_sent and time.monotonic() - self._started > self.options.ready_grace_s:
                log.warning("no good update yet; reporting ready without input",
                            extra=fields(source=status.state, reason=status.reason))
                self.notifier.ready(f"running without input: {status.state}: {status.reason}")
            return
        self._maybe_update(cap)

    def _spool_stats(self) -> None:
        if self.spool is None:
            return
        now = time.monotonic()
        if now - getattr(self, "_spool_stats_at", 0.0) < 1.0:
            return
        self._spool_stats_at = now
        try:
            st = self.spool.stats()
        except RotorwatchError:
            return
        self.stats.set("spool_records", st.depth)
        self.stats.set("spool_bytes", st.stored_bytes)
        for reason, n in st.dropped.items():
            self.stats.mirror_counter("spool_dropped_records", n, reason=reason)

    def _maybe_update(self, cap: Capture) -> None:
        assert self.config is not None
        t = cap.source_time_s
        if t is None:
            return
        interval = self.config.acquisition.update_interval_s
        run_id = cap.run_id
        if self._next_due is None or run_id != self._run_id:
            # first samples, or a new run after a reopen/gap: start the schedule from here
            self._run_id = run_id
            self._next_due = t
        if t < self._next_due:
            return
        behind = int(math.floor((t - self._next_due) / interval))
        self._next_due += (behind + 1) * interval
        updated = 0
        good = False
        lost_at = cap.last_overflow_s
        for rt in list(self.runtimes.values()):
            blocks, end_s = self._windows(rt)
            span_end = end_s if blocks is not None else t
            if lost_at is not None and span_end - rt.machine.analysis.window_s < lost_at < span_end:
                # samples were lost inside this window (or it is refilling after the loss): not analyzed
                self._report_overflow(rt, span_end, lost_at, cap.overflows)
                updated += 1
                continue
            if blocks is None:
                continue  # the window is still filling
            rpm, rpm_source, pulses_s = self._rpm(rt, end_s)
            t0 = time.monotonic()
            try:
                update = rt.pipeline.step(end_s, blocks, rpm=rpm, rpm_source=rpm_source, tach_pulses_s=pulses_s)
            except RotorwatchError as e:
                ok, held = self._limiter.allow(f"step:{rt.machine.id}:{e}")
                if ok:
                    log.error(f"analysis failed: {e}", extra=fields(machine=rt.machine.id, repeats=held or None))
                continue
            self.stats.set("update_duration_seconds", time.monotonic() - t0, machine=rt.machine.id)
            self.stats.set("last_update_timestamp_seconds", end_s, machine=rt.machine.id)
            self.stats.inc("updates", machine=rt.machine.id)
            updated += 1
            good = good or any(p.result is not None for p in update.points.values())
            self._deliver(rt, update, blocks)
        if updated:
            self.rounds += 1
            if behind > 0:
                self.stats.inc("updates_skipped", behind)
                ok, held = self._limiter.allow("behind")
                if ok:
                    log.warning("analysis is behind the input; skipped updates", extra=fields(
                        skipped=behind, interval_s=interval, repeats=held or None))
            if good and not self.notifier.ready_sent:
                log.info("first update done; ready", extra=fields(
                    states=",".join(f"{m}={rt.last_update.state}" for m, rt in self.runtimes.items() if rt.last_update)))
            if good:
                self.notifier.ready(self._status_line())
            if self.rounds % 10 == 1:
                self.notifier.status(self._status_line())

    def _windows(self, rt: MachineRuntime) -> tuple[dict[str, np.ndarray] | None, float]:
        blocks: dict[str, np.ndarray] = {}
        end_s = None
        for pid, ch in rt.channels.items():
            block, end = self.rings[ch].latest_with_time(rt.n_window)
            if block is None or end is None:
                return None, 0.0
            blocks[pid] = block
            end_s = end if end_s is None else min(end_s, end)
        return blocks, float(end_s)  # type: ignore[arg-type]

    def _rpm(self, rt: MachineRuntime, end_s: float) -> tuple[float | None, str | None, np.ndarray | None]:
        """An outside speed reading for this update: the tach channel (with its pulse times in seconds from
        the start of the window that ends at ``end_s``) or the MQTT speed topic."""
        speed = rt.machine.speed
        tach = None
        if speed.mode == "tach" and rt.tach_channel is not None:
            from ..sources.tach import pulses_in_record

            pulses, tach_end_s = self.rings[rt.tach_channel].latest_with_time(rt.n_window)
            if pulses is not None:
                rpm, edges_s = pulses_in_record(pulses, self.config.acquisition.sample_rate_hz,  # type: ignore[union-attr]
                                                speed.tach_threshold_v, speed.pulses_per_rev)
                if tach_end_s is not None:
                    edges_s = edges_s + (tach_end_s - end_s)  # the tach ring may hold a chunk more or less
                tach = (rpm, edges_s)
        mqtt_rpm = self.speeds.rpm(rt.machine.id) if speed.mode == "mqtt" and self.speeds is not None else None
        r = outside_reading(speed, tach=tach, mqtt_listening=self.speeds is not None, mqtt_rpm=mqtt_rpm)
        return r.rpm, r.source, r.pulses_s

    def _deliver(self, rt: MachineRuntime, update: MachineUpdate, blocks: dict[str, np.ndarray] | None) -> None:
        rt.last_update = update
        self._count_sensor_faults(update)
        if blocks is not None:
            rt.last_blocks = blocks
        if self.evidence is not None:
            self.evidence.on_update(update, blocks, rt.machine)
        if update.events:
            self.stats.inc("alarm_events", len(update.events), machine=update.machine_id)
        if self.collector is not None:
            self.collector.observe(update)
        if self.publisher is not None:
            self.publisher.publish_update(update)
        if self.status_board is not None:
            self.status_board.publish(update, blocks)

    def _report_overflow(self, rt: MachineRuntime, time_s: float, lost_at_s: float, n_overflows: int) -> None:
        """A window that holds lost samples: every point of the machine reads sensor_fault (overflow)."""
        ago_s = time_s - lost_at_s
        health = SensorHealth(ok=False, fault="overflow", reason=(
            f"input overflow {ago_s:.2f} s before the end of the window: samples were lost in the driver or "
            f"the capture queue ({n_overflows} overflows since start); this window is not analyzed"))
        pids = list(rt.channels)
        update = monitor_of(rt.pipeline).update(time_s, {p: None for p in pids}, {p: health for p in pids},
                                                rpm=None, rpm_source="", notes={})
        self.stats.inc("updates", machine=rt.machine.id)
        self._deliver(rt, update, None)

    def _count_sensor_faults(self, update: MachineUpdate) -> None:
        """rotorwatch_sensor_faults_total: each time a point enters a sensor fault (or changes its kind)."""
        for pid, pu in update.points.items():
            key = (update.machine_id, pid)
            fault = None if pu.health.ok else (pu.health.fault or "unknown")
            if fault is not None and self._faults_now.get(key) != fault:
                self.stats.inc("sensor_faults", machine=update.machine_id, point=pid, fault=fault)
            self._faults_now[key] = fault

    def _input_ended(self, status) -> None:
        """A scenario or a recording is over: the last state stays as it was (published, on the page),
        not replaced by no_data; a bounded run (--once, --max-updates) stops here."""
        if not getattr(self, "_end_logged", False):
            self._end_logged = True
            log.info(f"input ended: {status.reason}", extra=fields(updates=self.rounds, states=",".join(
                f"{m}={rt.last_update.state}" for m, rt in self.runtimes.items() if rt.last_update)))
            if not self.notifier.ready_sent:
                self.notifier.ready(f"input ended: {status.reason}")
        if self.options.max_updates is not None:
            if self.rounds == 0:
                raise RotorwatchError(f"the input ended before the first update ({status.reason}); "
                                      "is it shorter than one analysis window?")
            self.request_stop(f"the input ended after {self.rounds} update rounds")

    def _report_no_input(self, status) -> None:
        """While the source is stalled or gone, every machine's points read sensor_fault / no_data."""
        assert self.config is not None
        acq = self.config.acquisition
        speed = acq.speedup if acq.source in ("simulated", "recording") else 1.0
        every = max(acq.update_interval_s / speed, 0.5)
        now = time.monotonic()
        if now - self._last_no_input_report < every:
            return
        self._last_no_input_report = now
        cap = self.capture
        base = cap.source_time_s if cap is not None else None
        if base is None:
            time_s = time.time()
        else:
            time_s = base + (now - (cap.last_data_monotonic or now)) * speed  # type: ignore[union-attr]
        if status.state == "stalled":
            health = SensorHealth(ok=False, fault="stalled", reason=f"input stalled: {status.reason}")
        else:
            health = SensorHealth(ok=True)
        note = f"input {status.state}: {status.reason}"
        for rt in self.runtimes.values():
            mon = monitor_of(rt.pipeline)
            pids = list(rt.channels)
            update = mon.update(time_s, {p: None for p in pids}, {p: health for p in pids},
                                rpm=None, rpm_source="", notes={p: note for p in pids})
            self._deliver(rt, update, None)

    def _status_line(self) -> str:
        parts = [f"{m}: {rt.last_update.state}" for m, rt in self.runtimes.items() if rt.last_update is not None]
        return f"{self.rounds} updates; " + (", ".join(parts) or "no update yet")

    # ============================================================================== reload
    def _reload(self, origin: str) -> tuple[bool, str]:
        """Re-read the configuration; keep the running one if the new one is invalid."""
        assert self.config is not None
        self.notifier.reloading()
        try:
            new = load_config(self.config_path, self.options.overrides)
            runtimes = self._build_runtimes(new, keep=self.runtimes)
        except ConfigError as e:
            msg = "; ".join(e.problems)
            log.error(f"reload rejected, keeping the running configuration: {msg}", extra=fields(origin=origin))
            self.stats.inc("config_reloads", result="rejected")
            if self.publisher is not None:
                self.publisher.publish_agent_event("reload_rejected", msg, time.time(), origin=origin)
            self.notifier.reloaded(self._status_line())
            return False, msg
        old = self.config
        changed = [name for name in ("site", "acquisition", "mqtt", "metrics", "status_page", "storage")
                   if getattr(old, name) != getattr(new, name)]
        machines_changed = [m for m in runtimes if self.runtimes.get(m) is not runtimes[m]]
        try:
            for mid, rt in self.runtimes.items():
                if runtimes.get(mid) is not rt:
                    self._close_pipeline(rt)
                    if mid not in runtimes and self.publisher is not None:
                        self.publisher.forget(mid)
            layout_changed = self._ring_layout(new, runtimes) != self._ring_layout(old, self.runtimes)
            self.config = new
            self.runtimes = runtimes
            assert self.speeds is not None and self.collector is not None
            self.speeds.set_config(new)
            self.collector.set_config(new)
            if self.evidence is not None:
                self.evidence.set_config(new)
            if "acquisition" in changed or layout_changed:
                self._stop_capture()
                self._start_capture(new)
            if "mqtt" in changed or "site" in changed:
                if self.link is not None and self.publisher is not None:
                    self.publisher.clear_discovery(old, new)
                    self.link.stop()
                self.link = self.publisher = None
                if new.mqtt is not None:
                    self._start_mqtt(new)
            elif self.link is not None and self.publisher is not None:
                self.link.set_extra_topics(self.speeds.topics)
                self.publisher.clear_discovery(old, new)
                self.publisher.set_config(new)
                self.publisher.publish_info()
            if "metrics" in changed:
                if self.metrics_server is not None:
                    self.metrics_server.stop()
                    self.metrics_server = None
                if new.metrics is not None:
                    self.metrics_server = MetricsServer(new.metrics, make_registry(self.collector), self.config_dir)
                    self.metrics_server.start()
            if "status_page" in changed:
                if self.status_server is not None:
                    self.status_server.stop()
                    self.status_server = self.status_board = None
                if new.status_page is not None:
                    self._start_status_page(new)
            elif self.status_board is not None:
                self.status_board.reconfigure(new)
        except RotorwatchError as e:
            # the new settings parsed but cannot be put to work (a port in use, a missing TLS file)
            log.error(f"reload applied partly: {e}", extra=fields(origin=origin))
            self.stats.inc("config_reloads", result="failed")
            self.notifier.reloaded(self._status_line())
            return False, str(e)
        self.stats.inc("config_reloads", result="applied")
        self._warn_exposed_secrets(new)
        msg = f"configuration reloaded (changed: {', '.join(changed + [f'machine {m}' for m in machines_changed]) or 'nothing'})"
        log.info(msg, extra=fields(origin=origin))
        self.notifier.reloaded(self._status_line())
        return True, msg

    # ============================================================================== commands
    def _queue_mqtt_command(self, payload: bytes) -> None:
        """paho's thread: queue the raw payload; parsing happens in the analysis loop."""
        try:
            self._requests.put_nowait(_Request(None, raw=payload, origin="mqtt"))
            self._wake.set()
        except queue.Full:
            self.stats.inc("commands", result="rejected")
            ok, held = self._limiter.allow("commands-full")
            if ok:
                log.warning("command queue full; command dropped", extra=fields(repeats=held or None))

    def _serve_requests(self) -> None:
        for _ in range(16):  # bounded per loop turn
            try:
                req = self._requests.get_nowait()
            except queue.Empty:
                return
            req.reply = self._execute(req)
            req.done.set()

    def _answer_pending(self, message: str) -> None:
        while True:
            try:
                req = self._requests.get_nowait()
            except queue.Empty:
                return
            req.reply = {"ok": False, "message": message}
            req.done.set()

    def _execute(self, req: _Request) -> dict:
        assert self.config is not None
        now = time.time()
        agent = self.config.site.agent_id
        cmd = req.command
        try:
            if cmd is None:
                cmd = parse_command(req.raw or b"", self.config)
            ok, message, detail = self._run_command(cmd, req.origin)
        except RotorwatchError as e:  # the command was fine but could not be carried out
            self.stats.inc("commands", result="failed")
            log.warning(f"command {cmd.name} failed: {e}", extra=fields(origin=req.origin))  # type: ignore[union-attr]
            body = payloads.command_result_payload(agent, now, cmd.name, False, str(e), cmd.request_id)  # type: ignore[union-attr]
            if self.publisher is not None and req.origin == "mqtt":
                self.publisher.publish_command_result(body)
            return body
        except CommandRejected as e:
            self.stats.inc("commands", result="rejected")
            ok, held = self._limiter.allow(f"rejected:{e}")
            if ok:
                log.warning(f"command rejected: {e}", extra=fields(origin=req.origin, repeats=held or None))
            body = payloads.command_result_payload(agent, now, e.command, False, str(e), e.request_id)
            if self.publisher is not None and req.origin == "mqtt":
                self.publisher.publish_command_result(body)
                self.publisher.publish_agent_event("command_rejected", str(e), now, command=e.command, id=e.request_id)
            return body
        self.stats.inc("commands", result="ok" if ok else "failed")
        body = payloads.command_result_payload(agent, now, cmd.name, ok, message, cmd.request_id, **detail)
        log.info(f"command {cmd.name}: {message}", extra=fields(origin=req.origin, ok=ok, machine=cmd.machine or "-"))
        if self.publisher is not None and req.origin == "mqtt":
            self.publisher.publish_command_result(body)
        return body

    def _run_command(self, cmd: Command, origin: str = "mqtt") -> tuple[bool, str, dict]:
        if cmd.name == "reload":
            ok, message = self._reload("command")
            return ok, message, {}
        if cmd.name == "acknowledge":
            rt = self.runtimes[cmd.machine]  # type: ignore[index]  # checked by parse_command
            mon = monitor_of(rt.pipeline)
            try:
                events = mon.acknowledge(point_id=cmd.point, value=cmd.value)
            except KeyError as e:
                raise CommandRejected(f"acknowledge: unknown point or value {e.args[0]!r}", cmd.request_id, cmd.name) from None
            events = list(events or [])
            if events:
                self.stats.inc("alarm_events", len(events), machine=rt.machine.id)
                if self.publisher is not None:
                    self.publisher.publish_events(events)
            cleared = sorted({f"{e.point_id}/{e.value_name}" for e in events if e.value_name not in ("point", "machine")})
            message = f"cleared {len(cleared)} latched value(s)" if cleared else "nothing latched to clear"
            return True, message, {"machine": rt.machine.id, "cleared": cleared}
        if cmd.name == "relearn":
            rt = self.runtimes[cmd.machine]  # type: ignore[index]  # checked by parse_command
            relearn = getattr(rt.pipeline, "relearn", None) or monitor_of(rt.pipeline).relearn
            reset = list(relearn(cmd.point, cmd.value) or [])
            return True, f"learning {len(reset)} baseline(s) again", {"machine": rt.machine.id, "reset": reset}
        if cmd.name == "snapshot":
            targets = [cmd.machine] if cmd.machine is not None else list(self.runtimes)
            saved = []
            for mid in targets:
                rt = self.runtimes[mid]
                if rt.last_update is None or rt.last_blocks is None or self.evidence is None:
                    raise RotorwatchError(f"snapshot of machine {mid!r}: no analyzed update yet (the first window is still filling)")
                info = self.evidence.save(rt.last_update, rt.last_blocks, rt.machine, "command",
                                          f"requested through {origin}")
                if info is None:
                    raise RotorwatchError(f"snapshot of machine {mid!r} could not be saved (see the log)")
                saved.append(info)
            return True, f"saved {len(saved)} snapshot(s)", {"snapshots": [i.id for i in saved],
                                                               "paths": [str(i.path) for i in saved]}
        raise CommandRejected(f"unknown command {cmd.name!r}", cmd.request_id, cmd.name)

    # -- status page callbacks (HTTP thread): queue to the loop and wait, bounded ----------------
    def _call_loop(self, cmd: Command, timeout_s: float = 10.0) -> str:
        req = _Request(cmd, origin="status_page")
        try:
            self._requests.put(req, timeout=1.0)
        except queue.Full:
            raise RotorwatchError("the daemon is busy; try again") from None
        self._wake.set()
        if not req.done.wait(timeout_s):
            raise RotorwatchError(f"no answer from the analysis loop within {timeout_s:g} s")
        reply = req.reply or {}
        if not reply.get("ok"):
            raise RotorwatchError(str(reply.get("message", "failed")))
        return str(reply.get("message", ""))

    def _web_acknowledge(self, machine_id: str, point_id: str | None, value: str | None) -> str:
        if machine_id not in self.runtimes:
            raise KeyError(machine_id)
        return self._call_loop(Command("acknowledge", machine_id, point_id, value))

    def _web_snapshot(self, machine_id: str, point_id: str | None) -> str:
        if machine_id not in self.runtimes:
            raise KeyError(machine_id)
        return self._call_loop(Command("snapshot", machine_id))
