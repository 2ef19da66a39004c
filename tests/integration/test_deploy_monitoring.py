"""The files under deploy/ for Prometheus, Grafana and the compose example, checked with real tools.

- promtool (Prometheus 2.x) checks the alert rules, runs their rule unit tests, checks the example
  scrape configuration and the one the compose example assembles from its mounts, and parses every
  dashboard query (written out as recording rules);
- every metric name and label the rules and the dashboard use must exist in what the daemon exports:
  a real scrape of :class:`rotorwatch.publishers.prometheus.collector.UpdateCollector` fed with a real
  :class:`~rotorwatch.pipeline.MachinePipeline` update of the demo fan, plus every self-statistic of
  :mod:`rotorwatch.selfstats`;
- the compose file parses, mounts only files that exist, and the agent configuration it mounts loads
  (machine identical to config/demo-fan.toml) in the folder layout the mounts create.

promtool is a real component: when it is missing the test fails (tests/run-suite installs it).
"""

from __future__ import annotations

import json
import re
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest
import yaml

from components import find_binary

REPO = Path(__file__).resolve().parents[2]
DEPLOY = REPO / "deploy"
ALERTS = DEPLOY / "prometheus" / "rotorwatch-alerts.yml"
ALERT_TESTS = DEPLOY / "prometheus" / "rotorwatch-alerts.test.yml"
PROM_CONFIG = DEPLOY / "prometheus" / "prometheus.yml"
DASHBOARD = DEPLOY / "grafana" / "rotorwatch-dashboard.json"
COMPOSE = DEPLOY / "compose" / "docker-compose.yml"

#: Labels Prometheus adds from the scrape configuration (target labels), not the agent.
TARGET_LABELS = {"job", "instance", "site"}


@pytest.fixture(scope="module")
def promtool() -> str:
    return find_binary("promtool", "prometheus", "promtool")


def run(argv: list[str], cwd: Path | None = None) -> subprocess.CompletedProcess:
    return subprocess.run(argv, capture_output=True, text=True, timeout=60, cwd=cwd, stdin=subprocess.DEVNULL)


# ------------------------------------------------------------------------------------ exported names
@pytest.fixture(scope="module")
def exported(tmp_path_factory) -> dict[str, set[str]]:
    """Sample name -> label names, from a real scrape of the daemon's collector."""
    from prometheus_client import generate_latest
    from prometheus_client.parser import text_string_to_metric_families

    from rotorwatch.pipeline import MachinePipeline
    from rotorwatch.publishers.prometheus import UpdateCollector, make_registry
    from rotorwatch.selfstats import COUNTERS, GAUGES, SelfStats
    from rotorwatch.settings.loading import load_config
    from rotorwatch.settings.models import AlarmPolicy

    config = load_config(REPO / "config" / "demo-fan.toml")
    machine = config.machines[0]
    # a short learning period, so that baselines and baseline-relative levels exist after a few updates
    policy = AlarmPolicy(learning_hours=0.0, min_learning_updates=2)
    pipeline = MachinePipeline(config, machine, tmp_path_factory.mktemp("state"), policy=policy)
    fs = config.acquisition.sample_rate_hz
    t = np.arange(int(machine.analysis.window_s * fs)) / fs
    rng = np.random.default_rng(3)
    for k in range(4):
        # a 1x tone of about 1 mm/s plus noise, in volts at 100 mV/g: enough for every value to exist
        blocks = {p.id: 0.0015 * np.sin(2 * np.pi * 24.7 * t) + 0.002 * rng.normal(size=t.size) for p in machine.points}
        update = pipeline.step(1_767_225_600.0 + 5.0 * k, blocks)
    assert update.state != "learning", update.reason
    stats = SelfStats()
    example = {"machine": machine.id, "point": machine.points[0].id, "result": "ok", "fault": "clipping",
               "reason": "full"}
    for name, count in COUNTERS.items():  # every self-statistic, with the labels it is declared with
        counter = getattr(stats, name)
        (counter.labels(**{k: example[k] for k in count.labels}) if count.labels else counter).inc()
    for name, count in GAUGES.items():
        gauge = getattr(stats, name)
        (gauge.labels(**{k: example[k] for k in count.labels}) if count.labels else gauge).set(1.0)
    collector = UpdateCollector(config, stats)
    collector.observe(update)
    text = generate_latest(make_registry(collector)).decode()
    names: dict[str, set[str]] = {}
    for family in text_string_to_metric_families(text):
        for sample in family.samples:
            names.setdefault(sample.name, set()).update(sample.labels)
    assert "rotorwatch_point_state" in names and "rotorwatch_updates_total" in names
    return names


