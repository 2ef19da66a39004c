"""The simulator's 1x/2x phase keys and its looseness truncation.

- Phase: a scenario with ``unbalance_phase_deg`` / ``misalignment_phase_deg`` on a tach machine, rendered
  through the measurement chain, read back at the tach-locked angle by the analysis
  (``rotorwatch.analysis.tachphase``, itself checked against scipy in tests/unit/analysis/test_tach_phase.py)
  and, independently, by a least-squares fit of cos/sin at the simulated shaft's angle (numpy.linalg.lstsq
  on the velocity integrated from the housing's acceleration).
- Truncation: a 1x cut on one side at c of its peak keeps 1 - (acos c - c sqrt(1 - c^2))/pi of its
  fundamental, gains every harmonic, and has its mean (-(sqrt(1 - c^2) - c acos c)/pi of the peak) taken
  out (the Fourier series of a one-sided clipped cosine, worked here from its definition; numpy's FFT
  measures it).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from rotorwatch.analysis.point import PointAnalyzer
from rotorwatch.replay import _tach_pulses

from .helpers import QUIET, renderer_for

FS = 25600.0
RPM = 1500.0
TACH = {"mode": "tach", "rpm": RPM, "tach_channel": 1}
POINT = [{"id": "p1", "bearing": "b1", "sensor": {"channel": 0, "sensitivity_mv_per_g": 100.0}}]


def _phase_diff(a: float, b: float) -> float:
    return abs((a - b + 180.0) % 360.0 - 180.0)


@pytest.mark.parametrize("ph1, ph2", [(40.0, 250.0), (300.0, 10.0)])
def test_phase_keys_are_read_back_at_the_tach(tmp_path, ph1, ph2):
    healthy = {**QUIET, "unbalance_mm_s": 3.0, "misalignment_mm_s": 1.2, "noise_m_s2": 0.05,
               "unbalance_phase_deg": ph1, "misalignment_phase_deg": ph2}
    r = renderer_for(tmp_path, config_kwargs={"fs_hz": FS, "speed": TACH, "points": POINT, "channels": 2},
                     healthy=healthy)
    t0, window_s = 3600.0, 4.0
    volts = r.snapshot(t0, window_s, FS)["p1"]
    m = r.machine
    accel = volts / m.points[0].sensor.volts_per_m_s2
    pulses = _tach_pulses(r, t0, window_s)
    got = PointAnalyzer(m, m.points[0], FS).analyze(accel, tach_pulses_s=pulses).order_phase
    (v1, p1), (v2, p2) = got["1x"], got["2x"]
    assert v1 == pytest.approx(3.0, rel=0.03) and v2 == pytest.approx(1.2, rel=0.03)
    # the chain's AC coupling (0.5 Hz) leads 1x at 25 Hz by about 1.1 degrees: 3 degrees allowed
    assert _phase_diff(p1, ph1) < 3.0 and _phase_diff(p2, ph2) < 3.0

    # independent: least squares of cos/sin at the simulated shaft's angle on the housing's velocity
    housing = r.snapshot_accel(t0, window_s, FS)["p1"]
    n = housing.size
    turns = r.speed.turns(t0 + np.arange(n) / FS)
    f = np.fft.rfftfreq(n, 1 / FS)
    spec = np.fft.rfft(housing)
    vel = np.fft.irfft(np.where(f > 2.0, spec / (2j * np.pi * np.where(f > 0, f, 1.0)), 0.0), n) * 1000.0  # mm/s
    cols = [g(2 * np.pi * k * turns) for k in (1, 2) for g in (np.cos, np.sin)]
    a1, b1, a2, b2 = np.linalg.lstsq(np.array(cols).T, vel, rcond=None)[0]
    for (a, b), ph, v in (((a1, b1), ph1, 3.0), ((a2, b2), ph2, 1.2)):
        assert math.hypot(a, b) / math.sqrt(2) == pytest.approx(v, rel=0.02)
        assert _phase_diff(-math.degrees(math.atan2(b, a)) % 360.0, ph) < 1.0  # a cos + b sin = R cos(x - atan2(b, a))


def test_a_phase_key_moves_only_the_phase(tmp_path):
    """Without the key the 1x keeps its seeded random phase; with it, the same size at another phase."""
    (tmp_path / "a").mkdir()
    (tmp_path / "b").mkdir()
    a = renderer_for(tmp_path / "a", config_kwargs={"fs_hz": FS, "rpm": RPM}, healthy={**QUIET, "unbalance_mm_s": 2.0})
    b = renderer_for(tmp_path / "b", config_kwargs={"fs_hz": FS, "rpm": RPM},
                     healthy={**QUIET, "unbalance_mm_s": 2.0, "unbalance_phase_deg": 0.0})
    xa, xb = a.snapshot_accel(0.0, 4.0, FS)["p1"], b.snapshot_accel(0.0, 4.0, FS)["p1"]
    assert np.max(np.abs(xa)) == pytest.approx(np.max(np.abs(xb)), rel=1e-4)  # sampled peaks
    assert not np.allclose(xa, xb)


@pytest.mark.parametrize("depth", [0.3, 0.6])
def test_truncation_cuts_the_1x_into_harmonics(tmp_path, depth):
    healthy = {**QUIET, "unbalance_mm_s": 4.0, "truncation_depth": depth}
    r = renderer_for(tmp_path, config_kwargs={"fs_hz": FS, "rpm": RPM}, healthy=healthy)
    x = r.snapshot_accel(0.0, 4.0, FS)["p1"]  # 100 whole turns at 25 Hz: every order on a bin
    spec = np.abs(np.fft.rfft(x)) * 2 / x.size
    f1 = RPM / 60.0
    amp = {k: spec[int(round(k * f1 * 4.0))] for k in range(1, 8)}
    peak = math.sqrt(2) * 4.0e-3 * 2 * math.pi * f1
    c = 1.0 - depth
    kept = 1 - (math.acos(c) - c * math.sqrt(1 - c * c)) / math.pi  # Fourier series of a one-sided cut
    assert amp[1] == pytest.approx(kept * peak, rel=0.01)
    phi = math.acos(c)
    for k in range(2, 6):  # harmonic k of the cut-off cap (cos - c on |theta| < phi), from the same series
        cap = (math.sin((k - 1) * phi) / (k - 1) + math.sin((k + 1) * phi) / (k + 1) - 2 * c * math.sin(k * phi) / k) / math.pi
        assert amp[k] == pytest.approx(abs(cap) * peak, rel=0.02, abs=1e-4 * peak)
    assert amp[2] > 0.05 * peak  # looseness's series starts strong
    assert abs(np.mean(x)) < 1e-3 * peak  # the cut's mean taken out
    assert np.max(x) - np.min(x) == pytest.approx((1 + c) * peak, rel=1e-4)


def test_truncation_depth_is_checked(tmp_path):
    from rotorwatch.errors import ConfigError

    with pytest.raises(ConfigError, match="0 to 0.9"):
        renderer_for(tmp_path, healthy={**QUIET}, changes=[
            {"start_day": 0.5, "end_day": 1.0, "component": "truncation", "to": 0.95}])
