"""MQTT payload builders: valid JSON, units in names, NaN as null, the advisory notice everywhere."""

import json
import math

from rotorwatch.publishers.mqtt import payloads
from rotorwatch.publishers.mqtt.topics import Topics
from rotorwatch.settings.loading import load_config

from .helpers import T0, machine_update, stalled_update

CONFIG = load_config("config/demo-fan.toml")
EF3 = CONFIG.machine("ef3")


def roundtrip(body):
    return json.loads(payloads.encode(body))


def test_iso_time_is_utc_with_milliseconds():
    # POSIX time 1700000000 is 2023-11-14 22:13:20 UTC (POSIX.1 seconds since the Epoch).
    assert payloads.iso_time(T0) == "2023-11-14T22:13:20.000Z"
    assert payloads.iso_time(T0 + 0.25) == "2023-11-14T22:13:20.250Z"


def test_num_rounds_and_drops_non_finite():
    assert payloads.num(1.23456789) == 1.23457
    assert payloads.num(float("nan")) is None
    assert payloads.num(float("inf")) is None
    assert payloads.num(None) is None
    assert payloads.num(0.0) == 0.0


def test_machine_state_payload():
    body = roundtrip(payloads.machine_state_payload(machine_update(), "halden-ef3", EF3))
    assert body["machine"] == "ef3" and body["agent"] == "halden-ef3"
    assert body["state"] == "warning"
    assert body["rpm"] == 1482.0
    assert math.isclose(body["shaft_speed_hz"], 1482.0 / 60.0, rel_tol=1e-6)
    assert body["points"] == {"de-h": "warning", "nde-h": "warning"}
    assert body["time"] == "2023-11-14T22:13:20.000Z"
    assert "not a protection or trip system" in body["notice"]


def test_point_state_payload_has_levels_baseline_and_units():
    upd = machine_update()
    body = roundtrip(payloads.point_state_payload(upd, upd.points["de-h"], "halden-ef3", EF3))
    assert body["overall"] == {"velocity_mm_s": 1.3, "iso_zone": "A", "state": "normal",
                               "warning_level_mm_s": 2.8, "alarm_level_mm_s": 4.5, "baseline_mm_s": 1.2}
    shaft = body["values"]["shaft-1x"]
    assert shaft == {"value": 0.9, "unit": "mm/s", "state": "warning", "warning_level": 0.8,
                     "alarm_level": 3.5, "baseline": 0.4, "latched": True, "reason": "", "quantity": "velocity",
                     "drop_warning_level": None, "drop_alarm_level": None, "raises": 0, "chatter": 0,
                     "projection": None}
    assert body["findings"] == {}
    assert body["values"]["de-outer-race"]["quantity"] == "envelope"
    assert body["values"]["de-outer-race"]["warning_level"] is None
    assert body["sensor"] == {"ok": True, "fault": None, "reason": ""}
    assert "notice" in body


def test_point_state_without_result_is_still_valid():
    upd = stalled_update()
    body = roundtrip(payloads.point_state_payload(upd, upd.points["de-h"], "a", EF3))
    assert body["state"] == "sensor_fault"
    assert body["sensor"]["fault"] == "stalled"
    assert body["overall"]["velocity_mm_s"] is None
    assert payloads.point_metrics_payload(upd, upd.points["de-h"], "a", EF3) is None


def test_metrics_payload_units_and_nan():
    upd = machine_update(nan_band=True)
    body = roundtrip(payloads.point_metrics_payload(upd, upd.points["de-h"], "a", EF3))
    assert body["bands"]["shaft-1x"] == {"value": None, "unit": "mm/s", "quantity": "velocity"}
    assert body["bands"]["bearing-hf"] == {"value": 0.5, "unit": "m/s^2", "quantity": "acceleration"}
    assert body["waveform"]["crest_factor"] == 3.0
    assert body["findings"][0]["name"] == "BPFO"
    assert body["envelope_band_hz"] == [2000.0, 7000.0]


