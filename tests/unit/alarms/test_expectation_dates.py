"""Expectations on dates and on time before the end (histories replay real dates)."""

from __future__ import annotations

from datetime import UTC, datetime

import pytest

from rotorwatch.errors import ConfigError
from rotorwatch.expectations import DAY_S, HOUR_S, Sample, evaluate, parse

from .helpers import machine

M = machine()
START = datetime(2004, 2, 12, 10, 0, tzinfo=UTC).timestamp()


def at(hours: float, state: str) -> Sample:
    return Sample(hours * HOUR_S, state, {"p1": state, "p2": "normal"}, {("p1", "outer"): (state, 0.3, "m/s^2")}, {})


# normal until 2004-02-15 10:00, warning from 2004-02-17 10:00 (day 5), alarm from 2004-02-19 10:00 (day 7),
# last update 2004-02-20 10:00 (day 8)
LIFE = [at(h, s) for h, s in ((0, "learning"), (24, "normal"), (72, "normal"), (120, "warning"), (168, "alarm"),
                              (192, "alarm"))]


def check(text: str) -> bool:
    return evaluate(parse(text, M, start_unix_s=START), LIFE).passed


@pytest.mark.parametrize("text, ok", [
    ("outer on p1 reaches alarm before 2004-02-19 12:00", True),
    ("outer on p1 reaches alarm before 2004-02-19 06:00", False),  # 10:00 is after 06:00
    ("outer on p1 reaches alarm before 2004-02-19T10:00Z", False),  # "before" excludes the instant itself
    ("outer on p1 reaches warning after 2004-02-16", True),
    ("outer on p1 reaches warning between 2004-02-17 and 2004-02-18", True),
    ("machine never warning before 2004-02-17 09:59", True),
    ("machine never warning before 2004-02-17 10:00:01", False),
    ("outer on p1 reaches warning at least 48 h before the end", True),  # 72 h before the end
    ("outer on p1 reaches warning at least 73 h before the end", False),
    ("outer on p1 reaches alarm at least 1d before the end", True),  # exactly 24 h: inclusive
    ("outer on p1 reaches alarm at least 2 days before the end", False),
    ("outer on p1 reaches alarm before day 8", True),  # days from the start still work
])
def test_dates_and_lead(text, ok):
    assert check(text) is ok, evaluate(parse(text, M, start_unix_s=START), LIFE).detail


def test_a_date_without_a_start_is_one_line():
    with pytest.raises(ConfigError) as e:
        parse("machine never alarm before 2004-02-19 06:00", M)
    assert len(str(e.value).splitlines()) == 1 and "start date" in str(e.value)


@pytest.mark.parametrize("text", ["machine never alarm before 2004-02-31", "outer on p1 reaches alarm at least soon before the end",
                                  "outer on p1 reaches alarm at least 4 h before the start"])
def test_bad_dates_and_leads_are_one_line(text):
    with pytest.raises(ConfigError) as e:
        parse(text, M, start_unix_s=START)
    assert len(str(e.value).splitlines()) == 1


def test_before_the_end_resolves_against_the_last_update():
    exp = parse("outer on p1 reaches warning at least 2 d before the end", M)
    assert exp.window.resolve(8 * DAY_S).end_s == pytest.approx(6 * DAY_S)
