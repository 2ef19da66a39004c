"""The status page in a real headless Chromium, fed by the real pipeline on the demo scenario.

A StatusServer (127.0.0.1, port 0) serves a StatusBoard that receives MachinePipeline updates of the
demo fan, computed from simulator snapshots of ``config/scenarios/demo-outer-race.toml``: three days
of healthy running (the baseline is learned), then the outer-race spall at days 26-30. Chromium
(through chromedriver's WebDriver API) must load the page without console errors, show the machine's
states, draw the spectra with band regions and defect-frequency markers, and follow the fault as it
grows (the page polls every second). Screenshots go to ``artifacts/`` (gitignored).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from rotorwatch.pipeline import MachinePipeline
from rotorwatch.simulators.render import ScenarioRenderer
from rotorwatch.simulators.scenario import load_scenario
from rotorwatch.web.board import StatusBoard
from rotorwatch.web.server import StatusServer

from .chrome import Chrome, console_errors

pytestmark = pytest.mark.integration

REPO = Path(__file__).resolve().parents[2]
SCENARIO = REPO / "config" / "scenarios" / "demo-outer-race.toml"
ARTIFACTS = REPO / "artifacts"
T0_S = 1_767_225_600.0  # 2026-01-01T00:00Z: scenario time zero on the wall clock
DAY_S = 86400.0
WINDOW_S = 4.0


class Feeder:
    """Scenario snapshots -> MachinePipeline -> StatusBoard, as the daemon's loop does."""

    def __init__(self, state_dir: Path) -> None:
        self.scenario = load_scenario(SCENARIO)
        self.renderer = ScenarioRenderer(self.scenario)
        self.config = self.scenario.config
        self.machine = self.scenario.machine
        self.pipeline = MachinePipeline(self.config, self.machine, state_dir, keep_spectra=True)
        self.board = StatusBoard(self.config)
        self.fs_hz = self.config.acquisition.sample_rate_hz
        self.last = None

    def feed(self, days) -> None:
        for day in days:
            t = float(day) * DAY_S
            blocks = self.renderer.snapshot(t, WINDOW_S, self.fs_hz)
            self.last = self.pipeline.step(T0_S + t, blocks)
            self.board.publish(self.last, blocks)


@pytest.fixture(scope="module")
def page(tmp_path_factory):
    root = tmp_path_factory.mktemp("status-page")
    feeder = Feeder(root / "state")
    # healthy: every 3 h over the 72 h learning period and a little beyond, then quiet days before the
    # spall starts (day 8 in the scenario)
    feeder.feed(list(np.arange(0.0, 3.2, 0.125)) + [5.0, 7.5])
    server = StatusServer(feeder.board, "127.0.0.1", 0, poll_interval_s=1.0).start()
    browser = Chrome(root / "chrome", window=(1366, 900))
    try:
        yield feeder, server, browser
    finally:
        browser.close()
        server.stop()


def _ready(browser: Chrome, revision: int) -> bool:
    """Wait (bounded) until the page has drawn the point view of board revision ``revision``."""
    return bool(browser.wait_js(
        "return document.body.dataset.ready === '1' && "
        f"document.getElementById('spectrum').dataset.revision === '{revision}'", timeout_s=20.0))


def _machine_state(browser: Chrome) -> dict:
    return browser.js("""
        const card = document.querySelector('.machine[data-machine="ef3"]');
        const rows = {};
        document.querySelectorAll('.points li').forEach((li) => {
            rows[li.dataset.point] = {state: li.dataset.state, overall: li.dataset.overall, zone: li.dataset.zone};
        });
        return {state: card && card.dataset.state, text: card && card.innerText, points: rows};
    """)


def _spectrum(browser: Chrome) -> dict:
    return browser.js("return Object.assign({}, document.getElementById('spectrum').dataset)")


