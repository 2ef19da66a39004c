"""The daemon's loop in-process: a slow analysis never holds up capture, and missed updates are counted.

Real simulated source and real pipeline; only the pipeline is wrapped to take 0.6 s per update (longer
than the 0.2 s update interval and than the 0.5 s after which a silent source counts as stalled), and
the daemon runs in a thread (so it installs no signal handlers in the test process).
"""

from __future__ import annotations

import time

from rotorwatch.service.daemon import Daemon, RunOptions, default_pipeline_factory

from .daemon_support import daemon_config, run_daemon_in_thread, write_setup


class SlowPipeline:
    def __init__(self, inner, delay_s: float):
        self.inner, self.delay_s = inner, delay_s
        self.monitor = inner.monitor
        self.steps = 0

    def step(self, *args, **kwargs):
        time.sleep(self.delay_s)
        self.steps += 1
        return self.inner.step(*args, **kwargs)

    def close(self):
        self.inner.close()


def test_slow_analysis_does_not_stall_capture(tmp_path):
    cfg = daemon_config(None, prefix="x", metrics=False, speedup=1.0, update_interval_s=0.2)
    path = write_setup(tmp_path, cfg)
    pipelines = []

    def factory(config, machine, state_dir):
        p = SlowPipeline(default_pipeline_factory(config, machine, state_dir), 0.6)
        pipelines.append(p)
        return p

    d = Daemon(path, RunOptions(state_dir=str(tmp_path / "state"), max_updates=4), pipeline_factory=factory)
    assert run_daemon_in_thread(d) == 0
    assert pipelines[0].steps == 4
    assert d.stats.counter("updates", machine="ef3") == 4
    # analysis took 0.6 s per update at a 0.2 s interval: updates were skipped, and counted
    assert d.stats.counter("updates_skipped") >= 4
    # ... while capture went on reading: the source never went silent long enough to count as stalled
    assert d.stats.counter("source_stalls") == 0
    assert d.stats.counter("samples_captured") > 0
