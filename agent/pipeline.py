"""One machine's processing per update: raw volts blocks in, a :class:`MachineUpdate` out.

    pipeline = MachinePipeline(config, machine, state_dir="var/rotorwatch")
    update = pipeline.step(time_s, {"de-h": volts, "nde-h": volts}, rpm=None)

For each point: sensor checks on the raw volts -> calibration to m/s^2 (volts / ``volts_per_m_s2``) ->
:class:`~rotorwatch.analysis.point.PointAnalyzer` (built once per point and sampling rate) -> and for
the machine, :class:`~rotorwatch.alarms.monitor.MachineMonitor`. A point whose demodulation band is
searched keeps the band of the first update its baselines learn from (running, healthy sensor), stored
with the baselines; every ``band_review_hours`` the search runs again and a clearly better band is
reported in the log (once) and in the point's result; :meth:`relearn` of the point searches anew. A
point missing from ``blocks_v`` reads ``no_data``; a block the analysis cannot take (too short, not
finite) reads ``no_data`` with the reason, or ``sensor_fault`` when the sensor checks failed. Replay and the daemon run exactly this code.

A step is two parts. :class:`UpdateAnalysis` (*analyze*) takes the blocks to a :class:`PointOutcome` per
point; it depends on nothing but the blocks, the configuration and each point's :class:`BandPlan` (the
kept envelope band, and whether the band is reviewed this update), so it may run anywhere, in any order
(``rotorwatch replay`` runs it in worker processes: :mod:`rotorwatch.replaypool`). :meth:`MachinePipeline.judge`
takes the outcomes in time order: it decides each point's actual band plan from what was learned so far,
analyzes again (here) a point whose outcome was made with another plan, keeps a searched band, and runs
the alarm logic. :meth:`MachinePipeline.step` is both, with the plan the pipeline forecasts, which is then
always the actual one.

Not thread-safe: one owner calls :meth:`step` (or :meth:`judge`).
"""

from __future__ import annotations

import logging
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .alarms.monitor import MachineMonitor
from .alarms.records import MachineUpdate, SensorHealth
from .alarms.sensor_checks import DEFAULT_LIMITS, SensorLimits, check_block
from .analysis import diagnosis
from .analysis.point import PointAnalyzer
from .analysis.result import PointResult
from .errors import InputError
from .settings.models import AlarmPolicy, Config, Machine, Point

log = logging.getLogger(__name__)

# Faults after which the samples are not worth analyzing (nothing but NaN, or one constant value).
UNANALYSABLE = ("invalid", "flatline")


@dataclass(frozen=True)
class BandPlan:
    """What the analysis of one point's block takes from the learned state: the demodulation band the
    point keeps (None: searched on the block, or configured) and whether this update reviews it."""

    kept_hz: tuple[float, float] | None = None
    review: bool = False


NO_PLAN = BandPlan()


@dataclass
class PointOutcome:
    """One point's analysis of one update: the result (None: no samples, unanalysable or refused), the
    sensor checks, a note, and the band plan it was made with (None: the block never reached the analysis)."""

    result: PointResult | None
    health: SensorHealth
    note: str | None = None
    plan: BandPlan | None = None


@dataclass
class UpdateInput:
    """One update's input: time, raw volts per point, rate, outside speed and tach pulses."""

    time_s: float
    blocks_v: Mapping[str, np.ndarray | None]
    fs_hz: float
    rpm: float | None = None
    rpm_source: str | None = None
    tach_pulses_s: np.ndarray | None = None


