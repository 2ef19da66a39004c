"""Properties of the machine monitor over random update sequences."""

from __future__ import annotations

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from rotorwatch.alarms.monitor import MachineMonitor
from rotorwatch.alarms.records import STATES, SensorHealth

from .helpers import machine, result

FAULTS = ("disconnected", "clipping", "flatline", "bias_shift", "dropout")

updates = st.lists(
    st.tuples(
        st.sampled_from([0.0, 100.0, 1500.0, 1500.0]),  # rpm: stopped below 150
        st.sampled_from([None, *FAULTS]),  # p1 health
        st.floats(min_value=0.0, max_value=8.0),  # p1 overall
        st.floats(min_value=0.0, max_value=1.0),  # p1 outer
        st.floats(min_value=0.0, max_value=8.0),  # p2 overall
        st.booleans(),  # p2 present
    ),
    min_size=1,
    max_size=40,
)


@settings(max_examples=120, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(seq=updates)
def test_faults_and_stops_suppress_and_never_read_normal(tmp_path_factory, seq):
    mon = MachineMonitor(machine(learning_hours=0.5, min_learning_updates=3), tmp_path_factory.mktemp("m"))
    for i, (rpm, fault, ov1, out1, ov2, present2) in enumerate(seq):
        t = i * 600.0
        h1 = SensorHealth(ok=True) if fault is None else SensorHealth(ok=False, fault=fault, reason=fault)
        before = mon.baselines.progress("p1", "overall")[0]
        results = {"p1": result("p1", t, ov1, out1), "p2": result("p2", t, ov2, 0.1) if present2 else None}
        u = mon.update(t, results, {"p1": h1, "p2": SensorHealth(ok=True)}, rpm=rpm)
        p1, p2 = u.points["p1"], u.points["p2"]
        stopped = rpm < 150.0
        if stopped and (fault is None or fault == "disconnected"):
            assert p1.state == "stopped"
        elif fault is not None:
            assert p1.state == "sensor_fault"
        if fault is not None or stopped:
            assert all(v.state == "suppressed" for v in p1.values.values())
            assert mon.baselines.progress("p1", "overall")[0] == before  # no learning
            assert not [e for e in u.events if e.point_id == "p1" and e.value_name not in ("point",)]
            assert p1.state not in ("normal", "alarm", "warning")
        # The machine state is the worst point state, and only an alarming point makes it alarm.
        assert u.state == min((p1.state, p2.state), key=STATES.index)
        if u.state == "alarm":
            assert "alarm" in (p1.state, p2.state)
