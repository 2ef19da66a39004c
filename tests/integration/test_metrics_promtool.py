"""Real promtool (``promtool check metrics``, Prometheus' own linter) accepts the exposition of the
metrics publisher, and would flag a bad name."""

from __future__ import annotations

from pathlib import Path

from prometheus_client import generate_latest

from rotorwatch.publishers.prometheus import UpdateCollector, make_registry
from rotorwatch.selfstats import SelfStats
from rotorwatch.settings.loading import load_config
from unit.service.helpers import machine_update, stalled_update

CONFIG = load_config(Path(__file__).resolve().parents[2] / "config" / "demo-fan.toml")


def exposition(updates, stats):
    col = UpdateCollector(CONFIG, stats)
    for u in updates:
        col.observe(u)
    return generate_latest(make_registry(col)).decode()


def test_promtool_accepts_the_exposition(promtool):
    stats = SelfStats()
    for counter in (stats.updates_skipped, stats.input_overflows, stats.mqtt_reconnects):
        counter.inc()
    stats.config_reloads.labels(result="rejected").inc()
    stats.update_duration_seconds.labels(machine="ef3").set(0.05)
    text = exposition([machine_update(), stalled_update("ef3")], stats)
    rc, findings = promtool.check_metrics(text)
    assert rc == 0, findings


def test_promtool_would_flag_a_bad_name(promtool):
    """The check above can fail: promtool rejects a counter without _total (recipes §3)."""
    rc, findings = promtool.check_metrics("# HELP rotorwatch_x a\n# TYPE rotorwatch_x counter\nrotorwatch_x 1\n")
    assert rc != 0 and "_total" in findings
