"""MachineMonitor: learning, levels, stops, sensor faults, missing data, acknowledge, persistence."""

from __future__ import annotations

import pytest

from rotorwatch.alarms.monitor import MachineMonitor
from rotorwatch.alarms.records import STATES, SensorHealth
from rotorwatch.errors import ConfigError

from .helpers import machine, result

OK = SensorHealth(ok=True)
HOUR = 3600.0


def step(mon, t, overall=(1.0, 1.0), outer=(0.1, 0.1), health=None, rpm=None, present=("p1", "p2")):
    results = {
        pid: (result(pid, t, overall[i], outer[i]) if pid in present else None) for i, pid in enumerate(("p1", "p2"))
    }
    return mon.update(t, results, health or {"p1": OK, "p2": OK}, rpm=rpm)


def learned_monitor(tmp_path, **kw) -> MachineMonitor:
    mon = MachineMonitor(machine(**kw), tmp_path)
    for i in range(5):  # learning: 1 h, at least 5 updates; baseline outer 0.1, overall 1.0
        step(mon, i * 900.0)
    return mon


def test_learning_then_normal(tmp_path):
    mon = MachineMonitor(machine(), tmp_path)
    first = step(mon, 0.0)
    assert first.state == "learning"
    assert {p.state for p in first.points.values()} == {"learning"}
    assert [(e.value_name, e.old_state, e.new_state) for e in first.events if e.point_id is None] == [
        ("machine", "no_data", "learning")
    ]
    for i in range(1, 4):
        assert step(mon, i * 900.0).state == "learning"
    done = step(mon, 4 * 900.0)  # fifth update, one hour after the first
    assert done.state == "normal"
    learned = [e for e in done.events if e.value_name == "outer" and e.point_id == "p1"]
    assert len(learned) == 1 and learned[0].new_state == "normal"
    assert "baseline learned: median 0.1 m/s^2" in learned[0].reason
    v = done.points["p1"].values["outer"]
    assert (v.baseline, v.warning_level, v.alarm_level) == (pytest.approx(0.1), pytest.approx(0.2), pytest.approx(0.4))


def test_absolute_levels_apply_while_learning(tmp_path):
    mon = MachineMonitor(machine(learning_hours=100), tmp_path)
    step(mon, 0.0, overall=(5.0, 1.0))
    u = step(mon, 1.0, overall=(5.0, 1.0))
    assert u.points["p1"].state == "alarm" and u.state == "alarm"
    assert u.points["p2"].state == "learning"


def test_relative_alarm_with_reason_and_on_delay(tmp_path):
    mon = learned_monitor(tmp_path)
    t = 5 * 900.0
    u = step(mon, t, outer=(0.25, 0.1))  # above warning 0.2, on-delay 2
    assert u.points["p1"].state == "normal"
    u = step(mon, t + 900, outer=(0.25, 0.1))
    assert u.points["p1"].state == "warning" and u.state == "warning"
    ev = [e for e in u.events if e.value_name == "outer"]
    assert ev[0].reason == "outer 0.25 m/s^2 above warning 0.2 m/s^2 (2 x learned baseline 0.1) for 2 updates"
    assert (ev[0].level, ev[0].level_kind, ev[0].point_id) == (pytest.approx(0.2), "warning", "p1")
    kinds = {(e.value_name, e.new_state) for e in u.events}
    assert ("point", "warning") in kinds and ("machine", "warning") in kinds
    assert "p1: outer 0.25 m/s^2: warning" in u.reason


def test_stopped_suppresses_alarms_and_learning(tmp_path):
    mon = MachineMonitor(machine(), tmp_path)
    for i in range(10):
        u = step(mon, i * 900.0, overall=(9.0, 9.0), outer=(5.0, 5.0), rpm=50.0)  # 10 % of 1500 = 150
        assert u.state == "stopped"
        assert all(v.state == "suppressed" for p in u.points.values() for v in p.values.values())
    assert mon.baselines.progress("p1", "overall")[0] == 0
    assert step(mon, 10 * 900.0).state == "learning"


def test_stopped_machine_at_noise_floor_reads_stopped_not_fault(tmp_path):
    mon = learned_monitor(tmp_path)
    floor = SensorHealth(ok=False, fault="disconnected", reason="signal at the noise floor")
    u = step(mon, 9000.0, health={"p1": floor, "p2": floor}, rpm=0.0)
    assert u.state == "stopped" and "noise floor" in u.points["p1"].reason


