"""Level tracking: effective levels, on-delay, hysteresis, latching and the reason text."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from rotorwatch.alarms.levels import (
    MAD_FLOOR_FRACTION,
    MAD_TO_SIGMA,
    Baseline,
    EffectiveLevels,
    LevelTracker,
    effective_levels,
)
from rotorwatch.settings.models import Levels


def absolute(warning=1.0, alarm=2.0, **kw) -> EffectiveLevels:
    return effective_levels(Levels(warning=warning, alarm=alarm, **kw), None)


def run(tracker: LevelTracker, values, eff):
    return [tracker.update(v, eff) for v in values]


# ------------------------------------------------------------------------------------- effective levels
def test_ratio_levels_follow_the_baseline_median():
    lv = Levels(relative_warning=2.5, relative_alarm=5.0)
    eff = effective_levels(lv, Baseline(median=0.124, mad=0.01, n=72))
    assert eff.warning.value == pytest.approx(0.31)
    assert eff.alarm.value == pytest.approx(0.62)
    assert eff.warning.origin == "baseline"
    assert "2.5 x learned baseline 0.124" in eff.warning.note


def test_ratio_alert_at_twice_baseline_is_plus_6_db():
    # Randall, Vibration-based Condition Monitoring, Wiley 2011: 2x baseline = +6 dB (from memory);
    # the dB value is plain arithmetic, 20 lg 2 = 6.02 dB.
    eff = effective_levels(Levels(relative_warning=2.0), Baseline(0.5, 0.05, 30))
    assert 20 * np.log10(eff.warning.value / 0.5) == pytest.approx(6.0206, abs=1e-4)


def test_sigma_levels_use_the_robust_sigma():
    lv = Levels(relative_form="sigma", relative_warning=3.0, relative_alarm=6.0)
    eff = effective_levels(lv, Baseline(median=1.0, mad=0.1, n=100))
    assert eff.warning.value == pytest.approx(1.0 + 3.0 * 1.4826 * 0.1)
    assert eff.alarm.value == pytest.approx(1.0 + 6.0 * 1.4826 * 0.1)


def test_mad_to_sigma_matches_the_normal_quantile():
    # The MAD of a normal population is sigma * Phi^-1(3/4): scipy.stats.norm.ppf gives the quantile.
    assert MAD_TO_SIGMA == pytest.approx(1.0 / stats.norm.ppf(0.75), abs=1e-4)


def test_flat_baseline_still_has_width():
    lv = Levels(relative_form="sigma", relative_warning=3.0)
    eff = effective_levels(lv, Baseline(median=2.0, mad=0.0, n=50))
    assert eff.warning.value == pytest.approx(2.0 + 3.0 * 1.4826 * MAD_FLOOR_FRACTION * 2.0)
    assert eff.warning.value > 2.0


def test_lower_effective_level_wins():
    lv = Levels(warning=2.8, alarm=4.5, relative_warning=1.6, relative_alarm=2.5)
    low = effective_levels(lv, Baseline(1.0, 0.05, 72))  # relative 1.6 / 2.5 are lower
    assert (low.warning.value, low.warning.origin) == (pytest.approx(1.6), "baseline")
    assert (low.alarm.value, low.alarm.origin) == (pytest.approx(2.5), "baseline")
    high = effective_levels(lv, Baseline(2.5, 0.05, 72))  # relative 4.0 / 6.25 are higher
    assert (high.warning.value, high.warning.origin) == (2.8, "absolute")
    assert (high.alarm.value, high.alarm.origin) == (4.5, "absolute")


def test_only_absolute_levels_before_a_baseline():
    lv = Levels(warning=2.8, relative_alarm=2.5)
    eff = effective_levels(lv, None)
    assert eff.warning.value == 2.8 and eff.alarm is None


def test_warning_at_or_above_alarm_is_dropped():
    lv = Levels(warning=3.0, relative_alarm=2.0)
    eff = effective_levels(lv, Baseline(1.0, 0.1, 20))  # alarm 2.0 below warning 3.0
    assert eff.warning is None and eff.alarm.value == pytest.approx(2.0)


def test_three_sigma_level_false_alarm_probability():
    # ISA-TR18.2.4-2012 statistical alarms; one-sided P(X > mu + 3 sigma) = 0.135 % for a normal
    # population, here taken from scipy.stats.norm.sf (references.md section 7, confirmed (lib)).
    rng = np.random.default_rng(7)
    mu, sd = 5.0, 0.4
    learned = rng.normal(mu, sd, 200_000)
    med = float(np.median(learned))
    mad = float(np.median(np.abs(learned - med)))
    eff = effective_levels(Levels(relative_form="sigma", relative_warning=3.0), Baseline(med, mad, learned.size))
    p_level = stats.norm.sf(eff.warning.value, loc=mu, scale=sd)
    assert p_level == pytest.approx(stats.norm.sf(3.0), rel=0.08)
    assert stats.norm.sf(3.0) == pytest.approx(0.00135, abs=5e-6)
    fresh = rng.normal(mu, sd, 2_000_000)
    assert np.mean(fresh >= eff.warning.value) == pytest.approx(0.00135, rel=0.1)


# ------------------------------------------------------------------------------------------- on-delay
def test_on_delay_raises_exactly_after_n_consecutive_updates():
    tr = LevelTracker("v", "mm/s", Levels(warning=1.0, alarm=2.0, on_delay_updates=3))
    eff = absolute()
    out = run(tr, [1.5, 1.5], eff)
    assert out == [None, None] and tr.state == "normal"
    t = tr.update(1.5, eff)
    assert t is not None and (t.old_state, t.new_state, t.level, t.level_kind) == ("normal", "warning", 1.0, "warning")


def test_on_delay_restarts_after_a_dip():
    tr = LevelTracker("v", "mm/s", Levels(warning=1.0, alarm=2.0, on_delay_updates=3))
    eff = absolute()
    run(tr, [1.5, 1.5, 0.5, 1.5, 1.5], eff)
    assert tr.state == "normal"
    assert tr.update(1.5, eff).new_state == "warning"


def test_value_on_the_level_counts_as_above():
    tr = LevelTracker("v", "mm/s", Levels(warning=1.0, alarm=2.0, on_delay_updates=1))
    assert tr.update(1.0, absolute()).new_state == "warning"


def test_jump_straight_to_alarm():
    tr = LevelTracker("v", "mm/s", Levels(warning=1.0, alarm=2.0, on_delay_updates=2))
    eff = absolute()
    assert tr.update(5.0, eff) is None
    t = tr.update(5.0, eff)
    assert (t.old_state, t.new_state) == ("normal", "alarm")


# ----------------------------------------------------------------------------------------- hysteresis
def test_clears_only_below_the_clear_level():
    tr = LevelTracker("v", "mm/s", Levels(warning=1.0, alarm=2.0, on_delay_updates=1, clear_margin_pct=10))
    eff = absolute()
    tr.update(1.2, eff)
    assert tr.state == "warning"
    assert tr.update(0.95, eff) is None and tr.state == "warning"
    assert tr.update(0.9, eff) is None and tr.state == "warning"  # 0.9 is the clear level itself
    t = tr.update(0.899, eff)
    assert (t.old_state, t.new_state) == ("warning", "normal")
    assert "below warning clear level 0.9 mm/s" in t.reason


def test_alarm_steps_down_to_warning_then_normal():
    tr = LevelTracker("v", "mm/s", Levels(warning=1.0, alarm=2.0, on_delay_updates=1, clear_margin_pct=10))
    eff = absolute()
    tr.update(2.5, eff)
    assert tr.update(1.5, eff).new_state == "warning"
    assert tr.update(0.5, eff).new_state == "normal"


def test_off_delay_holds_the_level():
    tr = LevelTracker("v", "mm/s", Levels(warning=1.0, on_delay_updates=1), off_delay_updates=3)
    eff = absolute(alarm=None)
    tr.update(1.2, eff)
    assert run(tr, [0.1, 0.1], eff) == [None, None]
    assert tr.update(0.1, eff).new_state == "normal"


# ------------------------------------------------------------------------------------------- latching
def test_latching_alarm_needs_acknowledge():
    tr = LevelTracker("v", "mm/s", Levels(warning=1.0, alarm=2.0, on_delay_updates=1, latching=True))
    eff = absolute(latching=True)
    tr.update(3.0, eff)
    assert tr.state == "alarm"
    assert run(tr, [0.1, 0.1, 0.1], eff) == [None, None, None]
    assert tr.state == "alarm" and tr.latched
    t = tr.acknowledge()
    assert (t.old_state, t.new_state) == ("alarm", "normal") and not tr.latched


def test_acknowledged_active_alarm_clears_by_itself():
    tr = LevelTracker("v", "mm/s", Levels(warning=1.0, alarm=2.0, on_delay_updates=1, latching=True))
    eff = absolute(latching=True)
    tr.update(3.0, eff)
    assert tr.acknowledge() is None and tr.state == "alarm"  # still supported by the value
    assert tr.update(0.1, eff).new_state == "normal"


def test_unlatched_alarm_clears_without_acknowledge():
    tr = LevelTracker("v", "mm/s", Levels(warning=1.0, alarm=2.0, on_delay_updates=1))
    eff = absolute()
    tr.update(3.0, eff)
    assert tr.update(0.1, eff).new_state == "normal"


# --------------------------------------------------------------------------------------------- reason
def test_reason_says_why():
    lv = Levels(relative_warning=2.5, relative_alarm=5.0, on_delay_updates=3)
    tr = LevelTracker("de-outer-race", "m/s^2", lv)
    eff = effective_levels(lv, Baseline(0.124, 0.01, 72))
    run(tr, [0.42, 0.42], eff)
    t = tr.update(0.42, eff)
    assert t.reason == "de-outer-race 0.42 m/s^2 above warning 0.31 m/s^2 (2.5 x learned baseline 0.124) for 3 updates"


def test_no_levels_never_leaves_normal():
    tr = LevelTracker("v", "mm/s", Levels())
    assert run(tr, [1e9] * 10, EffectiveLevels(None, None)) == [None] * 10

