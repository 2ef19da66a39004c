"""The monitoring daemon: capture -> ring buffers -> rolling analysis -> publishers.

The daemon orchestrates only; each job is a class of its own, testable without it:

- :class:`~rotorwatch.service.capture.Capture` reads the source into the ring buffers;
- :class:`~rotorwatch.service.scheduler.UpdateScheduler` runs the analysis rounds on the source clock;
- :class:`~rotorwatch.service.command_desk.CommandDesk` carries out commands from MQTT and the page;
- :class:`~rotorwatch.service.reload.Reloader` applies a new configuration;
- :class:`~rotorwatch.service.sinks.SinkSet` holds the publishers (:data:`rotorwatch.publishers.PUBLISHERS`:
  evidence, Prometheus, MQTT, status page) and hands each update to all of them.

Threads and who owns what:

- the **main thread** owns the signals (SIGTERM/SIGINT stop, SIGHUP reloads), the pipelines (one
  :class:`~rotorwatch.pipeline.MachinePipeline` per machine, not thread-safe) and the analysis loop;
  commands from MQTT and the status page are queued to it;
- the **capture thread** only reads the source into the rings;
- paho's network thread, the outbox's drain thread and the HTTP threads only read snapshots.

Start order: the publishers first (in the background, a missing broker never blocks), the source
last. Stop order: the source first, then the current update finishes, pipelines save their state,
the publishers close in reverse order (MQTT publishes the last states and retained ``offline``).
systemd: ``READY=1`` after the first good update, ``WATCHDOG=1`` from the analysis loop.
"""

from __future__ import annotations

import logging
import signal
import threading
import time
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from .. import __version__
from ..alarms.records import AlarmEvent, MachineUpdate
from ..errors import ConfigError, InputError, RotorwatchError
from ..logs import fields
from ..publishers import PUBLISHERS, Publisher, SinkContext
from ..publishers.evidence import Evidence
from ..selfstats import SelfStats
from ..settings.loading import load_config
from ..settings.models import Config
from .capture import FINITE_SOURCES, Capture, CaptureStatus
from .command_desk import CommandDesk
from .notify import Notifier
from .reload import Reloader
from .ring import Ring
from .runtimes import (
    MachineRuntime,
    PipelineFactory,
    build_runtimes,
    close_pipeline,
    default_pipeline_factory,
    ring_layout,
)
from .scheduler import UpdateScheduler
from .sinks import SinkSet
from .speed import SpeedBoard

log = logging.getLogger(__name__)

SourceFactory = Callable[[Config, Path], Any]

__all__ = ["Daemon", "RunOptions", "default_pipeline_factory", "default_source_factory"]


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


def default_source_factory(config: Config, config_dir: Path) -> Any:
    from ..sources.base import configured_source

    return configured_source(config, config_dir)


def stall_after_s(config: Config) -> float:
    """Wall seconds without samples after which the source counts as stalled: two update intervals
    (of wall time), but never less than four blocks or half a second."""
    acq = config.acquisition
    sped = acq.source in ("simulated", "recording")
    wall_interval = acq.update_interval_s / (acq.speedup if sped else 1.0)
    # a recording is paced at speedup x real time; a simulation streams at real time between its jumps
    block_wall = acq.block_frames / acq.sample_rate_hz / (acq.speedup if acq.source == "recording" else 1.0)
    return max(2.0 * wall_interval, 4.0 * block_wall, 0.5)


