"""Properties of level tracking: no chatter inside the deadband, exact on-delay, latching."""

from __future__ import annotations

from hypothesis import given, settings
from hypothesis import strategies as st

from rotorwatch.alarms.levels import LevelTracker, effective_levels
from rotorwatch.settings.models import Levels

margins = st.floats(min_value=1.0, max_value=50.0)
delays = st.integers(min_value=1, max_value=8)
level_values = st.floats(min_value=0.01, max_value=1000.0)


@settings(max_examples=200, deadline=None)
@given(level=level_values, margin=margins, delay=delays, data=st.data())
def test_no_chatter_inside_the_deadband_from_normal(level, margin, delay, data):
    lv = Levels(warning=level, clear_margin_pct=margin, on_delay_updates=delay)
    eff = effective_levels(lv, None)
    tr = LevelTracker("v", "u", lv)
    clear = level * (1 - margin / 100)
    values = data.draw(st.lists(st.floats(min_value=clear, max_value=level, exclude_max=True), max_size=60))
    assert all(tr.update(v, eff) is None for v in values)
    assert tr.state == "normal"


@settings(max_examples=200, deadline=None)
@given(level=level_values, margin=margins, delay=delays, data=st.data())
def test_no_chatter_inside_the_deadband_once_raised(level, margin, delay, data):
    lv = Levels(warning=level, clear_margin_pct=margin, on_delay_updates=delay)
    eff = effective_levels(lv, None)
    tr = LevelTracker("v", "u", lv)
    for _ in range(delay):
        tr.update(level * 1.5, eff)
    assert tr.state == "warning"
    clear = level * (1 - margin / 100)
    values = data.draw(st.lists(st.floats(min_value=clear, max_value=level * 1.4), max_size=60))
    assert all(tr.update(v, eff) is None for v in values)
    assert tr.state == "warning"


@settings(max_examples=300, deadline=None)
@given(delay=delays, above=st.lists(st.booleans(), min_size=1, max_size=80))
def test_on_delay_is_exact(delay, above):
    # Raised at the first update that closes a run of `delay` consecutive values at or above the level.
    lv = Levels(warning=1.0, on_delay_updates=delay, clear_margin_pct=10)
    eff = effective_levels(lv, None)
    tr = LevelTracker("v", "u", lv)
    run = 0
    expected = None
    for i, a in enumerate(above):
        run = run + 1 if a else 0
        if run >= delay:
            expected = i
            break
    raised_at = None
    for i, a in enumerate(above):
        t = tr.update(1.0 if a else 0.5, eff)  # 0.5 is below the clear level 0.9 and the level 1.0
        if t is not None:
            raised_at = i
            break
    assert raised_at == expected


@settings(max_examples=150, deadline=None)
@given(values=st.lists(st.floats(min_value=0.0, max_value=10.0), max_size=60))
def test_latched_alarm_never_clears_without_acknowledge(values):
    lv = Levels(warning=1.0, alarm=2.0, on_delay_updates=1, latching=True)
    eff = effective_levels(lv, None)
    tr = LevelTracker("v", "u", lv)
    tr.update(3.0, eff)
    for v in values:
        tr.update(v, eff)
        assert tr.state == "alarm"
    tr.acknowledge()
    tr.update(0.0, eff)
    assert tr.state == "normal"


@settings(max_examples=200, deadline=None)
@given(values=st.lists(st.floats(min_value=0.0, max_value=5.0), min_size=1, max_size=100), delay=delays)
def test_transitions_chain_and_match_the_state(values, delay):
    # Every reported transition starts where the previous one ended, and the state never jumps without one.
    lv = Levels(warning=1.0, alarm=2.0, on_delay_updates=delay)
    eff = effective_levels(lv, None)
    tr = LevelTracker("v", "u", lv)
    state = "normal"
    for v in values:
        t = tr.update(v, eff)
        if t is None:
            assert tr.state == state
        else:
            assert t.old_state == state and t.new_state == tr.state != state
            state = t.new_state