SELECTOR = re.compile(r"\b(rotorwatch_[a-z0-9_]+)\b\s*(\{[^}]*\})?")
MATCHER = re.compile(r"([a-zA-Z_][a-zA-Z0-9_]*)\s*(?:=~|!~|!=|=)\s*\"")


def selectors(expr: str) -> list[tuple[str, set[str]]]:
    """(metric name, label names matched) for every rotorwatch_* selector in a PromQL expression."""
    return [(m.group(1), set(MATCHER.findall(m.group(2) or ""))) for m in SELECTOR.finditer(expr)]


def alert_exprs() -> list[tuple[str, str]]:
    rules = yaml.safe_load(ALERTS.read_text())
    return [(r["alert"], r["expr"]) for g in rules["groups"] for r in g["rules"]]


def dashboard() -> dict:
    return json.loads(DASHBOARD.read_text())


def dashboard_exprs() -> list[tuple[str, str]]:
    d = dashboard()
    out = [(p["title"], t["expr"]) for p in d["panels"] for t in p.get("targets", [])]
    out += [(f"variable {v['name']}", v["query"]["query"]) for v in d["templating"]["list"] if v["type"] == "query"]
    return out


def check_names(exprs: list[tuple[str, str]], exported: dict[str, set[str]]) -> list[str]:
    problems = []
    for where, expr in exprs:
        found = selectors(expr)
        for name, labels in found:
            if name not in exported:
                problems.append(f"{where}: {name} is not exported by the daemon")
                continue
            unknown = labels - exported[name] - TARGET_LABELS
            if unknown:
                problems.append(f"{where}: {name} has no label(s) {sorted(unknown)} (has {sorted(exported[name])})")
    return problems


def test_the_name_check_catches_unknown_names_and_labels(exported):
    problems = check_names([("probe", 'rate(rotorwatch_no_such_thing_total[5m])'),
                            ("probe", 'rotorwatch_sensor_ok{band="x", site=~".*"}'),
                            ("probe", 'rotorwatch_sensor_ok{machine="ef3"}')], exported)
    assert len(problems) == 2
    assert "rotorwatch_no_such_thing_total is not exported" in problems[0]
    assert "has no label(s) ['band']" in problems[1]


# ------------------------------------------------------------------------------------------- alerts
def test_alert_rules_pass_promtool_check(promtool):
    done = run([promtool, "check", "rules", str(ALERTS)])
    assert done.returncode == 0, done.stdout + done.stderr
    assert f"SUCCESS: {len(alert_exprs())} rules found" in done.stdout


def test_alert_rules_fire_as_their_unit_tests_say(promtool):
    done = run([promtool, "test", "rules", str(ALERT_TESTS)])
    assert done.returncode == 0, done.stdout + done.stderr
    assert "SUCCESS" in done.stdout


def test_alerts_cover_the_daemon_states():
    names = {name for name, _ in alert_exprs()}
    assert {"RotorwatchPointAlarm", "RotorwatchPointWarning", "RotorwatchSensorFault", "RotorwatchAgentDown",
            "RotorwatchAgentsAbsent", "RotorwatchUpdatesStalled", "RotorwatchPublishFailuresRising"} <= names
    exprs = dict(alert_exprs())
    # the states alerted on are states the daemon has (rotorwatch.alarms.records.STATES)
    from rotorwatch.alarms.records import STATES

    for name, expr in exprs.items():
        for state in re.findall(r'state="([a-z_]+)"', expr):
            assert state in STATES, f"{name}: unknown state {state!r}"
    assert "absent(up" in exprs["RotorwatchAgentsAbsent"]
    assert "up{" in exprs["RotorwatchAgentDown"] and "== 0" in exprs["RotorwatchAgentDown"]