class Daemon:
    def __init__(self, config_path: str | Path, options: RunOptions | None = None, *,
                 notifier: Notifier | None = None,
                 pipeline_factory: PipelineFactory = default_pipeline_factory,
                 source_factory: SourceFactory = default_source_factory,
                 publishers: Sequence[type[Publisher]] = PUBLISHERS):
        self.config_path = Path(config_path)
        self.config_dir = self.config_path.resolve().parent
        self.options = options or RunOptions()
        self.notifier = notifier or Notifier()
        self._pipeline_factory = pipeline_factory
        self._source_factory = source_factory
        self._publisher_kinds = tuple(publishers)
        self.stats = SelfStats()
        self._stop = threading.Event()
        self._wake = threading.Event()
        self._reload_requested = threading.Event()
        # What a signal asked for, taken up by the loop (at most 0.2 s later). A signal handler runs in the
        # main thread between two bytecodes, possibly while that thread holds the lock of the Event it waits
        # on, so a handler that called Event.set() could deadlock the daemon on SIGTERM: it only assigns.
        self._signalled_stop: str | None = None
        self._signalled_reload = False
        self.commands = CommandDesk(self, self.stats, wake=self._wake)
        self.config: Config | None = None
        self.runtimes: dict[str, MachineRuntime] = {}
        self.rings: dict[int, Ring] = {}
        self.capture: Capture | None = None
        self.sinks: SinkSet | None = None
        self.reloader: Reloader | None = None
        self.scheduler: UpdateScheduler | None = None
        self.speeds: SpeedBoard | None = None
        self.state_dir: Path | None = None
        self.rounds = 0
        self._faults_now: dict[tuple[str, str], str | None] = {}  # (machine, point) -> sensor fault kind now
        self._end_logged = False
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
        signal.signal(signal.SIGTERM, lambda s, f: setattr(self, "_signalled_stop", "SIGTERM"))
        signal.signal(signal.SIGINT, lambda s, f: setattr(self, "_signalled_stop", "SIGINT"))
        signal.signal(signal.SIGHUP, lambda s, f: setattr(self, "_signalled_reload", True))

    def _take_signals(self) -> None:
        """Turn what a signal handler recorded into the stop or reload it asks for (main thread, no handler)."""
        if self._signalled_stop is not None:
            reason, self._signalled_stop = self._signalled_stop, None
            self.request_stop(reason)
        if self._signalled_reload:
            self._signalled_reload = False
            self.request_reload()

    def run(self) -> int:
        """Run until stopped; returns the exit status. Bad configuration raises ConfigError."""
        self._install_signals()
        config = self._prepare()
        log.info("rotorwatch starting", extra=fields(
            version=__version__, config=str(self.config_path), agent=config.site.agent_id,
            machines=",".join(self.runtimes), source=config.acquisition.source, state_dir=str(self.state_dir)))
        started = self._started = time.monotonic()
        try:
            assert self.sinks is not None
            self.sinks.start(config)  # publishers first ...
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

    def _prepare(self) -> Config:
        """Everything that can refuse the configuration, before anything starts."""
        config = self.config = load_config(self.config_path, self.options.overrides)
        self.state_dir = self._state_dir(config)
        self.speeds = SpeedBoard(config)
        self.runtimes = self.build_runtimes(config, {})  # ConfigError from the pipelines: exit non-zero
        self._warn_exposed_secrets(config)
        self._preflight(config)  # what the source would refuse, before anything starts (exit 2)
        context = SinkContext(self.config_dir, self.state_dir, self.stats, self.speeds, self.commands)
        self.sinks = SinkSet(self._publisher_kinds, context)
        self.scheduler = UpdateScheduler(self.stats, self._deliver, self.speeds)
        self.reloader = Reloader(self, lambda: load_config(self.config_path, self.options.overrides), self.sinks,
                                 self.stats, self.notifier, on_applied=self._warn_exposed_secrets)
        return config

    def _preflight(self, config: Config) -> None:
        """Build the source and let it check what ``start()`` would refuse.

        A configuration that cannot work (a recording or a scenario without a path, a scenario that does
        not load) ends the start-up in one line (ConfigError, exit 2). A file that is missing, damaged or
        of the wrong rate ends it only with ``fail_fast`` (``--once``); a long-running daemon reports
        the input unavailable and retries, as for a device that is missing now (never probed here)."""
        try:
            source = self._source_factory(config, self.config_dir)
            check = getattr(source, "check", None)  # optional in the Source contract
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

    def build_runtimes(self, config: Config, keep: Mapping[str, MachineRuntime]) -> dict[str, MachineRuntime]:
        assert self.state_dir is not None
        rate = self.config.acquisition.sample_rate_hz if self.config is not None and keep else None
        return build_runtimes(config, self.state_dir, self._pipeline_factory, keep, kept_rate_hz=rate)

    # -------------------------------------------------------------------------------- capture
    def _start_capture(self, config: Config) -> None:
        self.rings = {ch: Ring(cap) for ch, cap in ring_layout(config, self.runtimes).items()}
        self.capture = Capture(config.acquisition, self.config_dir, self.rings, self.stats,
                               lambda: self._source_factory(config, self.config_dir),
                               stall_after_s=stall_after_s(config), wake=self._wake)
        if self.scheduler is not None:
            self.scheduler.restart()
        self.capture.start()

    def _stop_capture(self) -> None:
        if self.capture is not None:
            self.capture.stop(self.options.stop_timeout_s)
            self.capture = None

    def _shutdown(self) -> None:
        log.info("rotorwatch stopping", extra=fields(reason=self._stop_reason))
        self.notifier.stopping()
        self._stop_capture()  # the source first; the current update already finished (same thread)
        self.commands.answer_pending("the daemon is stopping")
        self.commands.report_dropped(force=True)
        for rt in self.runtimes.values():
            close_pipeline(rt)
        if self.sinks is not None:
            self.sinks.close()  # the last states and "offline" go out here
        self.notifier.close()
        log.info("rotorwatch stopped", extra=fields(updates=self.rounds))

    # ============================================================================== the loop
    def _loop_once(self) -> None:
        self._take_signals()
        self.notifier.watchdog()
        if self._reload_requested.is_set():
            self._reload_requested.clear()
            self.reload("SIGHUP")
        self.commands.serve()
        assert self.sinks is not None and self.scheduler is not None and self.config is not None
        self.sinks.tick()
        self._wake.wait(0.2)
        self._wake.clear()
        self._take_signals()
        cap = self.capture
        if self._stop.is_set() or cap is None:
            return
        status = cap.status
        self.sinks.on_input(status.state, status.reason)
        if status.state == "ended" and self.config.acquisition.source in FINITE_SOURCES:
            self._input_ended(status)
            return
        if status.state == "unavailable" and self.options.fail_fast and self.rounds == 0:
            raise RotorwatchError(f"input {self.config.acquisition.source}: {status.reason}")
        if status.state in ("stalled", "unavailable", "ended"):
            self.scheduler.report_no_input(self.config, self.runtimes, cap, status)
            if not self.notifier.ready_sent and time.monotonic() - self._started > self.options.ready_grace_s:
                log.warning("no good update yet; reporting ready without input",
                            extra=fields(source=status.state, reason=status.reason))
                self.notifier.ready(f"running without input: {status.state}: {status.reason}")
            return
        done = self.scheduler.run_round(self.config, self.runtimes, self.rings, cap)
        if done is not None and done.updated:
            self._round_done(done.good)

    def _round_done(self, good: bool) -> None:
        self.rounds += 1
        if good and not self.notifier.ready_sent:
            log.info("first update done; ready", extra=fields(
                states=",".join(f"{m}={rt.last_update.state}" for m, rt in self.runtimes.items() if rt.last_update)))
        if good:
            self.notifier.ready(self.status_line())
        if self.rounds % 10 == 1:
            self.notifier.status(self.status_line())

    def _deliver(self, rt: MachineRuntime, update: MachineUpdate, blocks: dict[str, np.ndarray] | None) -> None:
        rt.last_update = update
        self._count_sensor_faults(update)
        if blocks is not None:
            rt.last_blocks = blocks
        if update.events:
            self.stats.alarm_events.labels(machine=update.machine_id).inc(len(update.events))
        assert self.sinks is not None
        self.sinks.on_update(update, blocks, rt.machine)

    def _count_sensor_faults(self, update: MachineUpdate) -> None:
        """rotorwatch_sensor_faults_total: each time a point enters a sensor fault (or changes its kind)."""
        for pid, pu in update.points.items():
            key = (update.machine_id, pid)
            fault = None if pu.health.ok else (pu.health.fault or "unknown")
            if fault is not None and self._faults_now.get(key) != fault:
                self.stats.sensor_faults.labels(machine=update.machine_id, point=pid, fault=fault).inc()
            self._faults_now[key] = fault

    def _input_ended(self, status: CaptureStatus) -> None:
        """A scenario or a recording is over: the last state stays as it was (published, on the page),
        not replaced by no_data; a bounded run (--once, --max-updates) stops here."""
        if not self._end_logged:
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

    def status_line(self) -> str:
        parts = [f"{m}: {rt.last_update.state}" for m, rt in self.runtimes.items() if rt.last_update is not None]
        return f"{self.rounds} updates; " + (", ".join(parts) or "no update yet")

    # ============================================================================== reload
    def reload(self, origin: str) -> tuple[bool, str]:
        assert self.reloader is not None
        return self.reloader.reload(origin)

    def adopt(self, config: Config, runtimes: dict[str, MachineRuntime], restart_capture: bool) -> None:
        """A reload's new configuration and machines (:class:`~rotorwatch.service.reload.Reloadable`)."""
        self.config = config
        self.runtimes = runtimes
        assert self.speeds is not None
        self.speeds.set_config(config)
        if restart_capture:
            self._stop_capture()
            self._start_capture(config)

    # ============================================================================== commands
    def save_snapshot(self, rt: MachineRuntime, origin: str) -> Any:
        """A snapshot requested by a command (:class:`~rotorwatch.service.command_desk.CommandTarget`)."""
        evidence = self.sinks.get(Evidence) if self.sinks is not None else None
        if not isinstance(evidence, Evidence) or rt.last_update is None or rt.last_blocks is None:
            return None
        return evidence.save(rt.last_update, rt.last_blocks, rt.machine, "command", f"requested through {origin}")

    def deliver_events(self, rt: MachineRuntime, events: list[AlarmEvent]) -> None:
        if self.sinks is not None:
            self.sinks.on_events(events)

    def agent_event(self, kind: str, message: str, **detail: Any) -> None:
        """An event about the agent itself (``commands_dropped``), to every publisher."""
        if self.sinks is not None:
            self.sinks.on_agent_event(kind, message, time.time(), **detail)
