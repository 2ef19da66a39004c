"""The simulated source: a scenario streamed like a device, unpaced for tests, paced for the daemon.

Continuity is checked against the renderer itself (ScenarioRenderer.snapshot, one long render), which
the simulator documents as equal to its chunked stream.
"""

from __future__ import annotations

import time
from pathlib import Path

import numpy as np
import pytest

from rotorwatch.errors import ConfigError, InputError
from rotorwatch.settings.models import Acquisition
from rotorwatch.simulators.render import ScenarioRenderer
from rotorwatch.simulators.scenario import load_scenario
from rotorwatch.sources.base import open_source
from rotorwatch.sources.simulated import SimulatedSource
from rotorwatch.sources.tach import Tachometer

FS = 25600.0
CONFIG = """
[acquisition]
source = "simulated"
scenario = "rig-scenario.toml"
sample_rate_hz = 25600
channels = 3
block_frames = 2560
update_interval_s = 1.0

[[machines]]
id = "rig"
  [machines.speed]
  mode = "tach"
  rpm = 1500
  tach_channel = 2
  [[machines.bearings]]
  id = "b1"
  elements = 9
  element_diameter = 7.94
  pitch_diameter = 39.04
  [[machines.points]]
  id = "p1"
  bearing = "b1"
  sensor = { channel = 0, sensitivity_mv_per_g = 100.0 }
  [[machines.points]]
  id = "p2"
  sensor = { channel = 1, sensitivity_mv_per_m_s2 = 10.2 }
"""
SCENARIO = """
[scenario]
name = "unit-test rig"
config = "rig.toml"
duration_days = 2
seed = 11
[healthy]
speed_drift_pct = 0.0
[[change]]
start_day = 0.5
end_day = 1.5
component = "outer_race"
bearing = "b1"
to = 30.0
"""


@pytest.fixture
def rig(tmp_path: Path):
    (tmp_path / "rig.toml").write_text(CONFIG)
    (tmp_path / "rig-scenario.toml").write_text(SCENARIO)
    return tmp_path


def _acq(**kw) -> Acquisition:
    base = dict(source="simulated", scenario="rig-scenario.toml", sample_rate_hz=FS, channels=3, block_frames=2560,
                update_interval_s=1.0)
    base.update(kw)
    return Acquisition(**base)


def test_unpaced_stream_equals_one_long_render(rig):
    src = open_source(_acq(), rig, pace=False)
    assert isinstance(src, SimulatedSource) and src.clock == "scenario"
    src.start()
    chunks = [src.read(1.0) for _ in range(12)]
    src.close()
    got = np.concatenate([c.frames for c in chunks])
    assert got.dtype == np.float32 and got.shape == (12 * 2560, 3)
    steps = np.diff([c.t0_s for c in chunks])
    np.testing.assert_allclose(steps, 2560 / FS, rtol=0, atol=1e-9)
    assert chunks[0].t0_s == 0.0 and not any(c.gap or c.overflow for c in chunks)
    whole = ScenarioRenderer(load_scenario(rig / "rig-scenario.toml")).snapshot(0.0, got.shape[0] / FS, FS)
    np.testing.assert_allclose(got[:, 0], whole["p1"], rtol=0, atol=1e-6)
    np.testing.assert_allclose(got[:, 1], whole["p2"], rtol=0, atol=1e-6)
    # the tach column carries the shaft pulses: our tach decoder reads the scenario's 1500 r/min
    tach = Tachometer(FS, threshold_v=0.5, window_s=1.2)
    tach.feed(got[:, 2])
    assert tach.rpm() == pytest.approx(1500.0, rel=1e-3)


def test_paced_stream_arrives_at_real_time(rig):
    src = open_source(_acq(block_frames=1280), rig)  # 50 ms blocks
    src.start()
    t_start = time.monotonic()
    n = 0
    while n < int(0.6 * FS):
        chunk = src.read(1.0)
        assert chunk is not None
        n += chunk.n_frames
    elapsed = time.monotonic() - t_start
    src.close()
    assert elapsed >= 0.95 * n / FS, elapsed     # never ahead of the device it imitates (pacing)
    assert src.stats.stalls == 0


def test_speedup_jumps_the_scenario_clock_between_continuous_segments(rig):
    speedup = 3600.0
    src = open_source(_acq(speedup=speedup), rig, pace=False)  # segment = update_interval_s = 1 s = 10 blocks
    assert src.segment_s == pytest.approx(1.0)
    src.start()
    chunks = [src.read(1.0) for _ in range(30)]
    src.close()
    gaps = [i for i, c in enumerate(chunks) if c.gap]
    assert gaps == [10, 20]
    for seg in (chunks[0:10], chunks[10:20], chunks[20:30]):
        np.testing.assert_allclose(np.diff([c.t0_s for c in seg]), 0.1, atol=1e-9)  # unbroken inside
    # between segments the scenario clock advanced speedup x the wall time the segment took
    assert chunks[10].t0_s - chunks[0].t0_s == pytest.approx(speedup * 1.0, rel=1e-6)
    assert chunks[20].t0_s == pytest.approx(2 * speedup, rel=1e-6)
    # a jumped segment is the scenario at that time, not a continuation
    later = ScenarioRenderer(load_scenario(rig / "rig-scenario.toml")).snapshot(chunks[20].t0_s, 0.1, FS)
    np.testing.assert_allclose(chunks[20].frames[:, 0], later["p1"], atol=1e-6)


def test_scenario_end_and_loop(rig):
    near_end = 2 * 86400.0 - 0.25
    src = SimulatedSource(load_scenario(rig / "rig-scenario.toml"), FS, 3, 2560, pace=False, start_s=near_end)
    src.start()
    chunks = []
    while (c := src.read(1.0)) is not None:
        chunks.append(c)
    assert src.ended and sum(c.n_frames for c in chunks) == int(round(0.25 * FS))
    assert src.stats.stalls == 0
    src.close()
    looped = SimulatedSource(load_scenario(rig / "rig-scenario.toml"), FS, 3, 2560, pace=False, start_s=near_end,
                             loop=True)
    looped.start()
    chunks = [looped.read(1.0) for _ in range(6)]
    looped.close()
    assert not looped.ended
    restart = next(i for i, c in enumerate(chunks) if c.gap)
    assert chunks[restart].t0_s == 0.0


def test_channel_mismatch_is_a_one_line_error(rig):
    src = open_source(_acq(channels=2), rig, pace=False)
    with pytest.raises(InputError) as err:
        src.start()
    assert "the tach of machine 'rig' uses input channel 2 but acquisition.channels = 2" in str(err.value)
    assert "\n" not in str(err.value) and not src.running


def test_missing_or_bad_scenario_file(rig):
    with pytest.raises(ConfigError):
        open_source(_acq(scenario="nope.toml"), rig)
    with pytest.raises(ConfigError, match="needs the path"):
        open_source(Acquisition(source="simulated"), rig)