def test_alert_metric_names_and_labels_exist(exported):
    assert check_names(alert_exprs(), exported) == []
    assert sum(len(selectors(e)) for _, e in alert_exprs()) >= 10


# --------------------------------------------------------------------------------------- prometheus
def test_example_scrape_config_passes_promtool(promtool):
    done = run([promtool, "check", "config", str(PROM_CONFIG)])
    assert done.returncode == 0, done.stdout + done.stderr
    assert "is valid prometheus config file syntax" in done.stdout
    cfg = yaml.safe_load(PROM_CONFIG.read_text())
    job = next(j for j in cfg["scrape_configs"] if j["job_name"] == "rotorwatch")
    assert job["honor_labels"] is True  # keeps the agent label as the agent wrote it


def compose() -> dict:
    return yaml.safe_load(COMPOSE.read_text())


def bind_mounts(service: dict) -> list[tuple[Path, str]]:
    out = []
    for vol in service.get("volumes", []):
        source, target = vol.split(":")[:2]
        if source.startswith((".", "/")):
            out.append(((COMPOSE.parent / source).resolve(), target))
    return out


def lay_out(service: dict, root: Path) -> None:
    """Copy a service's bind-mounted files to where the container would see them, under ``root``."""
    for source, target in bind_mounts(service):
        dest = root / target.lstrip("/")
        dest.parent.mkdir(parents=True, exist_ok=True)
        if source.is_dir():
            shutil.copytree(source, dest, dirs_exist_ok=True)
        else:
            shutil.copy2(source, dest)


def test_compose_prometheus_layout_passes_promtool(promtool, tmp_path):
    prom = compose()["services"]["prometheus"]
    lay_out(prom, tmp_path)
    config_flag = next(c for c in prom["command"] if c.startswith("--config.file="))
    config = tmp_path / config_flag.split("=", 1)[1].lstrip("/")
    done = run([promtool, "check", "config", str(config)])
    assert done.returncode == 0, done.stdout + done.stderr
    # it scrapes the agent service on the agent's metrics port
    targets = yaml.safe_load((config.parent / "targets" / "agent.yml").read_text())
    assert targets[0]["targets"] == [f"agent:{agent_config().metrics.port}"]


# ------------------------------------------------------------------------------------------ grafana
def test_dashboard_metric_names_and_labels_exist(exported):
    exprs = dashboard_exprs()
    assert len(exprs) >= 15
    assert check_names(exprs, exported) == []


def test_dashboard_queries_parse_with_promtool(promtool, tmp_path):
    substitutions = {"$__rate_interval": "5m", "$__range": "1h", "$site": ".*", "$agent": ".*",
                     "$machine": ".*", "$point": ".*"}
    rules = []
    for i, (where, expr) in enumerate(dashboard_exprs()):
        if expr.startswith("label_values("):  # Grafana's own function: check the selector inside it
            expr = expr[len("label_values("):].rsplit(",", 1)[0]
        for k, v in substitutions.items():
            expr = expr.replace(k, v)
        assert "$" not in expr, f"{where}: unknown variable in {expr!r}"
        rules.append({"record": f"dashboard:query_{i}", "expr": expr})
    path = tmp_path / "dashboard-queries.yml"
    path.write_text(yaml.safe_dump({"groups": [{"name": "dashboard", "rules": rules}]}))
    done = run([promtool, "check", "rules", str(path)])
    assert done.returncode == 0, done.stdout + done.stderr


def test_dashboard_structure():
    d = dashboard()
    assert d["uid"] == "rotorwatch-fleet"
    variables = {v["name"]: v for v in d["templating"]["list"]}
    assert list(variables) == ["datasource", "site", "agent", "machine", "point"]
    ids = [p["id"] for p in d["panels"]]
    assert len(ids) == len(set(ids))
    for p in d["panels"]:
        assert p["datasource"] == {"type": "prometheus", "uid": "${datasource}"}, p["title"]
        assert set(p["gridPos"]) == {"x", "y", "w", "h"} and p["gridPos"]["x"] + p["gridPos"]["w"] <= 24
    titles = " | ".join(p["title"] for p in d["panels"])
    for word in ("state", "speed", "Overall velocity", "bands", "updates", "problems"):
        assert word in titles, word
    overall = next(p for p in d["panels"] if p["title"].startswith("Overall velocity with"))
    steps = [s["value"] for s in overall["fieldConfig"]["defaults"]["thresholds"]["steps"]]
    # ISO 20816-3 group 2, rigid: A/B 1.4, B/C 2.8, C/D 4.5 mm/s (ISO 10816-3:2009 Table A.2; from memory,
    # unconfirmed: shared references.md section 1)
    assert steps == [None, 1.4, 2.8, 4.5]
    assert overall["fieldConfig"]["defaults"]["unit"] == "velocitymms"


