"""The replay expectation grammar: parsing, one-line errors, and checking against update samples."""

from __future__ import annotations

import pytest

from rotorwatch.errors import ConfigError
from rotorwatch.expectations import DAY_S, Sample, evaluate, parse

from .helpers import machine

M = machine()


def samples(states_by_day: list[tuple[float, str, str, str, str]]) -> list[Sample]:
    """(day, machine state, p1 state, outer state on p1, zone on p1) -> samples."""
    out = []
    for d, ms, ps, vs, zone in states_by_day:
        out.append(Sample(d * DAY_S, ms, {"p1": ps, "p2": "normal"}, {("p1", "outer"): (vs, 0.3, "m/s^2")}, {"p1": zone}))
    return out


HISTORY = samples([
    (0, "learning", "learning", "learning", "A"),
    (5, "normal", "normal", "normal", "A"),
    (10, "warning", "warning", "warning", "A"),
    (12, "sensor_fault", "sensor_fault", "suppressed", "A"),
    (15, "alarm", "alarm", "alarm", "B"),
    (20, "alarm", "alarm", "alarm", "C"),
])


def check(text: str) -> bool:
    return evaluate(parse(text, M), HISTORY).passed


@pytest.mark.parametrize("text, ok", [
    ("outer on p1 reaches alarm between day 10 and day 20", True),
    ("outer on p1 reaches alarm between day 10 and 14", False),
    ("outer on p1 reaches warning before day 11", True),  # warning at day 10
    ("outer on p1 reaches alarm before day 3", False),
    ("no warning before day 9", True),
    ("no warning before day 11", False),
    ("no alarm", False),
    ("machine never alarm before day 14", True),
    ("point p1 is sensor_fault between day 12 and day 12.5", True),
    ("point p1 is sensor_fault between day 10 and day 12.5", False),
    ("point p1 reaches sensor_fault", True),
    ("overall on p1 stays below warning", True),  # no overall states in HISTORY: never warning
    ("outer on p1 stays below alarm before day 15", True),
    ("outer on p1 stays below warning", False),
    ("zone on p1 stays below C before day 20", True),
    ("zone on p1 reaches zone C", True),
    ("zone on p1 reaches D", False),
    ("machine ends alarm", True),
    ("machine ends in normal", False),
    ("outer on p1 reaches warning before zone on p1 reaches C", True),
    ("zone on p1 reaches B before outer on p1 reaches warning", False),
    ("point p2 never sensor_fault", True),
    ("machine reaches alarm after day 16", False),  # entered at day 15 and held: not reached after day 16
    ("machine reaches alarm after day 14", True),
    ("outer on p1 reaches warning between day 11 and day 20", True),  # entered again at 15 after the fault
    ("outer on p1 reaches warning between day 11 and day 11.5", False),  # no entry inside
    ("machine reaches normal after hour 121", False),  # after day 5.04
])
def test_expectations_against_a_history(text, ok):
    assert check(text) is ok


def test_verdict_details_say_when():
    v = evaluate(parse("outer on p1 reaches alarm between day 10 and day 20", M), HISTORY)
    assert v.detail == "entered alarm at day 15.00 (0.3 m/s^2)"
    v = evaluate(parse("outer on p1 reaches alarm before day 3", M), HISTORY)
    assert "outside the window" in v.detail and "day 15.00" in v.detail


def test_empty_window_fails():
    v = evaluate(parse("machine never alarm after day 40", M), HISTORY)
    assert not v.passed and "no updates inside the window" in v.detail


@pytest.mark.parametrize("text, problem", [
    ("outer on p1 reach alarm", "expected a verb"),
    ("outer on p9 reaches alarm", "unknown point 'p9'"),
    ("inner on p1 reaches alarm", "unknown value 'inner'"),
    ("outer on p1 reaches panic", "state 'panic'"),
    ("outer on p1 reaches alarm between day 10", "ends early"),
    ("outer on p1 reaches alarm between day 20 and day 10", "ends before it starts"),
    ("outer on p1 reaches alarm before day ten", "'ten' is not a number"),
    ("outer on p1 reaches alarm soon", "expected a window"),
    ("zone on p1 reaches E", "zone 'E'"),
    ("machine stays below normal", "'stays below' needs"),
    ("", "empty expectation"),
])
def test_bad_expectations_are_one_line_errors(text, problem):
    with pytest.raises(ConfigError) as e:
        parse(text, M, where="--expect[1]")
    msg = str(e.value)
    assert "\n" not in msg and problem in msg and msg.startswith(f"--expect[1] = {text!r}: ")


def test_verdicts_rank_states_by_meaning():
    """"learning" (not judged yet) and "sensor_fault" (no judgement of the machine) are not worse than
    "normal": a verdict names the most severe condition seen and lists the others beside it."""
    quiet = samples([(0, "learning", "learning", "learning", "A"), (1, "learning", "learning", "learning", "A"),
                     (5, "normal", "normal", "normal", "A"), (6, "sensor_fault", "sensor_fault", "suppressed", "A"),
                     (7, "normal", "normal", "normal", "A")])
    v = evaluate(parse("machine never alarm", M), quiet)
    assert v.passed and v.detail.startswith("worst: normal (also sensor_fault: 1, learning: 2)"), v.detail
    assert "worst: learning" not in v.detail
    v = evaluate(parse("outer on p1 reaches warning", M), quiet)
    assert not v.passed and "worst: normal (also learning: 2, suppressed: 1)" in v.detail, v.detail
    v = evaluate(parse("machine never alarm before day 2", M), quiet)
    assert v.detail.startswith("worst: no judgement (learning: 2)"), v.detail
    v = evaluate(parse("zone on p1 stays below C", M), HISTORY[:5])
    assert "worst: zone B" in v.detail


def _finding_history() -> list[Sample]:
    """looseness reported on p1 from day 10, unbalance on p2 at day 5 only."""
    out = []
    for d, p1, p2 in ((0, set(), set()), (5, set(), {"unbalance"}), (10, {"looseness"}, set()), (15, {"looseness"}, set())):
        out.append(Sample(d * DAY_S, "normal", {"p1": "normal", "p2": "normal"}, {}, {},
                          {"p1": frozenset(p1), "p2": frozenset(p2)}))
    return out


@pytest.mark.parametrize("text, ok", [
    ("finding looseness on p1 appears between day 8 and day 12", True),
    ("finding looseness on p1 appears before day 10", False),
    ("finding looseness appears after day 9", True),  # any point
    ("no finding looseness before day 10", True),
    ("no finding looseness", False),
    ("no finding unbalance on p1", True),
    ("no finding unbalance", False),  # p2 at day 5
    ("finding unbalance on p2 never appears after day 6", True),
    ("finding looseness on p1 is present after day 10", True),
    ("finding looseness on p1 is present after day 5", False),
])
def test_finding_expectations(text, ok):
    assert evaluate(parse(text, M), _finding_history()).passed is ok


@pytest.mark.parametrize("text, words", [
    ("finding wobble on p1 appears", "unknown finding 'wobble'"),
    ("finding looseness on p9 appears", "unknown point 'p9'"),
    ("finding looseness on p1 grows", "expected 'appears', 'never appears' or 'is present'"),
])
def test_bad_finding_expectation_is_one_line(text, words):
    with pytest.raises(ConfigError) as e:
        parse(text, M)
    assert len(e.value.problems) == 1 and words in e.value.problems[0]
