"""How the status page looks at the end of the demo, in a real headless Chromium at 1366 and 800 px.

The demo scenario (``config/scenarios/demo-outer-race.toml``) is fed through the real pipeline to its
alarm, as the daemon would, with the input reported as ended (the scenario is over, its last state
held). On the envelope view of the faulty point, at both widths:

- the simulated-time notice is on the page, and the link says the input ended and the state is held;
- every marker label is inside the canvas, no two labels overlap, and the label of every defect
  fundamental is there (harmonics as room allows, none left out for this machine);
- a marker never hides the peak it marks: the pixel on the trace at the BPFO peak is the trace's
  colour, not the marker's;
- the point header keeps the point's name on at most two lines (at 800 px it used to squeeze into a
  one-word column);
- on the way to the alarm, a value above its alarm level that waits out its on-delay shows as pending.

Screenshots (full page) go to ``artifacts/`` (git-ignored): ``status-page-<width>-envelope-alarm.png``
and ``status-page-pending.png``. Look at them when the page changes.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from rotorwatch.web import views
from rotorwatch.web.server import StatusServer

from .chrome import Chrome, console_errors
from .test_status_page import ARTIFACTS, Feeder

pytestmark = pytest.mark.integration

WIDTHS = (1366, 800)
TRACE_RGB = (0x26, 0x3A, 0x73)  # --trace in style.css
BPFO_RGB = (0xA2, 0x3B, 0x84)  # FAMILY.bpfo in app.js


@pytest.fixture(scope="module")
def demo_end(tmp_path_factory):
    root = tmp_path_factory.mktemp("page-look")
    feeder = Feeder(root / "state")
    feeder.board.set_input("running", "samples flowing")
    feeder.feed(list(np.arange(0.0, 3.2, 0.25)) + [5.0, 7.5, 12.0, 16.0])
    # on towards the alarm, one update at a time, until a value waits out its on-delay above its alarm level
    pending_at = None
    for day in np.arange(17.0, 30.01, 0.25):
        feeder.feed([day])
        rows = views.value_rows(feeder.machine, feeder.last.points["de-h"].values)
        if any(r["pending"] == "alarm" for r in rows):
            pending_at = float(day)
            break
    server = StatusServer(feeder.board, "127.0.0.1", 0, poll_interval_s=0.5).start()
    try:
        yield root, feeder, server, pending_at
    finally:
        server.stop()


def _open(browser: Chrome, server, quantity: str | None = None) -> None:
    browser.get(server.url + "#m=ef3&p=de-h")
    assert browser.wait_js("return document.body.dataset.ready === '1' && "
                           "document.getElementById('spectrum').dataset.drawn === '1'", timeout_s=20.0)
    if quantity:
        browser.click(f'#quantity-seg button[data-q="{quantity}"]')
        assert browser.wait_js(f"return document.getElementById('spectrum').dataset.quantity === '{quantity}'")


def test_a_value_waiting_out_its_on_delay_shows_as_pending(demo_end):
    root, feeder, server, pending_at = demo_end
    assert pending_at is not None, "the demo scenario never held a value above its alarm level in its on-delay"
    assert feeder.last.points["de-h"].values["de-outer-race"].state == "warning"  # not yet alarm
    with Chrome(root / "chrome-pending", window=(1366, 900)) as browser:
        _open(browser, server)
        row = browser.js("""const r = document.querySelector('#values tr[data-value="de-outer-race"]');
                            return {state: r.dataset.state, pending: r.dataset.pending, text: r.innerText}""")
        assert row["state"] == "warning" and row["pending"] == "alarm" and "alarm pending" in row["text"]
        head = browser.js("return document.getElementById('point-head').innerText")
        assert "Warning" in head and "alarm pending" in head
        browser.screenshot(ARTIFACTS / "status-page-pending.png")
        assert console_errors(browser.console()) + browser.js("return window.__rwErrors") == []


@pytest.mark.parametrize("width", WIDTHS)
def test_the_envelope_view_in_alarm_is_legible(demo_end, width):
    root, feeder, server, _ = demo_end
    if feeder.last.state != "alarm":
        feeder.feed([28.0, 29.0, 29.5, 30.0])
    feeder.board.set_input("ended", "the simulated scenario has ended (acquisition.loop = false); the last state is held")
    assert feeder.last.state == "alarm"
    with Chrome(root / f"chrome-{width}", window=(width, 900)) as browser:
        _open(browser, server, "envelope")
        assert browser.wait_js("return document.getElementById('link').dataset.link === 'ended'", timeout_s=10.0)
        top = browser.js("""return {notice: document.getElementById('clock-notice').textContent,
                                     hidden: document.getElementById('clock-notice').hidden,
                                     link: document.getElementById('link-text').textContent,
                                     machine: document.querySelector('.machine').dataset.state,
                                     events: document.getElementById('events-hint').textContent}""")
        assert top["notice"] == "simulated time, x8640" and not top["hidden"]  # demo-fan.toml: speedup = 8640
        assert top["link"] == "input ended · last state held" and top["machine"] == "alarm"
        assert "simulated time, x8640" in top["events"]

        spec = browser.js("return Object.assign({}, document.getElementById('spectrum').dataset)")
        geo, labels = json.loads(spec["geometry"]), json.loads(spec["labels"])
        assert spec["labelsHidden"] == "0", labels
        for lab in labels:
            assert 0 <= lab["x"] and lab["x"] + lab["w"] <= geo["width"], lab  # not clipped
            assert lab["y"] >= 0, lab
        for i, a in enumerate(labels):
            for b in labels[i + 1:]:
                apart = (a["x"] + a["w"] <= b["x"] or b["x"] + b["w"] <= a["x"] or
                         a["y"] + a["h"] <= b["y"] or b["y"] + b["h"] <= a["y"])
                assert apart, (a, b)
        point = browser.js("return fetch('/api/point/ef3/de-h').then(r => r.json())")
        shown = [m for m in point["markers"] if m["family"] in ("bpfo", "bpfi", "bsf", "ftf")
                 and 0 < m["freq_hz"] <= geo["fmax"]]
        assert {(m["family"], m["k"]) for m in shown if m["k"] == 1} <= {(lab["family"], lab["k"]) for lab in labels}

        # the BPFO peak: the trace's pixel at its top is the trace's colour, not the marker's
        bpfo = next(m for m in shown if m["family"] == "bpfo" and m["k"] == 1)
        env = point["spectra"]["envelope"]
        f, a = np.asarray(env["freqs_hz"], float), np.asarray([v or 0.0 for v in env["amplitude"]], float)
        near = np.flatnonzero(np.abs(f - bpfo["freq_hz"]) <= 0.02 * bpfo["freq_hz"])
        i = int(near[np.argmax(a[near])])
        x = geo["x0"] + (geo["x1"] - geo["x0"]) * f[i] / geo["fmax"]
        y = geo["y1"] - (geo["y1"] - geo["y0"]) * (a[i] - geo["yLo"]) / (geo["yHi"] - geo["yLo"])
        pixels = browser.js("""const c = document.querySelector('#spectrum canvas'), k = c.width / c.clientWidth;
            const ctx = c.getContext('2d'), out = [];
            for (let dy = 0; dy <= 3; dy++) out.push(Array.from(ctx.getImageData(Math.round(arguments[0] * k),
                Math.round((arguments[1] + dy) * k), 1, 1).data));
            return out;""", x, y)
        def dist(p, rgb):
            return sum((p[j] - rgb[j]) ** 2 for j in range(3)) ** 0.5
        assert any(dist(p, TRACE_RGB) < dist(p, BPFO_RGB) and p[3] > 0 for p in pixels), pixels

        # the point header: the point's name on at most two lines
        title = browser.js("""const t = document.querySelector('#point-head .title');
            return {h: t.getBoundingClientRect().height, lh: parseFloat(getComputedStyle(t).lineHeight) ||
                    1.4 * parseFloat(getComputedStyle(t).fontSize), w: t.getBoundingClientRect().width}""")
        assert title["h"] <= 2.2 * title["lh"] and title["w"] >= 250, title

        ARTIFACTS.mkdir(exist_ok=True)
        browser.screenshot(ARTIFACTS / f"status-page-{width}-envelope-alarm.png")
        assert console_errors(browser.console()) + browser.js("return window.__rwErrors") == []