def test_grafana_provisioning_matches_the_compose_mounts():
    ds = yaml.safe_load((DEPLOY / "grafana" / "provisioning" / "datasources" / "rotorwatch.yml").read_text())
    boards = yaml.safe_load((DEPLOY / "grafana" / "provisioning" / "dashboards" / "rotorwatch.yml").read_text())
    assert ds["apiVersion"] == 1 and boards["apiVersion"] == 1
    (source,) = ds["datasources"]
    assert source["type"] == "prometheus" and source["url"] == "http://prometheus:9090"
    (provider,) = boards["providers"]
    grafana = compose()["services"]["grafana"]
    targets = [t for _, t in bind_mounts(grafana)]
    assert f"{provider['options']['path']}/rotorwatch-dashboard.json" in targets
    assert "/etc/grafana/provisioning/datasources" in targets and "/etc/grafana/provisioning/dashboards" in targets


# ------------------------------------------------------------------------------------------ compose
def agent_config():
    from rotorwatch.settings.loading import load_config

    return load_config(DEPLOY / "compose" / "rotorwatch-demo.toml")


def test_compose_file_parses_and_mounts_existing_files():
    c = compose()
    assert set(c["services"]) == {"mosquitto", "agent", "prometheus", "grafana"}
    for name, service in c["services"].items():
        for source, _ in bind_mounts(service):
            assert source.exists(), f"service {name} mounts {source}, which does not exist"
        for port in service.get("ports", []):
            assert port.startswith("127.0.0.1:"), f"service {name} publishes {port} beyond loopback"
        assert "image" in service or "build" in service
    build = c["services"]["agent"]["build"]
    context = (COMPOSE.parent / build["context"]).resolve()
    dockerfile = context / build["dockerfile"]
    assert context == REPO and dockerfile.is_file()
    for line in dockerfile.read_text().splitlines():
        if line.startswith("COPY "):
            for src in line.split()[1:-1]:
                assert (context / src).exists(), f"{dockerfile.name}: COPY {src}: no such file in the build context"
    assert set(c["volumes"]) >= {v.split(":")[0] for s in c["services"].values() for v in s.get("volumes", [])
                                 if not v.startswith((".", "/"))}


def test_compose_agent_config_loads_in_the_container_layout(tmp_path):
    from rotorwatch.settings.loading import load_config
    from rotorwatch.simulators.scenario import load_scenario

    agent = compose()["services"]["agent"]
    lay_out(agent, tmp_path)
    config_arg = agent["command"][agent["command"].index("--config") + 1]
    config = load_config(tmp_path / config_arg.lstrip("/"))
    demo = load_config(REPO / "config" / "demo-fan.toml")
    assert config.machines == demo.machines, "deploy/compose/rotorwatch-demo.toml: machine drifted from config/demo-fan.toml"
    assert config.acquisition.source == "simulated"
    scenario = load_scenario((tmp_path / config_arg.lstrip("/")).parent / config.acquisition.scenario)
    assert scenario.machine.id == config.machines[0].id
    assert config.mqtt.host == "mosquitto" and config.status_page.port == 8717 and config.metrics.port == 9717
    published = {p.rsplit(":", 1)[1] for p in agent["ports"]}
    assert published == {str(config.status_page.port), str(config.metrics.port)}


def test_fleet_doc_names_files_that_exist():
    text = (DEPLOY / "fleet.md").read_text()
    paths = set(re.findall(r"`((?:deploy|config|tests)/[A-Za-z0-9_./-]+)`", text))
    assert len(paths) >= 5
    missing = sorted(p for p in paths if not (REPO / p).exists())
    assert missing == []
