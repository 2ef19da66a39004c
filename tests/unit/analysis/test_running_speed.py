"""The speed an update uses is decided in one module (rotorwatch.analysis.running_speed): the outside
reading the daemon takes from a tach or an MQTT topic, the speed each point uses, and the machine's."""

from __future__ import annotations

import numpy as np
import pytest

from rotorwatch.analysis.plan import build_plan
from rotorwatch.analysis.running_speed import NO_READING, SpeedReading, machine_speed, outside_reading, resolve
from rotorwatch.analysis.speed import SpeedEstimate
from rotorwatch.errors import InputError

from .helpers import machine


def _plan(mode: str, rpm: float = 1500.0):
    m = machine(mode=mode, rpm=rpm)
    return m, build_plan(m, m.points[0], 25600.0).speed


def _no_estimate(lo, hi):
    raise AssertionError("the estimate must not run")


def test_outside_readings():
    m, _ = _plan("mqtt")
    assert outside_reading(m.speed, mqtt_listening=True, mqtt_rpm=1482.5) == SpeedReading(1482.5, "mqtt")
    # no fresh reading: the nominal speed, said so
    assert outside_reading(m.speed, mqtt_listening=True, mqtt_rpm=None) == SpeedReading(1500.0, "nominal")
    assert outside_reading(m.speed) is NO_READING
    t, _ = _plan("tach")
    pulses = np.arange(25) / 25.0
    r = outside_reading(t.speed, tach=(1500.0, pulses))
    assert (r.rpm, r.source) == (1500.0, "tach") and r.pulses_s is pulses
    assert outside_reading(t.speed, tach=(None, np.array([]))) == SpeedReading(0.0, "tach")  # standing still
    assert outside_reading(t.speed, tach=None) is NO_READING


def test_tach_pulses_win_over_a_given_reading():
    _, sp = _plan("tach")
    # one pulse per turn every 40 ms is 25 rev/s = 1500 r/min (arithmetic)
    used = resolve(sp, SpeedReading(1400.0, None, np.arange(50) * 0.04), 2.0, _no_estimate)
    assert used.rpm == pytest.approx(1500.0) and used.source == "tach" and used.from_tach
    assert used.angle is not None
    # fewer than three pulses give no angle: the given reading stands
    used = resolve(sp, SpeedReading(1400.0, "tach", np.array([0.1, 0.14])), 2.0, _no_estimate)
    assert (used.rpm, used.source, used.from_tach, used.angle) == (1400.0, "tach", False, None)


def test_given_and_configured_speeds():
    _, fixed = _plan("fixed")
    assert resolve(fixed, SpeedReading(1450.0), 2.0, _no_estimate).source == "fixed"
    configured = resolve(fixed, NO_READING, 2.0, _no_estimate)
    assert (configured.rpm, configured.source) == (1500.0, "fixed")
    _, mqtt = _plan("mqtt")
    assert resolve(mqtt, SpeedReading(1450.0), 2.0, _no_estimate).source == "mqtt"
    assert resolve(mqtt, NO_READING, 2.0, _no_estimate).source == "nominal"
    with pytest.raises(InputError, match="must be a finite speed >= 0"):
        resolve(fixed, SpeedReading(float("nan")), 2.0, _no_estimate)


def test_estimated_speed_falls_back_to_nominal_when_unclear():
    _, sp = _plan("estimated")
    seen = []

    def estimate(lo, hi):
        seen.append((lo, hi))
        return SpeedEstimate(rpm=1490.0, clear=len(seen) == 1, harmonics_clear=3, score=1.0)

    first = resolve(sp, NO_READING, 2.0, estimate)
    assert (first.rpm, first.source) == (1490.0, "estimated")
    assert seen[0] == pytest.approx((1350.0, 1650.0))  # the configured search range (helpers: +/- 10 %)
    second = resolve(sp, NO_READING, 2.0, estimate)
    assert (second.rpm, second.source) == (1500.0, "nominal")


def test_machine_speed_is_the_reading_or_the_median_of_the_points():
    assert machine_speed(1480.0, "tach", [(1.0, "x")]) == (1480.0, "tach")
    assert machine_speed(None, "", [(1490.0, "estimated"), (1500.0, "nominal"), (float("nan"), "x"),
                                    (1520.0, "estimated")]) == (1500.0, "estimated")
    assert machine_speed(None, "", []) == (None, "")
