"""Data-quality figures leave the agent: on /metrics (parsed back with prometheus_client's own parser and
linted by the real promtool) and in the MQTT state and metrics records (written by the real publisher
into a real publish spool, read back as the broker would get them).

The updates come from the real pipeline on demo signals of our own making: a clean 1 V-range sensor
and the same signal overloaded x200 into the input range (clipping), plus a stalled input (nothing
measured). Thresholds are common practice (agent/alarms/sensor_checks.py).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
from prometheus_client import generate_latest
from prometheus_client.parser import text_string_to_metric_families

from rotorwatch.alarms.records import SensorHealth
from rotorwatch.pipeline import MachinePipeline
from rotorwatch.publishers.mqtt.link import MqttLink
from rotorwatch.publishers.mqtt.sink import UpdatePublisher
from rotorwatch.publishers.prometheus import UpdateCollector, make_registry
from rotorwatch.selfstats import SelfStats
from rotorwatch.settings.loading import load_config
from rotorwatch.settings.service import MqttSettings
from rotorwatch.storage.spool import Spool

REPO = Path(__file__).resolve().parents[2]
CONFIG = load_config(REPO / "config" / "demo-fan.toml")
MACHINE = CONFIG.machines[0]
FS_HZ = CONFIG.acquisition.sample_rate_hz


def volts(clip: bool, seed: int = 4) -> np.ndarray:
    rng = np.random.default_rng(seed)
    t = np.arange(int(MACHINE.analysis.window_s * FS_HZ)) / FS_HZ
    x = 0.012 * np.sin(2 * np.pi * 24.7 * t) + rng.normal(0, 0.004, t.size)
    return np.clip(x * 200.0, -1.0, 1.0) if clip else x


def updates(tmp_path):
    pipe = MachinePipeline(CONFIG, MACHINE, state_dir=tmp_path)
    good = pipe.step(1_000.0, {"de-h": volts(False), "nde-h": volts(False, 5)})
    clipped = pipe.step(1_005.0, {"de-h": volts(True), "nde-h": volts(False, 5)})
    h = SensorHealth(ok=False, fault="stalled", reason="input stalled: no samples for 2.0 s")
    stalled = pipe.monitor.update(1_010.0, {"de-h": None, "nde-h": None}, {"de-h": h, "nde-h": h})
    return good, clipped, stalled


def scrape(update, stats=None) -> dict:
    col = UpdateCollector(CONFIG, stats or SelfStats())
    col.observe(update)
    text = generate_latest(make_registry(col)).decode()
    out = {}
    for fam in text_string_to_metric_families(text):
        for s in fam.samples:
            out[(s.name, tuple(sorted((k, v) for k, v in s.labels.items() if k != "agent")))] = s.value
    return out, text


def test_prometheus_shows_the_fault_kind_and_the_clipped_share(tmp_path, promtool):
    good, clipped, stalled = updates(tmp_path)
    assert clipped.points["de-h"].state == "sensor_fault"
    stats = SelfStats()
    stats.sensor_faults.labels(machine="ef3", point="de-h", fault="clipping").inc()
    m, text = scrape(clipped, stats)
    de = (("machine", "ef3"), ("point", "de-h"))
    assert m[("rotorwatch_sensor_check", tuple(sorted((*de, ("check", "clipping")))))] == 1.0
    assert m[("rotorwatch_sensor_check", tuple(sorted((*de, ("check", "ok")))))] == 0.0
    share = m[("rotorwatch_sensor_clipped_ratio", de)]
    assert 0.001 < share <= 1.0 and share == clipped.points["de-h"].health.clipped_fraction
    assert m[("rotorwatch_sensor_rms_volts", de)] > 0.5  # an overloaded input swings near its 1 V range
    assert m[("rotorwatch_sensor_faults_total", (("fault", "clipping"), *de))] == 1.0
    nde = (("machine", "ef3"), ("point", "nde-h"))
    assert m[("rotorwatch_sensor_check", tuple(sorted((*nde, ("check", "ok")))))] == 1.0
    assert m[("rotorwatch_sensor_clipped_ratio", nde)] == 0.0
    rc, out = promtool.check_metrics(text)
    assert rc == 0, out
    # a stalled input measured nothing: the state is shown, no made-up figures
    m, _ = scrape(stalled)
    assert m[("rotorwatch_sensor_check", tuple(sorted((*de, ("check", "stalled")))))] == 1.0
    assert ("rotorwatch_sensor_clipped_ratio", de) not in m and ("rotorwatch_sensor_rms_volts", de) not in m


def test_mqtt_records_carry_the_data_quality_block(tmp_path):
    good, clipped, stalled = updates(tmp_path)
    stats = SelfStats()
    stats.input_overflows.inc(2)
    stats.sensor_faults.labels(machine="ef3", point="de-h", fault="clipping").inc()
    with Spool(tmp_path / "spool.sqlite") as spool:
        link = MqttLink(MqttSettings(metrics_interval_s=0.001), CONFIG.site.agent_id, tmp_path, stats, spool=spool)
        clock = iter(range(0, 1000, 10))
        pub = UpdatePublisher(link, CONFIG, clock=lambda: float(next(clock)))  # every update refreshes
        for u in (good, clipped, stalled):
            pub.publish_update(u)
        records = spool.next_batch(1000)
    root = f"rotorwatch/{CONFIG.site.agent_id}/machine/ef3/point/de-h"
    states = [json.loads(r.payload) for r in records if r.topic == f"{root}/state"]
    metrics = [json.loads(r.payload) for r in records if r.topic == f"{root}/metrics"]
    assert [s["state"] for s in states][-2:] == ["sensor_fault", "sensor_fault"]
    q = metrics[-1]["data_quality"]  # the clipped window was analysed: it has a metrics record
    assert q["sensor_ok"] is False and q["fault"] == "clipping"
    assert q["clipped_fraction"] > 0.001 and q["rms_v"] > 0.5
    assert q["sensor_faults"] == {"clipping": 1} and q["input_overflows"] == 2
    assert metrics[0]["data_quality"]["sensor_ok"] is True and metrics[0]["data_quality"]["clipped_fraction"] == 0.0
    last = states[-1]["data_quality"]  # stalled: nothing measured, counts still there
    assert last["fault"] == "stalled" and last["clipped_fraction"] is None and last["rms_v"] is None
    assert last["input_overflows"] == 2 and all("seq" in s for s in states)
