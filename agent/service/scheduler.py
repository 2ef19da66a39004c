"""The update scheduler: one analysis round every ``acquisition.update_interval_s`` on the source clock.

The clock is the source's (for simulated input the scenario clock: a sped-up scenario gives sped-up
updates). :meth:`UpdateScheduler.due` says whether a round is due at source time ``t`` and how many
were missed; if a round takes longer than the interval, the missed ones are skipped and counted, and
capture is never held up. A new run of the source (a reopen, a gap) starts the schedule again.

:meth:`UpdateScheduler.run_round` takes each machine's newest window from the rings and steps its
pipeline, with the outside speed (tach channel or MQTT topic) when the machine has one; a window that
holds lost samples (an input overflow) is not analyzed but reported as a sensor fault on every point.
:meth:`UpdateScheduler.report_no_input` reports stalled or missing input the same way. Every update
goes to ``deliver``; the scheduler itself publishes nothing.
"""

from __future__ import annotations

import logging
import math
import time
from collections.abc import Callable, Mapping
from dataclasses import dataclass

import numpy as np

from ..alarms.records import MachineUpdate, SensorHealth
from ..analysis.running_speed import outside_reading
from ..errors import RotorwatchError
from ..logs import RepeatLimiter, fields
from ..selfstats import SelfStats
from ..settings.models import Config
from .capture import Capture, CaptureStatus
from .ring import Ring
from .runtimes import MachineRuntime
from .speed import SpeedBoard

log = logging.getLogger(__name__)

Deliver = Callable[[MachineRuntime, MachineUpdate, "dict[str, np.ndarray] | None"], None]


@dataclass(frozen=True)
class Round:
    updated: int  # machines that got an update (analyzed or reported)
    good: bool  # at least one point was analyzed
    behind: int  # rounds skipped because the analysis was behind the input


class UpdateScheduler:
    def __init__(self, stats: SelfStats, deliver: Deliver, speeds: SpeedBoard | None = None,
                 clock: Callable[[], float] = time.monotonic):
        self.stats = stats
        self.deliver = deliver
        self.speeds = speeds
        self._clock = clock
        self._limiter = RepeatLimiter(300.0, clock)
        self._next_due: float | None = None
        self._run_id: int | None = None
        self._last_no_input_report = -math.inf

    def restart(self) -> None:
        """The capture was started again: the schedule starts from its first samples."""
        self._next_due = None
        self._run_id = None

    def due(self, t: float, run_id: int, interval_s: float) -> int | None:
        """At source time ``t``: None when no round is due, else the number of rounds skipped."""
        if self._next_due is None or run_id != self._run_id:
            # first samples, or a new run after a reopen/gap: start the schedule from here
            self._run_id = run_id
            self._next_due = t
        if t < self._next_due:
            return None
        behind = int(math.floor((t - self._next_due) / interval_s))
        self._next_due += (behind + 1) * interval_s
        return behind

    # -- one round ---------------------------------------------------------------------------------
    def run_round(self, config: Config, runtimes: Mapping[str, MachineRuntime], rings: Mapping[int, Ring],
                  capture: Capture) -> Round | None:
        """The round due now, if one is; None when none is due (or no samples came yet)."""
        t = capture.source_time_s
        if t is None:
            return None
        behind = self.due(t, capture.run_id, config.acquisition.update_interval_s)
        if behind is None:
            return None
        updated = 0
        good = False
        lost_at = capture.last_overflow_s
        for rt in list(runtimes.values()):
            blocks, end_s = windows(rt, rings)
            span_end = end_s if blocks is not None else t
            if lost_at is not None and span_end - rt.machine.analysis.window_s < lost_at < span_end:
                # samples were lost inside this window (or it is refilling after the loss): not analyzed
                self._report_overflow(rt, span_end, lost_at, capture.overflows)
                updated += 1
                continue
            if blocks is None:
                continue  # the window is still filling
            update = self._step(config, rt, rings, blocks, end_s)
            if update is None:
                continue
            updated += 1
            good = good or any(p.result is not None for p in update.points.values())
            self.deliver(rt, update, blocks)
        if updated and behind > 0:
            self.stats.updates_skipped.inc(behind)
            ok, held = self._limiter.allow("behind")
            if ok:
                log.warning("analysis is behind the input; skipped updates", extra=fields(
                    skipped=behind, interval_s=config.acquisition.update_interval_s, repeats=held or None))
        return Round(updated, good, behind)

    def _step(self, config: Config, rt: MachineRuntime, rings: Mapping[int, Ring], blocks: dict[str, np.ndarray],
              end_s: float) -> MachineUpdate | None:
        rpm, rpm_source, pulses_s = outside_speed(config, rt, rings, end_s, self.speeds)
        t0 = self._clock()
        try:
            step_blocks: dict[str, np.ndarray | None] = dict(blocks)
            update = rt.pipeline.step(end_s, step_blocks, rpm=rpm, rpm_source=rpm_source, tach_pulses_s=pulses_s)
        except RotorwatchError as e:
            ok, held = self._limiter.allow(f"step:{rt.machine.id}:{e}")
            if ok:
                log.error(f"analysis failed: {e}", extra=fields(machine=rt.machine.id, repeats=held or None))
            return None
        self.stats.update_duration_seconds.labels(machine=rt.machine.id).set(self._clock() - t0)
        self.stats.last_update_timestamp_seconds.labels(machine=rt.machine.id).set(end_s)
        self.stats.updates.labels(machine=rt.machine.id).inc()
        return update

    def _report_overflow(self, rt: MachineRuntime, time_s: float, lost_at_s: float, n_overflows: int) -> None:
        """A window that holds lost samples: every point of the machine reads sensor_fault (overflow)."""
        ago_s = time_s - lost_at_s
        health = SensorHealth(ok=False, fault="overflow", reason=(
            f"input overflow {ago_s:.2f} s before the end of the window: samples were lost in the driver or "
            f"the capture queue ({n_overflows} overflows since start); this window is not analyzed"))
        pids = list(rt.channels)
        update = rt.pipeline.monitor.update(time_s, {p: None for p in pids}, {p: health for p in pids},
                                            rpm=None, rpm_source="", notes={})
        self.stats.updates.labels(machine=rt.machine.id).inc()
        self.deliver(rt, update, None)

    # -- no input --------------------------------------------------------------------------------
    def report_no_input(self, config: Config, runtimes: Mapping[str, MachineRuntime], capture: Capture | None,
                        status: CaptureStatus) -> None:
        """While the source is stalled or gone, every machine's points read sensor_fault / no_data
        (at most once per update interval of wall time, at least 0.5 s apart)."""
        acq = config.acquisition
        speed = acq.speedup if acq.source in ("simulated", "recording") else 1.0
        every = max(acq.update_interval_s / speed, 0.5)
        now = self._clock()
        if now - self._last_no_input_report < every:
            return
        self._last_no_input_report = now
        base = capture.source_time_s if capture is not None else None
        if capture is None or base is None:
            time_s = time.time()
        else:
            time_s = base + (now - (capture.last_data_monotonic or now)) * speed
        if status.state == "stalled":
            health = SensorHealth(ok=False, fault="stalled", reason=f"input stalled: {status.reason}")
        else:
            health = SensorHealth(ok=True)
        note = f"input {status.state}: {status.reason}"
        for rt in runtimes.values():
            pids = list(rt.channels)
            update = rt.pipeline.monitor.update(time_s, {p: None for p in pids}, {p: health for p in pids},
                                                rpm=None, rpm_source="", notes={p: note for p in pids})
            self.deliver(rt, update, None)


