"""Prometheus exposition: names in base units, values converted, states as Enum-style sets (promtool's
check of the same text: tests/integration/test_metrics_promtool.py)."""

import pytest
from prometheus_client import generate_latest
from prometheus_client.parser import text_string_to_metric_families

from rotorwatch.publishers.prometheus import UpdateCollector, make_registry
from rotorwatch.selfstats import SelfStats
from rotorwatch.settings.loading import load_config

from .helpers import machine_update, stalled_update

CONFIG = load_config("config/demo-fan.toml")


def exposition(updates, stats=None):
    stats = stats or SelfStats()
    col = UpdateCollector(CONFIG, stats)
    for u in updates:
        col.observe(u)
    return generate_latest(make_registry(col)).decode()


def samples(text):
    out = {}
    for fam in text_string_to_metric_families(text):
        for s in fam.samples:
            out[(s.name, tuple(sorted(s.labels.items())))] = s.value
    return out


def value(text, name, **labels):
    hits = [v for (n, lbl), v in samples(text).items()
            if n == name and all(dict(lbl).get(k) == str(x) for k, x in labels.items())]
    assert len(hits) == 1, f"{name} {labels}: {len(hits)} matches"
    return hits[0]


EXPECTED_NAMES = {
    "rotorwatch_build_info",
    "rotorwatch_overall_velocity_meters_per_second",
    "rotorwatch_iso_zone",
    "rotorwatch_band_value_meters_per_second",
    "rotorwatch_band_value_meters_per_second_squared",
    "rotorwatch_warning_level_meters_per_second",
    "rotorwatch_warning_level_meters_per_second_squared",
    "rotorwatch_alarm_level_meters_per_second",
    "rotorwatch_alarm_level_meters_per_second_squared",
    "rotorwatch_baseline_meters_per_second",
    "rotorwatch_baseline_meters_per_second_squared",
    "rotorwatch_value_state",
    "rotorwatch_value_latched",
    "rotorwatch_waveform_rms_meters_per_second_squared",
    "rotorwatch_waveform_peak_meters_per_second_squared",
    "rotorwatch_waveform_mean_meters_per_second_squared",
    "rotorwatch_waveform_crest_factor_ratio",
    "rotorwatch_waveform_kurtosis_ratio",
    "rotorwatch_sensor_ok",
    "rotorwatch_point_state",
    "rotorwatch_machine_state",
    "rotorwatch_shaft_speed_hertz",
    "rotorwatch_shaft_speed_source",
    "rotorwatch_updates_total",
    "rotorwatch_updates_skipped_total",
    "rotorwatch_input_overflows_total",
    "rotorwatch_source_stalls_total",
    "rotorwatch_mqtt_publish_failures_total",
    "rotorwatch_mqtt_reconnects_total",
}


def test_metric_names_and_prefix():
    text = exposition([machine_update()])
    names = {n for n, _ in samples(text)}
    missing = EXPECTED_NAMES - names
    assert not missing, missing
    assert all(n.startswith("rotorwatch_") for n in names)


def test_values_are_in_base_units():
    text = exposition([machine_update()])
    # 1.3 mm/s -> 0.0013 m/s (SI: 1 mm = 1e-3 m)
    assert value(text, "rotorwatch_overall_velocity_meters_per_second", point="de-h") == pytest.approx(1.3e-3)
    assert value(text, "rotorwatch_band_value_meters_per_second", point="de-h", band="shaft-1x",
                 quantity="velocity") == pytest.approx(0.9e-3)
    assert value(text, "rotorwatch_band_value_meters_per_second_squared", point="de-h", band="de-outer-race",
                 quantity="envelope") == pytest.approx(0.02)
    assert value(text, "rotorwatch_warning_level_meters_per_second", point="de-h", band="overall") == pytest.approx(2.8e-3)
    assert value(text, "rotorwatch_alarm_level_meters_per_second_squared", point="de-h", band="bearing-hf") == pytest.approx(2.0)
    assert value(text, "rotorwatch_baseline_meters_per_second", point="de-h", band="shaft-1x") == pytest.approx(0.4e-3)
    # 1482 r/min = 24.7 Hz (1 r/min = 1/60 Hz)
    assert value(text, "rotorwatch_shaft_speed_hertz", machine="ef3") == pytest.approx(24.7)
    assert value(text, "rotorwatch_value_latched", point="de-h", band="shaft-1x") == 1.0


def test_state_labels_are_short_and_never_repeat_the_metric_name():
    from prometheus_client.parser import text_string_to_metric_families

    text = exposition([machine_update()])
    short = {"rotorwatch_iso_zone": "zone", "rotorwatch_value_state": "state", "rotorwatch_point_state": "state",
             "rotorwatch_machine_state": "state", "rotorwatch_sensor_check": "check",
             "rotorwatch_shaft_speed_source": "source", "rotorwatch_finding_state": "state"}
    for fam in text_string_to_metric_families(text):
        for sample in fam.samples:
            assert fam.name not in sample.labels, (fam.name, sample.labels)
            if fam.name in short:
                assert short[fam.name] in sample.labels, (fam.name, sample.labels)
    assert 'rotorwatch_iso_zone{agent="halden-ef3",machine="ef3",point="de-h",zone="A"} 1.0' in text


def test_states_are_enum_style():
    text = exposition([machine_update()])
    assert value(text, "rotorwatch_iso_zone", point="de-h", zone="A") == 1.0
    assert value(text, "rotorwatch_iso_zone", point="de-h", zone="C") == 0.0
    assert value(text, "rotorwatch_machine_state", machine="ef3", state="warning") == 1.0
    assert value(text, "rotorwatch_machine_state", machine="ef3", state="normal") == 0.0
    assert value(text, "rotorwatch_point_state", point="nde-h", state="warning") == 1.0
    assert value(text, "rotorwatch_value_state", point="de-h", band="de-outer-race",
                 state="learning") == 1.0


def test_nan_values_are_left_out_and_stalled_points_expose_state_only():
    text = exposition([machine_update(nan_band=True)])
    names = [(n, dict(lab)) for (n, lab) in samples(text)]
    assert not any(n == "rotorwatch_band_value_meters_per_second" and lab.get("band") == "shaft-1x" for n, lab in names)
    text = exposition([stalled_update()])
    assert value(text, "rotorwatch_point_state", point="de-h", state="sensor_fault") == 1.0
    assert value(text, "rotorwatch_sensor_ok", point="de-h") == 0.0
    assert not any(n == "rotorwatch_overall_velocity_meters_per_second" for n, _ in samples(text))


def test_counters_start_at_zero_and_count():
    stats = SelfStats()
    text = exposition([], stats)
    assert value(text, "rotorwatch_source_stalls_total") == 0.0
    assert value(text, "rotorwatch_updates_total", machine="ef3") == 0.0
    stats.source_stalls.inc()
    stats.updates.labels(machine="ef3").inc()
    stats.updates.labels(machine="ef3").inc()
    stats.commands.labels(result="rejected").inc()
    stats.mqtt_connected.set(1)
    text = exposition([], stats)
    assert value(text, "rotorwatch_source_stalls_total") == 1.0
    assert value(text, "rotorwatch_updates_total", machine="ef3") == 2.0
    assert value(text, "rotorwatch_commands_total", result="rejected") == 1.0
    assert value(text, "rotorwatch_mqtt_connected") == 1.0
    with pytest.raises(ValueError):  # the labels are declared with the metric
        stats.updates.labels(point="de-h").inc()
