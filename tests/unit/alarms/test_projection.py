"""Time to a level (rotorwatch.alarms.projection): the numpy Theil-Sen fit against scipy.stats.theilslopes as
the independent reference (slope, intercept and Sen's interval, ties included), the projection on trends
whose crossing is known, the thinned window, the monitor's per-value projections, and the daemon's import
path free of scipy.stats."""

from __future__ import annotations

import subprocess
import sys

import numpy as np
import pytest
import scipy.stats

from rotorwatch.alarms.projection import DAY_S, TrendWindow, describe, project, theil_sen
from rotorwatch.settings.models import ProjectionSettings

SETTINGS = ProjectionSettings()


@pytest.mark.parametrize("n", [3, 7, 24, 60, 150])
@pytest.mark.parametrize("confidence", [0.9, 0.95, 0.99])
def test_theil_sen_is_scipys(n, confidence):
    rng = np.random.default_rng(n)
    x = np.sort(rng.uniform(0, 30, n))
    y = 0.02 * x + rng.standard_t(3, n)  # heavy tails: what the robust fit is for
    ours = theil_sen(y, x, confidence)
    ref = scipy.stats.theilslopes(y, x, confidence)  # the reference implementation
    assert ours.slope == pytest.approx(ref.slope, rel=1e-12)
    assert ours.intercept == pytest.approx(ref.intercept, rel=1e-12, abs=1e-12)
    assert ours.low_slope == pytest.approx(ref.low_slope, rel=1e-12)
    assert ours.high_slope == pytest.approx(ref.high_slope, rel=1e-12)


def test_theil_sen_with_ties_is_scipys():
    rng = np.random.default_rng(3)
    x = np.repeat(np.arange(12.0), 3)  # tied times
    y = np.round(0.5 * x + rng.normal(0, 2, x.size))  # tied values
    ours, ref = theil_sen(y, x), scipy.stats.theilslopes(y, x)
    assert (ours.slope, ours.low_slope, ours.high_slope) == pytest.approx((ref.slope, ref.low_slope, ref.high_slope))


def test_theil_sen_needs_two_times():
    with pytest.raises(ValueError, match="all x are equal"):
        theil_sen([1.0, 2.0], [5.0, 5.0])


def _window(times_s, values, settings=SETTINGS) -> TrendWindow:
    w = TrendWindow(settings)
    for t, v in zip(times_s, values):
        w.add(float(t), float(v))
    return w


def test_a_noisy_rise_is_projected_with_an_interval_around_the_true_crossing():
    # a value rising 0.5 per day from 1.0 with noise, hourly; it reaches 10 at day 18 and 20 at day 38
    hits = 0
    for seed in range(40):
        rng = np.random.default_rng(seed)
        t = np.arange(0, 24) * 3600.0
        v = 1.0 + 0.5 * t / DAY_S + rng.normal(0, 0.05, t.size)
        p = project(_window(t, v), SETTINGS, t[-1], {"warning": 10.0, "alarm": 20.0})
        assert p.status == "rising" and p.points == 24
        w, a = p.eta("warning"), p.eta("alarm")
        assert w.status == a.status == "rising" and w.earliest_s <= w.time_s <= w.latest_s < a.latest_s
        hits += w.earliest_s <= 18 * DAY_S <= w.latest_s and a.earliest_s <= 38 * DAY_S <= a.latest_s
    assert hits >= 36  # a 95 % interval: at least 90 % of 40 trends (the expected miss count is about 2)


def test_flat_noise_is_not_rising():
    rising = 0
    for seed in range(100):
        v = 2.0 + np.random.default_rng(seed).normal(0, 0.1, 24)
        p = project(_window(np.arange(24) * 3600.0, v), SETTINGS, 23 * 3600.0, {"warning": 5.0, "alarm": 8.0})
        rising += p.status == "rising"
        if p.status == "not_rising":
            assert [e.status for e in p.levels] == ["not_rising", "not_rising"]
    assert rising <= 8  # Sen's 95 % interval excludes 0 on one side in about 2.5 % of flat trends


def test_a_level_below_the_trend_is_reached_and_a_short_window_too_few():
    t = np.arange(24) * 3600.0
    p = project(_window(t, 3.0 + t / DAY_S), SETTINGS, t[-1], {"warning": 2.0, "alarm": None})
    assert [(e.level, e.status) for e in p.levels] == [("warning", "reached")]
    assert project(_window(t[:5], t[:5]), SETTINGS, t[4], {"warning": 1.0}).status == "too_few"
    assert "too few" in describe(project(_window(t[:5], t[:5]), SETTINGS, t[4], {"warning": 1.0}))


def test_the_window_is_thinned_and_keeps_its_span():
    s = ProjectionSettings(window_hours=24, max_points=48)
    w = _window(np.arange(0, 3 * 86400, 60.0), np.ones(3 * 1440), s)  # three days, one a minute
    times = [t for t, _ in w.samples]
    assert len(times) <= 48 + 2 and times[-1] - times[0] <= 86400 and times[-1] == 3 * 86400 - 60
    assert min(np.diff(times)[:-1]) >= 86400 / 48 - 60  # thinned to the spacing, within an update (the newest may be closer)


def test_the_monitor_projects_values_with_levels(tmp_path):
    from rotorwatch.alarms.monitor import MachineMonitor
    from rotorwatch.alarms.records import SensorHealth

    from .helpers import machine, result

    mon = MachineMonitor(machine(), tmp_path)
    ok = {"p1": SensorHealth(True), "p2": SensorHealth(True)}
    for i in range(30):
        t = 1.7e9 + i * 3600.0
        last = mon.update(t, {"p1": result("p1", t, overall=1.0 + 0.05 * i), "p2": result("p2", t)}, ok)
    v = last.points["p1"].values["overall"]
    assert v.projection is not None and v.projection.status == "rising"
    assert v.projection.slope_per_day == pytest.approx(1.2, rel=1e-6)  # 0.05 mm/s an hour
    # 2.45 mm/s now at 1.2 mm/s a day: the 2.8 mm/s warning in 0.29 d, the 4.5 mm/s alarm in 1.7 d
    assert (v.projection.eta("warning").time_s - t) / DAY_S == pytest.approx(0.35 / 1.2, rel=1e-6)
    assert (v.projection.eta("alarm").time_s - t) / DAY_S == pytest.approx(2.05 / 1.2, rel=1e-6)
    assert last.points["p2"].values["overall"].projection.status == "not_rising"


def test_the_daemon_import_path_loads_no_scipy_stats():
    code = ("import sys, rotorwatch.service.daemon, rotorwatch.pipeline, rotorwatch.alarms.projection; "
            "print(sorted(m for m in sys.modules if m.startswith('scipy.stats')))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120, check=True)
    assert out.stdout.strip() == "[]"