class UpdateAnalysis:
    """The order-independent part of a step: sensor checks, calibration and analysis of each point."""

    def __init__(self, machine: Machine, keep_spectra: bool = False, sensor_limits: SensorLimits = DEFAULT_LIMITS):
        self.machine = machine
        self.keep_spectra = keep_spectra
        self.sensor_limits = sensor_limits
        self._analyzers: dict[tuple[str, float], PointAnalyzer] = {}

    def analyzer(self, point_id: str, fs_hz: float) -> PointAnalyzer:
        key = (point_id, float(fs_hz))
        if key not in self._analyzers:
            self._analyzers[key] = PointAnalyzer(self.machine, self.machine.point(point_id), float(fs_hz))
        return self._analyzers[key]

    def point(self, p: Point, inp: UpdateInput, plan: BandPlan) -> PointOutcome:
        """Analyze one point's block with ``plan`` (ignored for a point whose band is configured)."""
        block = inp.blocks_v.get(p.id)
        if block is None or np.size(block) == 0:
            return PointOutcome(None, SensorHealth(ok=True, reason="no samples"), "no samples for this point this update")
        volts = np.asarray(block, dtype=float)
        h = check_block(volts, p.sensor, self.sensor_limits)
        if h.fault in UNANALYSABLE:
            return PointOutcome(None, h)
        analyzer = self.analyzer(p.id, inp.fs_hz)
        if not analyzer.searches_band:
            plan = NO_PLAN
        try:
            result = analyzer.analyze(
                volts / p.sensor.volts_per_m_s2, time_s=inp.time_s, rpm=inp.rpm, rpm_source=inp.rpm_source,
                keep_spectra=self.keep_spectra, envelope_band_hz=plan.kept_hz, review_band=plan.review,
                tach_pulses_s=inp.tach_pulses_s,
            )
        except InputError as e:
            return PointOutcome(None, h, f"cannot analyze this block: {e}", plan)
        return PointOutcome(result, h, None, plan)

    def update(self, inp: UpdateInput, plans: Mapping[str, BandPlan]) -> dict[str, PointOutcome]:
        """Every point of the machine, each with its plan from ``plans`` (missing: none kept, no review)."""
        return {p.id: self.point(p, inp, plans.get(p.id, NO_PLAN)) for p in self.machine.points}


