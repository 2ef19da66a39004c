"""Sensor faults in the volts domain: unplugged cable, clipping, dropouts, bias step.

The bias step is checked against scipy.signal as the reference implementation: a DC step through the
first-order high-pass of an AC-coupled input (scipy.signal.bilinear of s / (s + w_c), run by
scipy.signal.lfilter) is the transient the input shows; a DC-coupled input keeps the shift.
"""

from __future__ import annotations

import numpy as np
import pytest

from .helpers import renderer_for

FS = 51200.0
DAY = 86400.0
HEALTHY = {"unbalance_mm_s": 1.0, "misalignment_mm_s": 0.3, "blade_pass_mm_s": 0.0, "noise_m_s2": 0.3,
           "speed_drift_pct": 0.2}
G_N = 9.80665  # m/s^2 (3rd CGPM 1901, references.md section 5)


def _renderer(tmp_path, fault: str, value=None, chain=None, **sensor):
    ch = {"start_day": 0.5, "end_day": 0.6, "component": "sensor", "fault": fault}
    if value is not None:
        ch["value"] = value
    s = {"channel": 0, "sensitivity_mv_per_g": 100.0, **sensor}
    return renderer_for(tmp_path, config_kwargs={"points": [{"id": "p1", "bearing": "b1", "sensor": s}]},
                        healthy=HEALTHY, changes=[ch], chain=chain)


DC_COUPLED = {"ac_coupling_hz": 0.0}


def test_volts_are_the_chains_acceleration_times_sensitivity(tmp_path):
    r = _renderer(tmp_path, "disconnected")
    a = r.snapshot_accel(3600.0, 1.0, FS, through_chain=True)["p1"]
    v = r.snapshot(3600.0, 1.0, FS)["p1"]
    # 100 mV/g -> 0.1 / 9.80665 V per m/s^2; the rest is the 20 uV interface floor
    assert np.std(v - a * 0.1 / G_N) == pytest.approx(2e-5, rel=0.05)


def test_disconnected_reads_the_floor(tmp_path):
    r = _renderer(tmp_path, "disconnected")
    v = r.snapshot(0.55 * DAY, 2.0, FS)["p1"]
    assert np.sqrt(np.mean(v ** 2)) == pytest.approx(2e-5, rel=0.05)
    healthy = r.snapshot(0.45 * DAY, 2.0, FS)["p1"]
    assert np.sqrt(np.mean(healthy ** 2)) > 100 * 2e-5
    assert r.severities(0.55 * DAY)["p1"]["sensor:disconnected"] == 0.0


def test_clipping_at_the_input_range(tmp_path):
    r = _renderer(tmp_path, "clipping", 300.0, input_range_v=0.5)
    v = r.snapshot(0.55 * DAY, 2.0, FS)["p1"]
    assert np.max(np.abs(v)) == 0.5
    clipped = np.count_nonzero(np.abs(v) == 0.5) / len(v)
    assert 0.05 < clipped < 0.95
    before = r.snapshot(0.45 * DAY, 2.0, FS)["p1"]
    assert np.max(np.abs(before)) < 0.1


def test_bias_step_on_a_dc_coupled_input_moves_the_mean(tmp_path):
    r = _renderer(tmp_path, "bias_step", 0.08, chain=DC_COUPLED)
    assert np.mean(r.snapshot(0.55 * DAY, 2.0, FS)["p1"]) == pytest.approx(0.08, abs=2e-4)
    assert abs(np.mean(r.snapshot(0.7 * DAY, 2.0, FS)["p1"])) < 2e-4  # repaired at day 0.6


@pytest.mark.parametrize("corner_hz", [0.5, 3.0])
def test_bias_step_on_an_ac_coupled_input_is_a_decaying_transient(tmp_path, corner_hz):
    from scipy import signal

    step_s = 0.5 * DAY
    faulty = _renderer(tmp_path, "bias_step", 0.08, chain={"ac_coupling_hz": corner_hz})
    (tmp_path / "clean").mkdir()
    clean = renderer_for(tmp_path / "clean", healthy=HEALTHY, chain={"ac_coupling_hz": corner_hz},
                         config_kwargs={"points": [{"id": "p1", "bearing": "b1",
                                                    "sensor": {"channel": 0, "sensitivity_mv_per_g": 100.0}}]})
    t0 = step_s - 0.5
    seen = faulty.snapshot(t0, 6.0, FS)["p1"] - clean.snapshot(t0, 6.0, FS)["p1"]
    # reference: the DC step of the sensor's output through the input's first-order high-pass
    wc = 2 * np.pi * corner_hz
    b, a = signal.bilinear([1.0, 0.0], [1.0, wc], fs=FS)
    step = np.where(np.arange(seen.size) >= int(0.5 * FS), 0.08, 0.0)
    expected = signal.lfilter(b, a, step)
    assert np.max(np.abs(seen - expected)) < 1e-3 * 0.08
    assert np.max(seen) == pytest.approx(0.08, rel=1e-3)
    # a few time constants later the input shows nothing of the (lasting) shift
    assert abs(np.mean(faulty.snapshot(0.55 * DAY, 2.0, FS)["p1"])) < 2e-4
    # the return of the bias at the fault's end is the same transient, negative
    back = faulty.snapshot(0.6 * DAY, 1.0, FS)["p1"] - clean.snapshot(0.6 * DAY, 1.0, FS)["p1"]
    assert back[0] == pytest.approx(-0.08, rel=1e-3)


def test_dropouts_are_runs_of_zeros(tmp_path):
    r = _renderer(tmp_path, "dropouts", 0.05)
    v = r.snapshot(0.55 * DAY, 20.0, FS)["p1"]
    zero = v == 0.0
    assert 0.02 < np.mean(zero) < 0.08
    edges = np.flatnonzero(np.diff(zero.astype(int)))
    run_lengths = np.diff(edges)[::2] if zero[edges[0] + 1] else np.diff(edges)[1::2]
    assert np.all(run_lengths >= 0.002 * FS - 1)
    assert np.mean(run_lengths <= 0.020 * FS + 1) > 0.9  # longer ones are overlapping runs merged
    assert np.count_nonzero(r.snapshot(0.45 * DAY, 2.0, FS)["p1"] == 0.0) == 0


def test_fault_edges_within_one_snapshot(tmp_path):
    # a fault starting mid-block applies from its first sample on
    r = _renderer(tmp_path, "bias_step", 0.05, chain=DC_COUPLED)
    start = 0.5 * DAY
    v = r.snapshot(start - 1.0, 2.0, FS)["p1"]
    assert abs(np.mean(v[: int(FS)])) < 1e-3
    assert np.mean(v[int(FS):]) == pytest.approx(0.05, abs=1e-3)


def test_a_fault_active_at_the_end_holds_beyond_it(tmp_path):
    ch = {"start_day": 1.5, "end_day": 9.0, "component": "sensor", "fault": "disconnected"}
    r = renderer_for(tmp_path, healthy=HEALTHY, changes=[ch], duration_days=2.0)
    v = r.snapshot(20 * DAY, 1.0, FS)["p1"]
    assert np.sqrt(np.mean(v ** 2)) == pytest.approx(2e-5, rel=0.05)
