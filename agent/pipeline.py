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

Not thread-safe: one owner calls :meth:`step`.
"""

from __future__ import annotations

import logging
from collections.abc import Mapping
from pathlib import Path

import numpy as np

from .alarms.monitor import MachineMonitor
from .alarms.records import MachineUpdate, SensorHealth
from .alarms.sensor_checks import DEFAULT_LIMITS, SensorLimits, check_block
from .analysis import diagnosis
from .analysis.point import PointAnalyzer
from .analysis.result import PointResult
from .errors import InputError
from .settings.models import AlarmPolicy, Config, Machine

log = logging.getLogger(__name__)

# Faults after which the samples are not worth analyzing (nothing but NaN, or one constant value).
UNANALYSABLE = ("invalid", "flatline")


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
        self._analyzers: dict[tuple[str, float], PointAnalyzer] = {}
        self._band_reviewed_s: dict[str, float] = {}  # point id -> update time of the last band review
        self._band_suggested: dict[str, tuple[float, float]] = {}  # point id -> last better band reported

    def analyzer(self, point_id: str, fs_hz: float) -> PointAnalyzer:
        key = (point_id, float(fs_hz))
        if key not in self._analyzers:
            self._analyzers[key] = PointAnalyzer(self.machine, self.machine.point(point_id), float(fs_hz))
        return self._analyzers[key]

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
        fs = float(fs_hz if fs_hz is not None else self.config.acquisition.sample_rate_hz)
        results: dict[str, PointResult | None] = {}
        health: dict[str, SensorHealth] = {}
        notes: dict[str, str] = {}
        for p in self.machine.points:
            block = blocks_v.get(p.id)
            if block is None or np.size(block) == 0:
                results[p.id] = None
                health[p.id] = SensorHealth(ok=True, reason="no samples")
                notes[p.id] = "no samples for this point this update"
                continue
            volts = np.asarray(block, dtype=float)
            h = check_block(volts, p.sensor, self.sensor_limits)
            health[p.id] = h
            if h.fault in UNANALYSABLE:
                results[p.id] = None
                continue
            accel_m_s2 = volts / p.sensor.volts_per_m_s2
            analyzer = self.analyzer(p.id, fs)
            kept = self.monitor.baselines.envelope_band(p.id) if analyzer.searches_band else None
            try:
                results[p.id] = analyzer.analyze(
                    accel_m_s2, time_s=time_s, rpm=rpm, rpm_source=rpm_source, keep_spectra=self.keep_spectra,
                    envelope_band_hz=kept, review_band=kept is not None and self._review_due(p.id, time_s),
                    tach_pulses_s=tach_pulses_s,
                )
            except InputError as e:
                results[p.id] = None
                notes[p.id] = f"cannot analyze this block: {e}"
                continue
            self._envelope_band(p.id, results[p.id], h, analyzer, time_s)  # type: ignore[arg-type]
        results = diagnosis.across_points(self.machine, results)  # misalignment against the axial points
        return self.monitor.update(time_s, results, health, rpm=rpm, rpm_source=rpm_source or "", notes=notes)

    # --------------------------------------------------------------------------- envelope band
    def _review_due(self, point_id: str, time_s: float) -> bool:
        hours = self.machine.analysis.envelope.band_review_hours
        if hours <= 0:
            return False
        last = self._band_reviewed_s.setdefault(point_id, time_s)
        if time_s - last < hours * 3600.0 - 1e-6:
            return False
        self._band_reviewed_s[point_id] = time_s
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