def test_page_loads_clean_and_shows_the_healthy_machine(page):
    feeder, server, browser = page
    browser.get(server.url + "#m=ef3&p=de-h")
    assert _ready(browser, feeder.board.revision("ef3")), "page never finished its first render"
    state = _machine_state(browser)
    assert feeder.last.state == "normal"
    assert state["state"] == "normal"
    assert "Filter hall exhaust fan EF-3" in state["text"] and "Normal" in state["text"]
    assert "1,482 r/min" in state["text"] or "1482 r/min" in state["text"]
    assert {p: s["state"] for p, s in state["points"].items()} == {"de-h": "normal", "nde-h": "normal"}
    overall = feeder.last.points["de-h"].result.overall_velocity_mm_s
    assert float(state["points"]["de-h"]["overall"]) == pytest.approx(overall, rel=1e-3)
    assert state["points"]["de-h"]["zone"] == feeder.last.points["de-h"].result.iso_zone == "A"

    # velocity spectrum (the default): drawn, with the shaft and blade-pass markers and the band regions
    spec = _spectrum(browser)
    assert spec["drawn"] == "1" and spec["quantity"] == "velocity"
    assert int(spec["points"]) > 100
    # 1x..4x and blade pass (271.7 Hz) below the 1000 Hz overall band edge: 4 + 3 (BP, 2xBP, 3xBP at 815 Hz),
    # and the electrical lines of the 50 Hz motor: 2xLF, 4xLF, 6xLF (100, 200, 300 Hz)
    assert int(spec["markers"]) == 10
    assert int(spec["regions"]) >= 4  # shaft-1x, shaft-2x, blade-pass x2, overall range

    # envelope spectrum: the bearing defect markers of fan-de
    browser.click('#quantity-seg button[data-q="envelope"]')
    spec = _spectrum(browser)
    assert spec["drawn"] == "1" and spec["quantity"] == "envelope"
    assert int(spec["markers"]) >= 8
    chips = browser.js("return [...document.querySelectorAll('#marker-chips .chip')].map(c => c.dataset.family)")
    assert {"bpfo", "bpfi", "bsf", "ftf", "shaft", "electrical"} <= set(chips)
    # log scale toggles without errors and keeps the same lines
    browser.click('#scale-seg button[data-scale="log"]')
    spec_log = _spectrum(browser)
    assert spec_log["scale"] == "log" and spec_log["points"] == spec["points"]
    assert browser.js("return document.getElementById('waveform').dataset.drawn") == "1"
    assert int(browser.js("return document.getElementById('trend').dataset.samples")) == 28

    ARTIFACTS.mkdir(exist_ok=True)
    browser.screenshot(ARTIFACTS / "status-page-healthy.png")
    errors = console_errors(browser.console()) + browser.js("return window.__rwErrors")
    assert errors == []


def test_page_follows_the_growing_fault(page):
    feeder, server, browser = page
    before = _machine_state(browser)
    assert before["state"] == "normal", "run after the healthy test (same module, same page)"
    outer_before = browser.js("return document.querySelector('#values tr[data-value=\"de-outer-race\"]').dataset.reading")

    feeder.feed([19.0, 19.5, 20.0, 26.0, 28.0, 29.0, 29.25, 29.5, 29.75, 30.0])  # warning, then alarm
    assert feeder.last.state == "alarm", feeder.last.reason
    revision = feeder.board.revision("ef3")
    # the page polls every second: the alarm must show within a bounded wait
    shown = browser.wait_js("return document.querySelector('.machine[data-machine=\"ef3\"]').dataset.state", timeout_s=15.0)
    assert shown and _ready(browser, revision)
    after = _machine_state(browser)
    assert after["state"] == "alarm" and "Alarm" in after["text"]
    assert after["points"]["de-h"]["state"] == "alarm"
    assert "de-outer-race" in after["text"]  # the reason names the band
    overall = feeder.last.points["de-h"].result.overall_velocity_mm_s
    assert float(after["points"]["de-h"]["overall"]) == pytest.approx(overall, rel=1e-3)
    assert float(after["points"]["de-h"]["overall"]) > float(before["points"]["de-h"]["overall"])

    row = browser.js("""const r = document.querySelector('#values tr[data-value="de-outer-race"]');
                        return {state: r.dataset.state, reading: r.dataset.reading}""")
    assert row["state"] == "alarm"
    assert float(row["reading"]) > 4 * float(outer_before)
    assert int(browser.js("return document.getElementById('trend').dataset.samples")) == 38
    events = browser.js("return [...document.querySelectorAll('#events li')].map(li => li.dataset.to)")
    assert "alarm" in events and "warning" in events
    title = browser.js("return document.title")
    assert title.startswith("Alarm")

    # the finding reads with its severity and where its line was found (agent/analysis/findings.py)
    finding = browser.js("return document.getElementById('findings').textContent")
    assert "BPFO on fan-de" in finding and "severity" in finding and "dB over the local floor" in finding, finding
    # the envelope view of the faulty bearing: BPFO region now in alarm, markers drawn
    browser.click('#quantity-seg button[data-q="envelope"]')
    spec = _spectrum(browser)
    assert spec["quantity"] == "envelope" and int(spec["markers"]) >= 8 and int(spec["regions"]) >= 3
    browser.js("document.getElementById('trend-select').value = 'de-outer-race';"
               "document.getElementById('trend-select').dispatchEvent(new Event('change'))")
    assert browser.js("return document.getElementById('trend').dataset.value") == "de-outer-race"
    browser.screenshot(ARTIFACTS / "status-page-fault.png")
    errors = console_errors(browser.console()) + browser.js("return window.__rwErrors")
    assert errors == []


def test_page_reports_a_lost_agent(page):
    feeder, server, browser = page
    server.stop()  # the agent goes away; the page keeps polling the same address
    lost = browser.wait_js("return document.getElementById('link').dataset.link === 'lost'", timeout_s=10.0)
    assert lost, "the page did not notice the agent going away"
    assert "no answer" in browser.js("return document.getElementById('link-text').textContent")
    # what was on screen stays readable
    assert _machine_state(browser)["state"] == "alarm"
