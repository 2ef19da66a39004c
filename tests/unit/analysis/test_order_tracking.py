"""Speed changes within a window: order tracking with a tach, and the change measured without one.

The signals are invented: shaft harmonics and outer-race impacts placed on the shaft's angle while the
speed ramps linearly, so a line at a fixed order sweeps a range of frequencies. The check values are the
generator's own: the true mean speed and ramp, the true 1x amplitude (|v| = |a| / (2 pi f), formula), and
the same signal's finding strength at a steady speed. The bearing is the university rig's drive-end
geometry (references.md section 2: BPFO 3.58478 x shaft speed, computed from the published geometry).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from rotorwatch.analysis.point import PointAnalyzer
from rotorwatch.kinematics import multiples_from_geometry

from .helpers import machine

FS = 51200.0
SECONDS = 4.0
N = int(SECONDS * FS)
T = np.arange(N) / FS
BPFO = multiples_from_geometry(9, 0.3126, 1.537).bpfo
RING_S = np.arange(int(0.01 * FS)) / FS
RING = np.exp(-0.05 * 2 * np.pi * 3000 * RING_S) * np.sin(2 * np.pi * 3000 * RING_S)  # 3 kHz resonance


def _turns(rpm_mean: float, change_pct: float) -> np.ndarray:
    f0 = rpm_mean / 60.0 * (1 - change_pct / 200.0)
    f1 = rpm_mean / 60.0 * (1 + change_pct / 200.0)
    return f0 * T + 0.5 * (f1 - f0) / SECONDS * T**2


def _ramp(rpm_mean, change_pct, seed, *, impacts=4.0, shaft=(0.0,), noise=0.6):
    """Signal, tach pulse times (one per turn) and the true mean speed."""
    rng = np.random.default_rng(seed)
    turns = _turns(rpm_mean, change_pct)
    x = rng.normal(0, noise, N)
    for k, a in enumerate(shaft, start=1):
        x += a * np.sin(2 * np.pi * k * turns + k)
    if impacts:
        k = np.arange(1, int(turns[-1] * BPFO))
        at = np.interp(k / BPFO, turns, T) * FS + rng.normal(0, 0.003 * FS / (BPFO * rpm_mean / 60), k.size)
        at = at.astype(int)
        pulses = np.zeros(N)
        pulses[at[(at > 0) & (at < N)]] = impacts
        x += np.convolve(pulses, RING)[:N]
    pulse_times = np.interp(np.arange(np.ceil(turns[0]), turns[-1]), turns, T)
    return x, pulse_times, 60.0 * turns[-1] / SECONDS


def _analyzer(mode, rpm, bands=None, **extra):
    m = machine(rpm=rpm, mode=mode, analysis={"fmax_hz": 10000}, envelope={"band_hz": [2000.0, 5000.0]},
                bands=bands, **extra)
    return PointAnalyzer(m, m.points[0], FS)


def _bpfo(result) -> float:
    return max((f.strength for f in result.findings if f.name == "BPFO"), default=0.0)


def test_shaft_angle_from_pulses_gives_the_mean_speed_and_the_ramp():
    from rotorwatch.analysis import ordertrack

    _, pulses, mean_rpm = _ramp(1500.0, 6.0, 0, impacts=0)
    angle = ordertrack.from_pulses(pulses, 1, SECONDS)
    assert 60 * angle.mean_hz == pytest.approx(mean_rpm, rel=1e-4)
    assert angle.change_pct == pytest.approx(6.0, abs=0.05)
    assert ordertrack.from_pulses(pulses[:2], 1, SECONDS) is None  # two pulses: no angle to interpolate


@pytest.mark.parametrize("seed", range(3))
def test_tach_order_tracking_keeps_a_bpfo_finding_under_a_speed_ramp(seed):
    # an 8 % ramp within the 4 s window: read at the mean speed the BPFO lines smear and the finding's
    # strength falls to about half its steady value (measured 87-98 against 176-210); resampled to shaft
    # angle from the tach pulses it stays within 25 % of the steady value
    a = _analyzer("tach", 1500.0)
    steady, _, rpm_s = _ramp(1500.0, 0.0, seed)
    ramped, pulses, rpm_r = _ramp(1500.0, 8.0, seed)
    ref = _bpfo(a.analyze(steady, rpm=rpm_s))
    smeared = _bpfo(a.analyze(ramped, rpm=rpm_r))
    tracked_result = a.analyze(ramped, rpm=rpm_r, tach_pulses_s=pulses)
    assert smeared < 0.6 * ref  # the failure the tracking removes, kept visible
    assert tracked_result.order_tracked and not tracked_result.speed_unsteady
    assert tracked_result.speed_change_pct == pytest.approx(8.0, abs=0.1)
    assert _bpfo(tracked_result) == pytest.approx(ref, rel=0.25)
    assert tracked_result.rpm == pytest.approx(rpm_r, rel=1e-4)


def test_tach_order_tracking_keeps_a_blade_pass_band_whole():
    # 2.0 mm/s at blade pass (11 blades, 275 Hz) while the speed ramps 8 %: the line sweeps +/- 11 Hz,
    # past the band's +/- 1.5 % (4.1 Hz); resampled to shaft angle it stays on 11 orders
    bands = [{"name": "bp", "quantity": "velocity", "feature": "blade_pass", "harmonics": 1, "tolerance_pct": 1.5}]
    a = _analyzer("tach", 1500.0, bands, blades=11)
    amp = 2.0 / 1000 * 2 * np.pi * 275.0 * np.sqrt(2)  # 2.0 mm/s RMS at 275 Hz as acceleration
    x, pulses, rpm = _ramp(1500.0, 8.0, 1, impacts=0, shaft=(0.0,) * 10 + (amp,), noise=0.01)
    assert a.analyze(x, rpm=rpm).bands["bp"] < 1.9  # partly smeared out of the band (8 % low)
    assert a.analyze(x, rpm=rpm, tach_pulses_s=pulses).bands["bp"] == pytest.approx(2.0, rel=0.03)


def test_steady_tach_window_is_not_resampled():
    a = _analyzer("tach", 1500.0)
    x, pulses, rpm = _ramp(1500.0, 0.0, 2)
    r = a.analyze(x, rpm=rpm, tach_pulses_s=pulses)
    assert not r.order_tracked and abs(r.speed_change_pct) < 0.1  # ordertrack.MIN_TRACKED_CHANGE_PCT


SHAFT = (1.0, 0.5, 0.3, 0.2, 0.1)  # m/s^2 at 1x..5x: a clear harmonic series for the speed estimate


@pytest.mark.parametrize("change_pct", [0.0, 1.0, 3.0, 8.0])
def test_estimated_speed_reports_the_change_within_the_window(change_pct):
    a = _analyzer("estimated", 1500.0)
    x, _, rpm = _ramp(1500.0, change_pct, 5, impacts=0, shaft=SHAFT, noise=0.3)
    r = a.analyze(x)
    assert r.rpm_source == "estimated"
    assert r.speed_change_pct == pytest.approx(change_pct, abs=0.15)
    assert r.speed_unsteady == (change_pct > 2.0)  # speed.max_change_pct, default 2 %


@pytest.mark.parametrize("seed", range(2))
def test_estimated_ramp_is_tracked_and_the_finding_kept(seed):
    a = _analyzer("estimated", 1500.0)
    steady, _, _ = _ramp(1500.0, 0.0, seed, shaft=SHAFT)
    ramped, _, _ = _ramp(1500.0, 8.0, seed, shaft=SHAFT)
    ref = _bpfo(a.analyze(steady))
    r = a.analyze(ramped)
    assert r.order_tracked and r.speed_unsteady
    assert _bpfo(r) == pytest.approx(ref, rel=0.25)


def test_max_change_pct_is_configurable():
    m = machine(rpm=1500.0, mode="estimated", analysis={"fmax_hz": 10000})
    m = m.model_validate({**m.model_dump(), "speed": {**m.speed.model_dump(), "max_change_pct": 5.0}})
    x, _, _ = _ramp(1500.0, 3.0, 5, impacts=0, shaft=SHAFT, noise=0.3)
    r = PointAnalyzer(m, m.points[0], FS).analyze(x)
    assert r.speed_change_pct == pytest.approx(3.0, abs=0.15) and not r.speed_unsteady


def test_replay_gives_a_tach_machine_its_pulse_times(tmp_path):
    # a simulated tach machine speeding up ~1.3 %/s: replay's frames carry the pulses the tach would give
    # (rising at whole turns of the simulated shaft, simulators/render.py) and the analysis tracks the ramp
    from rotorwatch.pipeline import MachinePipeline
    from rotorwatch.replay import scenario_frames
    from rotorwatch.settings.loading import load_config
    from rotorwatch.simulators.render import ScenarioRenderer
    from rotorwatch.simulators.scenario import load_scenario

    repo = Path(__file__).resolve().parents[3]
    text = (repo / "config" / "demo-fan.toml").read_text()
    text = text.replace('mode = "fixed"       # fixed | estimated | tach | mqtt', 'mode = "tach"\n  tach_channel = 2')
    text = text.replace("channels = 2", "channels = 3").replace('scenario = "scenarios/demo-outer-race.toml"', "")
    assert 'mode = "tach"' in text
    (tmp_path / "fan.toml").write_text(text)
    (tmp_path / "ramp.toml").write_text(
        '[scenario]\nname = "speeding up"\nconfig = "fan.toml"\nduration_days = 0.001\ncadence_s = 20.0\nseed = 4\n'
        "[healthy]\nspeed_drift_pct = 0.0\n"
        '[[change]]\nstart_day = 0.0\nend_day = 0.000694444\ncomponent = "speed_rpm"\nto = 2371.2\n')
    renderer = ScenarioRenderer(load_scenario(tmp_path / "ramp.toml"))
    cfg = load_config(tmp_path / "fan.toml")
    machine = cfg.machines[0]
    pipeline = MachinePipeline(cfg, machine, tmp_path / "state")
    window_s, fs = machine.analysis.window_s, cfg.acquisition.sample_rate_hz
    frames = list(scenario_frames(renderer, fs, window_s))
    assert len(frames) >= 3
    for f in frames[1:3]:
        turns = renderer.speed.turns(f.elapsed_s + f.tach_pulses_s)
        assert np.max(np.abs(turns - np.round(turns))) < 1e-6
        update = pipeline.step(f.elapsed_s, f.blocks_v, rpm=f.rpm, tach_pulses_s=f.tach_pulses_s)
        truth = renderer.true_rpm(np.array([f.elapsed_s, f.elapsed_s + window_s]))
        r = update.points["de-h"].result
        assert r.order_tracked
        assert r.speed_change_pct == pytest.approx(100 * (truth[1] - truth[0]) / truth.mean(), abs=0.1)
    pipeline.close()
