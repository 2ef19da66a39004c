"""``rotorwatch run`` on a simulated fan with a once-per-revolution tach: the tach-locked 1x and 2x (velocity,
phase at the pulse, frequency) and each value's time to its levels reach a real mosquitto broker, the
Prometheus endpoint (checked by real promtool), the status page over HTTP and the trend store.

The check values come from the scenario: its 1x and 2x phase keys (simulators/faults.py; the analysis that
reads them back is checked against scipy in tests/unit/analysis/test_tach_phase.py), its unbalance and
misalignment sizes, and a drive-end outer-race defect that grows linearly, so its envelope band rises.
"""

from __future__ import annotations

import json
import re
import urllib.request

import pytest

from components import MqttListener

from .daemon_support import DaemonProcess, as_json, daemon_config, wait_message, write_setup
from .test_daemon import AGENT, unique_prefix

PHASE_1X, PHASE_2X = 60.0, 200.0


def _scenario() -> dict:
    return {"scenario": {"name": "test: tach phase and a rising band", "config": "rotorwatch.toml",
                         "duration_days": 3.0, "seed": 4},
            "healthy": {"unbalance_mm_s": 2.0, "misalignment_mm_s": 0.8, "speed_drift_pct": 0.0,
                        "unbalance_phase_deg": PHASE_1X, "misalignment_phase_deg": PHASE_2X},
            "change": [{"start_day": 0.0, "end_day": 3.0, "component": "outer_race", "bearing": "fan-de",
                        "points": ["de-h"], "to": 60.0, "shape": "linear"}]}


def _diff_deg(a: float, b: float) -> float:
    return abs((a - b + 180.0) % 360.0 - 180.0)


def _sample(text: str, name: str, **labels: str) -> list[float]:
    """The values of the exposition's samples of ``name`` that carry every one of ``labels``."""
    out = []
    for line in text.splitlines():
        m = re.match(r"(\w+)\{(.*)\} (\S+)$", line)
        if m and m.group(1) == name and all(f'{k}="{v}"' in m.group(2).split(",") for k, v in labels.items()):
            out.append(float(m.group(3)))
    return out


def _get(url: str) -> dict:
    with urllib.request.urlopen(url, timeout=5) as r:
        return json.loads(r.read().decode())


def test_tach_orders_and_time_to_level_on_mqtt_metrics_page_and_trends(mosquitto_broker, promtool, tmp_path):
    prefix = unique_prefix()
    cfg = daemon_config(mosquitto_broker, prefix=prefix, acquisition={"channels": 3}, latching=False)
    m = cfg["machines"][0]
    m["speed"] = {"mode": "tach", "rpm": 1482.0, "tach_channel": 2}
    m["alarms"]["projection"] = {"min_points": 6, "window_hours": 24.0}
    cfg["status_page"] = {"bind": "127.0.0.1", "port": 0}
    path = write_setup(tmp_path, cfg, _scenario())
    listener = MqttListener(mosquitto_broker, topics=[f"{prefix}/#"]).connect()
    d = DaemonProcess(path)
    root = f"{prefix}/{AGENT}"
    try:
        # MQTT: the metrics record carries the orders, with the scenario's phases
        got = wait_message(listener, f"{root}/machine/ef3/point/de-h/metrics",
                           lambda msg: as_json(msg).get("orders") is not None, timeout_s=40)
        assert got is not None, d.describe()
        orders = as_json(got)["orders"]
        print(f"\nMQTT orders on de-h: {orders}")
        assert orders["1x"]["velocity_mm_s"] == pytest.approx(2.0, rel=0.05)
        assert orders["2x"]["velocity_mm_s"] == pytest.approx(0.8, rel=0.05)
        assert _diff_deg(orders["1x"]["phase_deg"], PHASE_1X) < 3.0
        assert _diff_deg(orders["2x"]["phase_deg"], PHASE_2X) < 3.0
        assert orders["1x"]["frequency_hz"] == pytest.approx(1482.0 / 60.0, rel=0.01)
        assert orders["2x"]["frequency_hz"] == pytest.approx(2 * orders["1x"]["frequency_hz"], rel=1e-5)  # 6 digits

        # MQTT: the rising band's point state carries its time to the alarm level with an interval
        def rising(msg) -> bool:
            p = as_json(msg)["values"]["de-outer-race"].get("projection") or {}
            return p.get("status") == "rising" and (p.get("alarm") or {}).get("status") == "rising"

        state = wait_message(listener, f"{root}/machine/ef3/point/de-h/state", rising, timeout_s=60)
        assert state is not None, d.describe()
        proj = as_json(state)["values"]["de-outer-race"]["projection"]
        print(f"MQTT projection of de-outer-race: {proj}")
        a = proj["alarm"]
        assert 0 <= a["in_low_s"] <= a["in_s"] <= a["in_high_s"] and a["level"] == 2.0
        assert proj["slope_per_day"] > 0 and proj["points"] >= 6

        # Prometheus: promtool accepts the exposition, which holds the orders and the time to the level
        text = d.scrape()
        rc, findings = promtool.check_metrics(text)
        assert rc == 0, findings
        phase = _sample(text, "rotorwatch_order_phase_degrees", point="de-h", order="1x")
        assert phase and _diff_deg(phase[0], PHASE_1X) < 3.0, text[:2000]
        assert _sample(text, "rotorwatch_order_frequency_hertz", point="de-h", order="2x")
        assert len(_sample(text, "rotorwatch_value_time_to_level_seconds", point="de-h", band="de-outer-race",
                           level="alarm")) == 3  # projected, earliest, latest

        # the status page over HTTP: the point's orders, the value's projection text, the orders trended
        url = d.wait_log(r"status page listening url=(\S+)", 10)
        assert url, d.describe()
        base = url.group(1).rstrip("/")
        point = _get(f"{base}/api/point/ef3/de-h")
        assert [o["order"] for o in point["orders"]] == ["1x", "2x"]
        assert _diff_deg(point["orders"][0]["phase_deg"], PHASE_1X) < 3.0
        row = next(r for r in point["values"] if r["name"] == "de-outer-race")
        assert row["projection"] is not None and row["projection"]["text"]
        trend = _get(f"{base}/api/trend/ef3/de-h")
        names = {s["name"]: s for s in trend["series"]}
        assert {"1x_velocity_mm_s", "1x_phase_deg", "2x_velocity_mm_s", "2x_phase_deg"} <= set(names)
        assert names["1x_phase_deg"]["unit"] == "deg"
        html = urllib.request.urlopen(f"{base}/", timeout=5).read().decode()
        assert 'id="trend-projection"' in html
    finally:
        listener.close()
        assert d.stop() == 0, d.describe()
    assert "Traceback" not in d.log()

    # the trend store kept the orders of every analyzed update
    from rotorwatch.storage.trends import TrendStore

    with TrendStore(tmp_path / "state" / "trends.sqlite", read_only=True) as trends:
        rows = trends.query(machine="ef3", point="de-h", value="1x_phase_deg")
    assert rows and all(r.unit == "deg" for r in rows)
    assert all(_diff_deg(r.value, PHASE_1X) < 3.0 for r in rows if r.value is not None)