def test_sensor_fault_suppresses_and_never_reads_normal(tmp_path):
    mon = learned_monitor(tmp_path)
    bad = SensorHealth(ok=False, fault="clipping", reason="2 % of samples clipped")
    events = []
    for i in range(6):
        u = step(mon, 6000.0 + i * 900, overall=(9.0, 1.0), outer=(3.0, 0.1), health={"p1": bad, "p2": OK})
        assert u.points["p1"].state == "sensor_fault"
        assert u.state == "sensor_fault"  # never alarm from the faulty point, never normal
        assert all(v.state == "suppressed" for v in u.points["p1"].values.values())
        events += u.events
    assert not [e for e in events if e.value_name in ("outer", "overall")]
    assert [(e.value_name, e.new_state) for e in events if e.point_id is None] == [("machine", "sensor_fault")]
    assert "sensor clipping: 2 % of samples clipped" in u.points["p1"].reason


def test_sensor_fault_does_not_mask_another_points_alarm(tmp_path):
    mon = learned_monitor(tmp_path)
    bad = SensorHealth(ok=False, fault="flatline", reason="no variation")
    step(mon, 6000.0, overall=(1.0, 6.0), health={"p1": bad, "p2": OK})
    u = step(mon, 6900.0, overall=(1.0, 6.0), health={"p1": bad, "p2": OK})
    assert u.points["p2"].state == "alarm" and u.state == "alarm"


def test_sensor_fault_does_not_feed_learning(tmp_path):
    mon = MachineMonitor(machine(), tmp_path)
    bad = SensorHealth(ok=False, fault="bias_shift", reason="mean off zero")
    for i in range(3):
        step(mon, i * 900.0, health={"p1": bad, "p2": OK})
    assert mon.baselines.progress("p1", "overall")[0] == 0
    assert mon.baselines.progress("p2", "overall")[0] == 3


def test_missing_result_is_no_data(tmp_path):
    mon = learned_monitor(tmp_path)
    u = step(mon, 6000.0, present=("p2",))
    assert u.points["p1"].state == "no_data" and u.state == "no_data"
    assert step(mon, 6900.0).state == "normal"


def test_machine_state_is_worst_point_in_states_order(tmp_path):
    assert STATES.index("sensor_fault") > STATES.index("warning")  # a fault never outranks an alarm
    mon = learned_monitor(tmp_path)
    u = step(mon, 6000.0, present=("p2",), health={"p1": OK, "p2": SensorHealth(False, "dropout", "zeros")})
    assert (u.points["p1"].state, u.points["p2"].state, u.state) == ("no_data", "sensor_fault", "sensor_fault")


def test_latching_alarm_needs_acknowledge(tmp_path):
    mon = learned_monitor(tmp_path, band_levels={"relative_warning": 2.0, "relative_alarm": 4.0, "on_delay_updates": 1, "latching": True})
    u = step(mon, 6000.0, outer=(0.5, 0.1))
    assert u.points["p1"].values["outer"].state == "alarm"
    for i in range(3):
        u = step(mon, 7000.0 + i, outer=(0.1, 0.1))
        assert u.points["p1"].state == "alarm" and u.points["p1"].values["outer"].latched
    events = mon.acknowledge("p1", "outer")
    assert [(e.value_name, e.old_state, e.new_state) for e in events] == [
        ("outer", "alarm", "normal"), ("point", "alarm", "normal"), ("machine", "alarm", "normal"),
    ]
    assert step(mon, 8000.0).state == "normal"


def test_acknowledge_unknown_names_raise_key_error(tmp_path):
    mon = learned_monitor(tmp_path)
    with pytest.raises(KeyError, match="p9"):
        mon.acknowledge("p9")
    with pytest.raises(KeyError, match="inner"):
        mon.acknowledge("p1", "inner")
    assert mon.acknowledge("p1", "outer") == []  # nothing latched: nothing changes


def test_baseline_persists_across_a_new_monitor(tmp_path):
    learned_monitor(tmp_path).close()
    again = MachineMonitor(machine(), tmp_path)
    u = step(again, 99_000.0)
    assert u.state == "normal"
    assert u.points["p1"].values["outer"].baseline == pytest.approx(0.1)
    fresh = MachineMonitor(machine(), tmp_path / "other")
    assert step(fresh, 99_000.0).state == "learning"


def test_relearn_goes_back_to_learning(tmp_path):
    mon = learned_monitor(tmp_path)
    mon.relearn("p2")
    u = step(mon, 6000.0)
    assert (u.points["p1"].state, u.points["p2"].state, u.state) == ("normal", "learning", "learning")


def test_band_named_overall_is_rejected():
    m = machine(bands=[{"name": "overall", "quantity": "velocity", "low_hz": 10.0, "high_hz": 100.0}])
    with pytest.raises(ConfigError):
        MachineMonitor(m, None)
