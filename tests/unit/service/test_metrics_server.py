"""The metrics endpoint on a real socket (127.0.0.1, a free port): /metrics and /healthz served
together with the status page off, the status page's security headers, and the Host check that keeps
a browser elsewhere out (DNS rebinding)."""

from __future__ import annotations

import http.client
import json
from pathlib import Path

import pytest

from rotorwatch.publishers.base import SinkContext
from rotorwatch.publishers.prometheus import PrometheusSink
from rotorwatch.selfstats import SelfStats
from rotorwatch.settings.loading import load_config
from rotorwatch.settings.service import MetricsSettings
from rotorwatch.web.server import SECURITY_HEADERS

from .helpers import machine_update

REPO = Path(__file__).resolve().parents[3]


@pytest.fixture()
def sink(tmp_path):
    config = load_config(REPO / "config" / "demo-fan.toml")
    config = config.model_copy(update={"metrics": MetricsSettings(port=0), "status_page": None})
    sink = PrometheusSink.from_config(config, SinkContext(REPO / "config", tmp_path, SelfStats()))
    assert sink is not None
    sink.start()
    yield sink
    sink.close()


def get(sink, path: str, host: str = "127.0.0.1"):
    conn = http.client.HTTPConnection("127.0.0.1", sink.server.port, timeout=5)
    try:
        conn.request("GET", path, headers={"Host": f"{host}:{sink.server.port}"})
        r = conn.getresponse()
        return r.status, dict(r.getheaders()), r.read()
    finally:
        conn.close()


def test_healthz_waits_for_the_first_update_then_reads_ok(sink):
    status, headers, body = get(sink, "/healthz")
    assert status == 503 and json.loads(body) == {"status": "degraded", "reason": "waiting for the first update of ef3"}
    sink.on_update(machine_update(), None, sink.config.machines[0])
    status, headers, body = get(sink, "/healthz")
    assert status == 200 and json.loads(body) == {"status": "ok", "reason": "ok"}
    assert all(headers.get(k) == v for k, v in SECURITY_HEADERS.items())


def test_metrics_are_served_beside_it_with_the_same_headers(sink):
    sink.on_update(machine_update(), None, sink.config.machines[0])
    status, headers, body = get(sink, "/metrics")
    assert status == 200 and headers["Content-Type"].startswith("text/plain")
    agent = sink.config.site.agent_id
    assert f'rotorwatch_updates_total{{agent="{agent}",machine="ef3"}} 0.0'.encode() in body  # counted by the daemon
    assert b"rotorwatch_overall_velocity_meters_per_second" in body
    assert all(headers.get(k) == v for k, v in SECURITY_HEADERS.items())


def test_a_foreign_host_is_refused_on_loopback(sink):
    for path in ("/metrics", "/healthz"):
        status, _, body = get(sink, path, host="attacker.example")
        assert status == 421 and b"loopback only" in body