def test_event_payload():
    upd = machine_update()
    body = roundtrip(payloads.event_payload(upd.events[0], "halden-ef3"))
    assert body["kind"] == "transition"
    assert (body["old_state"], body["new_state"]) == ("normal", "warning")
    assert body["level"] == 0.8 and body["level_kind"] == "warning"
    assert body["point"] == "de-h" and body["value_name"] == "shaft-1x"


def test_command_result_and_agent_event():
    body = roundtrip(payloads.command_result_payload("a", T0, "acknowledge", False, "nope", 7))
    assert body == {"schema": 2, "agent": "a", "id": 7, "command": "acknowledge", "ok": False,
                    "message": "nope", "time": "2023-11-14T22:13:20.000Z"}
    ev = roundtrip(payloads.agent_event_payload("command_rejected", "bad", "a", T0, command=None))
    assert ev["kind"] == "command_rejected" and ev["message"] == "bad" and ev["command"] is None


def test_topic_tree():
    t = Topics("plant/vib", "halden-ef3")
    assert t.availability == "plant/vib/halden-ef3/availability"
    assert t.machine_state("ef3") == "plant/vib/halden-ef3/machine/ef3/state"
    assert t.point_state("ef3", "de-h") == "plant/vib/halden-ef3/machine/ef3/point/de-h/state"
    assert t.point_metrics("ef3", "de-h") == "plant/vib/halden-ef3/machine/ef3/point/de-h/metrics"
    assert t.events == "plant/vib/halden-ef3/events"
    assert t.command == "plant/vib/halden-ef3/command"
    assert t.command_result == "plant/vib/halden-ef3/command/result"
    assert payloads.availability_payload(True) == b"online"
    assert payloads.availability_payload(False) == b"offline"


def test_point_state_payload_carries_the_time_to_each_level():
    import dataclasses

    from rotorwatch.alarms.projection import LevelEta, Projection

    upd = machine_update()
    t = upd.time_s
    proj = Projection("rising", t, 24, 82800.0, 0.3, 0.2, 0.4, (
        LevelEta("warning", 2.8, "reached"),
        LevelEta("alarm", 4.5, "rising", t + 5 * 86400.0, t + 3 * 86400.0, t + 9 * 86400.0)))
    pu = upd.points["de-h"]
    values = {**pu.values, "overall": dataclasses.replace(pu.values["overall"], projection=proj)}
    body = roundtrip(payloads.point_state_payload(upd, dataclasses.replace(pu, values=values), "halden-ef3", EF3))
    got = body["values"]["overall"]["projection"]
    assert got["status"] == "rising" and got["slope_per_day"] == 0.3 and got["slope_interval_per_day"] == [0.2, 0.4]
    assert got["warning"] == {"status": "reached", "level": 2.8}
    assert got["alarm"] == {"status": "rising", "level": 4.5, "in_s": 432000.0, "in_low_s": 259200.0,
                            "in_high_s": 777600.0, "at": "2023-11-19T22:13:20.000Z"}


def test_point_metrics_payload_carries_the_tach_locked_orders():
    import dataclasses

    upd = machine_update()
    pu = upd.points["de-h"]
    r = dataclasses.replace(pu.result, rpm=1500.0, rpm_source="tach", order_phase={"1x": (3.2, 41.5), "2x": (0.8, 250.0)})
    body = roundtrip(payloads.point_metrics_payload(upd, dataclasses.replace(pu, result=r), "halden-ef3", EF3))
    assert body["orders"] == {"1x": {"velocity_mm_s": 3.2, "phase_deg": 41.5, "frequency_hz": 25.0},
                              "2x": {"velocity_mm_s": 0.8, "phase_deg": 250.0, "frequency_hz": 50.0}}
    assert roundtrip(payloads.point_metrics_payload(upd, pu, "halden-ef3", EF3))["orders"] is None
