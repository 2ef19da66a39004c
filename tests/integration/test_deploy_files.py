"""The deploy/ files: the systemd unit passes systemd-analyze verify, the sample service settings load,
and the docs name every metric the exporter produces and every topic the agent publishes."""

from __future__ import annotations

import re
import subprocess
import sys
from pathlib import Path

import pytest

from components import find_binary
from rotorwatch.publishers.mqtt.topics import Topics
from rotorwatch.publishers.prometheus import UpdateCollector, make_registry
from rotorwatch.selfstats import COUNTERS, GAUGES, SelfStats
from rotorwatch.settings.loading import load_config

REPO = Path(__file__).resolve().parents[2]
DEPLOY = REPO / "deploy"
sys.path.insert(0, str(REPO / "tests" / "unit"))
from service.helpers import machine_update  # noqa: E402

pytestmark = pytest.mark.integration


def unit_directives() -> dict[str, list[str]]:
    out: dict[str, list[str]] = {}
    for line in (DEPLOY / "rotorwatch.service").read_text().splitlines():
        line = line.strip()
        if line and not line.startswith(("#", "[")) and "=" in line:
            k, v = line.split("=", 1)
            out.setdefault(k, []).append(v)
    return out


def test_unit_has_the_service_contract():
    d = unit_directives()
    assert d["Type"] == ["notify"] and d["NotifyAccess"] == ["main"]
    assert d["ExecStart"] == ["/opt/rotorwatch/venv/bin/rotorwatch run --config /etc/rotorwatch/rotorwatch.toml "
                              "--state-dir /var/lib/rotorwatch"]
    assert d["ExecReload"] == ["/bin/kill -HUP $MAINPID"]
    assert d["User"] == ["rotorwatch"] and d["SupplementaryGroups"] == ["audio"]
    for key, value in [("ProtectSystem", "strict"), ("ProtectHome", "yes"), ("PrivateTmp", "yes"),
                       ("NoNewPrivileges", "yes"), ("StateDirectory", "rotorwatch"),
                       ("ConfigurationDirectory", "rotorwatch"), ("CapabilityBoundingSet", ""),
                       ("RestrictAddressFamilies", "AF_UNIX AF_INET AF_INET6 AF_NETLINK")]:
        assert d.get(key) == [value], key
    assert int(d["WatchdogSec"][0]) > 0


def test_systemd_analyze_verify(tmp_path):
    tool = find_binary("systemd-analyze", "systemd")
    # verify checks that ExecStart is executable: point it at this checkout's rotorwatch
    exe = Path(sys.executable).with_name("rotorwatch")
    assert exe.exists(), exe
    unit = tmp_path / "rotorwatch.service"
    unit.write_text((DEPLOY / "rotorwatch.service").read_text().replace("/opt/rotorwatch/venv/bin/rotorwatch", str(exe)))
    done = subprocess.run([tool, "verify", str(unit)], capture_output=True, text=True, timeout=60)
    findings = [ln for ln in (done.stdout + done.stderr).splitlines()
                if ln.strip() and "Failed to connect to bus" not in ln and "has not been booted with systemd" not in ln]
    assert done.returncode == 0 and not findings, findings


def test_sample_service_settings_append_to_the_demo_config(tmp_path):
    combined = tmp_path / "rotorwatch.toml"
    combined.write_text((REPO / "config" / "demo-fan.toml").read_text() + "\n" + (DEPLOY / "service-settings.toml").read_text())
    cfg = load_config(combined)
    assert cfg.mqtt is not None and cfg.mqtt.qos == 1
    assert cfg.metrics is not None and cfg.metrics.bind == "127.0.0.1"


def test_metrics_doc_names_every_metric():
    cfg = load_config(REPO / "config" / "demo-fan.toml")
    stats = SelfStats()
    example = {"machine": "ef3", "point": "de-h", "result": "ok", "fault": "clipping", "reason": "full"}
    for name, count in COUNTERS.items():
        counter = getattr(stats, name)
        (counter.labels(**{k: example[k] for k in count.labels}) if count.labels else counter).inc()
    for name, count in GAUGES.items():
        gauge = getattr(stats, name)
        (gauge.labels(**{k: example[k] for k in count.labels}) if count.labels else gauge).set(1.0)
    col = UpdateCollector(cfg, stats)
    col.observe(machine_update())
    families = {(m.name, m.type) for m in make_registry(col).collect()}
    doc = (DEPLOY / "metrics.md").read_text()
    documented = set(re.findall(r"rotorwatch_[a-z_]+", doc))
    exposed = set()
    for n, kind in families:  # families: counters are named without _total, Info without _info
        exposed.add(n + "_total" if kind == "counter" else n + "_info" if kind == "info" else n)
    # a row "`x_meters_per_second` / `..._squared`" documents both units
    missing = sorted(n for n in exposed if n not in documented
                     and not (n.endswith("_squared") and n.removesuffix("_squared") in documented))
    assert not missing, missing


def test_topics_doc_names_every_topic():
    doc = (DEPLOY / "mqtt-topics.md").read_text()
    t = Topics("<p>", "<a>")
    for topic in (t.availability, t.info, t.events, t.command, t.command_result, t.machine_state("<m>"),
                  t.point_state("<m>", "<pt>"), t.point_metrics("<m>", "<pt>")):
        assert f"`{topic}`" in doc, topic