def windows(rt: MachineRuntime, rings: Mapping[int, Ring]) -> tuple[dict[str, np.ndarray] | None, float]:
    """Each point's newest window (volts) and the end time they share; None while one still fills."""
    blocks: dict[str, np.ndarray] = {}
    end_s: float | None = None
    for pid, ch in rt.channels.items():
        block, end = rings[ch].latest_with_time(rt.n_window)
        if block is None or end is None:
            return None, 0.0
        blocks[pid] = block
        end_s = end if end_s is None else min(end_s, end)
    return blocks, float(end_s) if end_s is not None else 0.0


def outside_speed(config: Config, rt: MachineRuntime, rings: Mapping[int, Ring], end_s: float,
                  speeds: SpeedBoard | None) -> tuple[float | None, str | None, np.ndarray | None]:
    """An outside speed reading for this update: the tach channel (with its pulse times in seconds from
    the start of the window that ends at ``end_s``) or the MQTT speed topic."""
    speed = rt.machine.speed
    tach = None
    if speed.mode == "tach" and rt.tach_channel is not None:
        from ..sources.tach import pulses_in_record

        pulses, tach_end_s = rings[rt.tach_channel].latest_with_time(rt.n_window)
        if pulses is not None:
            rpm, edges_s = pulses_in_record(pulses, config.acquisition.sample_rate_hz,
                                            speed.tach_threshold_v, speed.pulses_per_rev)
            if tach_end_s is not None:
                edges_s = edges_s + (tach_end_s - end_s)  # the tach ring may hold a chunk more or less
            tach = (rpm, edges_s)
    mqtt_rpm = speeds.rpm(rt.machine.id) if speed.mode == "mqtt" and speeds is not None else None
    r = outside_reading(speed, tach=tach, mqtt_listening=speeds is not None, mqtt_rpm=mqtt_rpm)
    return r.rpm, r.source, r.pulses_s