class MachinePipeline:
    """Sensor checks, calibration, analysis and alarm logic of one machine."""

    def __init__(
        self,
        config: Config,
        machine: Machine,
        state_dir: str | Path | None = None,
        keep_spectra: bool = False,
        *,
        policy: AlarmPolicy | None = None,
        sensor_limits: SensorLimits = DEFAULT_LIMITS,
    ):
        self.config = config
        self.machine = machine
        self.keep_spectra = keep_spectra
        self.sensor_limits = sensor_limits
        self.state_dir = Path(state_dir if state_dir is not None else config.storage.state_dir)
        self.monitor = MachineMonitor(machine, self.state_dir, policy)
        self.analysis = UpdateAnalysis(machine, keep_spectra, sensor_limits)
        self.reanalyzed = 0  # points judge() analyzed again because their outcome was made with another plan
        self._band_reviewed_s: dict[str, float] = {}  # point id -> update time of the last band review
        self._band_suggested: dict[str, tuple[float, float]] = {}  # point id -> last better band reported

    def analyzer(self, point_id: str, fs_hz: float) -> PointAnalyzer:
        return self.analysis.analyzer(point_id, fs_hz)

    def update_input(self, time_s: float, blocks_v: Mapping[str, np.ndarray | None], rpm: float | None = None, *,
                     rpm_source: str | None = None, fs_hz: float | None = None,
                     tach_pulses_s: np.ndarray | None = None) -> UpdateInput:
        fs = float(fs_hz if fs_hz is not None else self.config.acquisition.sample_rate_hz)
        return UpdateInput(time_s, blocks_v, fs, rpm, rpm_source, tach_pulses_s)

    def step(
        self,
        time_s: float,
        blocks_v: Mapping[str, np.ndarray | None],
        rpm: float | None = None,
        *,
        rpm_source: str | None = None,
        fs_hz: float | None = None,
        tach_pulses_s: np.ndarray | None = None,
    ) -> MachineUpdate:
        """Process one update: ``blocks_v`` maps point id -> raw volts (1-D) sampled at ``fs_hz``
        (default ``acquisition.sample_rate_hz``); ``rpm`` is an outside speed reading, if any;
        ``tach_pulses_s`` the tach's pulse times in seconds from the blocks' first sample, if any (the
        analysis then order-tracks a window whose speed changed)."""
        inp = self.update_input(time_s, blocks_v, rpm, rpm_source=rpm_source, fs_hz=fs_hz, tach_pulses_s=tach_pulses_s)
        return self.judge(inp, self.analysis.update(inp, self.forecast([time_s])[0]))

    def judge(self, inp: UpdateInput, outcomes: Mapping[str, PointOutcome]) -> MachineUpdate:
        """The sequential part of a step, in time order: each analyzed point's actual band plan (a point
        whose outcome was made with another plan is analyzed again here), the kept band, the alarm logic."""
        results: dict[str, PointResult | None] = {}
        health: dict[str, SensorHealth] = {}
        notes: dict[str, str] = {}
        for p in self.machine.points:
            o = outcomes[p.id]
            if o.plan is not None:  # the block reached the analysis
                analyzer = self.analyzer(p.id, inp.fs_hz)
                plan = self._actual_plan(p.id, inp.time_s) if analyzer.searches_band else NO_PLAN
                if plan != o.plan:
                    self.reanalyzed += 1
                    o = self.analysis.point(p, inp, plan)
                if o.result is not None:
                    self._envelope_band(p.id, o.result, o.health, analyzer, inp.time_s)
            results[p.id], health[p.id] = o.result, o.health
            if o.note is not None:
                notes[p.id] = o.note
        results = diagnosis.across_points(self.machine, results)  # misalignment against the axial points
        return self.monitor.update(inp.time_s, results, health, rpm=inp.rpm, rpm_source=inp.rpm_source or "",
                                   notes=notes)

    # --------------------------------------------------------------------------- envelope band
    def forecast(self, times_s: Iterable[float]) -> list[dict[str, BandPlan]]:
        """The band plans of updates at ``times_s`` (the next ones, in order), as far as the state learned
        so far tells: right for the next update; for later ones, as if every block reached the analysis and
        no band were kept in between (:meth:`judge` corrects a wrong forecast). Changes nothing."""
        reviewed = dict(self._band_reviewed_s)
        kept = {p.id: self.monitor.baselines.envelope_band(p.id) for p in self.machine.points}
        return [{pid: BandPlan(band, band is not None and self._review_due(pid, t, reviewed))
                 for pid, band in kept.items()} for t in times_s]

    def _actual_plan(self, point_id: str, time_s: float) -> BandPlan:
        kept = self.monitor.baselines.envelope_band(point_id)
        return BandPlan(kept, kept is not None and self._review_due(point_id, time_s, self._band_reviewed_s))

    def _review_due(self, point_id: str, time_s: float, reviewed: dict[str, float]) -> bool:
        hours = self.machine.analysis.envelope.band_review_hours
        if hours <= 0:
            return False
        last = reviewed.setdefault(point_id, time_s)
        if time_s - last < hours * 3600.0 - 1e-6:
            return False
        reviewed[point_id] = time_s
        return True

    def _envelope_band(self, point_id: str, result: PointResult, health: SensorHealth, analyzer: PointAnalyzer,
                       time_s: float) -> None:
        """Keep a searched band on the first update the baselines learn from (running, healthy sensor),
        and report once when a review finds a clearly better band."""
        if result.envelope_band_source == "searched" and health.ok and result.rpm > self.machine.speed.stopped_rpm:
            self.monitor.baselines.keep_envelope_band(point_id, result.envelope_band_hz, time_s,
                                                      analyzer.band_criterion)
            self._band_reviewed_s[point_id] = time_s
        review = result.envelope_band_review
        if review is None:
            return
        if not review.clearly_better:
            self._band_suggested.pop(point_id, None)
            return
        if self._band_suggested.get(point_id) != review.best_hz:
            self._band_suggested[point_id] = review.best_hz
            log.info(
                "envelope band review machine=%s point=%s kept=%.0f-%.0f Hz (%s %.3g) better=%.0f-%.0f Hz (%.3g): "
                "a new search would choose a clearly better band; relearn the point to take it",
                self.machine.id, point_id, review.kept_hz[0], review.kept_hz[1], review.criterion, review.kept_score,
                review.best_hz[0], review.best_hz[1], review.best_score,
            )

    def acknowledge(self, point_id: str | None = None, value: str | None = None, time_s: float | None = None):
        return self.monitor.acknowledge(point_id, value, time_s)

    def relearn(self, point_id: str | None = None, value: str | None = None) -> list[str]:
        """Learn baselines again (all, a point's, or one value's); relearning whole points also forgets
        their kept envelope bands, which the next update searches again."""
        for p in self.machine.points:
            if value is None and (point_id is None or p.id == point_id):
                self._band_suggested.pop(p.id, None)
                self._band_reviewed_s.pop(p.id, None)
        return self.monitor.relearn(point_id, value)

    def close(self) -> None:
        self.monitor.close()
