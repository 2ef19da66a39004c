"""The daemon hands the analysis the tach's pulse times, aligned with the window it analyses.

Real simulated source (the demo fan with a tach on a spare channel, speeding up 1 % per second), real
pipeline; the pipeline is only wrapped to record what each step received and returned. The check values
come from the simulator's own shaft: its pulses rise at whole turns (simulators/render.py), so a pulse
time placed right in the window falls on a whole turn of the simulated shaft, and the speed change the
analysis reports must be the simulated one.
"""

from __future__ import annotations

import numpy as np
import pytest

from rotorwatch.service.daemon import Daemon, RunOptions, default_pipeline_factory
from rotorwatch.settings.loading import load_config
from rotorwatch.simulators.render import ScenarioRenderer
from rotorwatch.simulators.scenario import load_scenario

from .daemon_support import daemon_config, run_daemon_in_thread, write_setup


class RecordingPipeline:
    def __init__(self, inner, clock_offset):
        self.inner = inner
        self.monitor = inner.monitor
        self.clock_offset = clock_offset
        self.steps: list[tuple[float, np.ndarray | None, object]] = []

    def step(self, time_s, blocks, **kwargs):
        update = self.inner.step(time_s, blocks, **kwargs)
        # the update's time back on the scenario's clock (the daemon anchors it to the wall clock)
        self.steps.append((time_s - self.clock_offset(), kwargs.get("tach_pulses_s"), update))
        return update

    def close(self):
        self.inner.close()


def test_tach_pulses_reach_the_analysis_aligned_and_the_ramp_is_tracked(tmp_path):
    cfg = daemon_config(None, prefix="x", metrics=False, speedup=1.0, update_interval_s=0.25,
                        acquisition={"channels": 3})
    m = cfg["machines"][0]
    m["speed"] = {"mode": "tach", "rpm": 1482.0, "tach_channel": 2}
    scenario = {"scenario": {"name": "test: speeding up", "config": "rotorwatch.toml", "duration_days": 1.0, "seed": 3},
                "healthy": {"speed_drift_pct": 0.0},
                "change": [{"start_day": 0.0, "end_day": 60.0 / 86400.0, "component": "speed_rpm", "to": 2371.2}]}
    path = write_setup(tmp_path, cfg, scenario)
    pipelines = []
    daemon: list[Daemon] = []

    def factory(config, machine, state_dir):
        p = RecordingPipeline(default_pipeline_factory(config, machine, state_dir),
                              lambda: daemon[0].capture.clock._offset)
        pipelines.append(p)
        return p

    d = Daemon(path, RunOptions(state_dir=str(tmp_path / "state"), max_updates=4), pipeline_factory=factory)
    daemon.append(d)
    assert run_daemon_in_thread(d) == 0
    steps = pipelines[0].steps
    assert len(steps) == 4

    renderer = ScenarioRenderer(load_scenario(tmp_path / "scenario.toml"))
    window_s = load_config(path).machines[0].analysis.window_s
    for end_s, pulses, update in steps:
        assert pulses is not None and pulses.size >= 20
        turns = renderer.speed.turns(end_s - window_s + pulses)
        assert np.max(np.abs(turns - np.round(turns))) < 0.01  # on whole turns of the simulated shaft
        truth = renderer.true_rpm(np.array([end_s - window_s, end_s]))
        change_pct = 100.0 * (truth[1] - truth[0]) / truth.mean()  # 1482 -> 2371 r/min in 60 s: ~1.3 %/s
        for pu in update.points.values():
            r = pu.result
            assert r is not None and r.rpm_source == "tach" and r.order_tracked
            assert r.speed_change_pct == pytest.approx(change_pct, abs=0.1)
            assert r.rpm == pytest.approx(truth.mean(), rel=2e-3)
