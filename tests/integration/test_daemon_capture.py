"""``rotorwatch run`` as a subprocess capturing from a real sound interface path: PortAudio -> ALSA's
pulse plugin -> a PulseAudio pipe source (tests/conftest.py, shared recipes section 1), fed at real-time
pace with a signal of known content.

The signal is the demo scenario of our own making (config/scenarios/demo-outer-race.toml) rendered by
the simulator at day 28, when the drive-end outer-race spall is well grown. It is fed as digital full
scale: ``volts / sensor.input_range_v`` (the soundcard source multiplies by ``input_range_v``, so digital
1.0 is ``input_range_v`` volts). What comes out is checked against outside facts and an independent run:

- the samples counter against the frames the writer put into the FIFO (within one block);
- the waveform of an evidence snapshot against the fed signal, sample for sample (the pipe source is
  bit-exact: shared recipes section 1), and the values of that update (overall velocity, band values
  incl. the envelope bands) against an in-process :class:`~rotorwatch.pipeline.MachinePipeline` run on
  the same samples: the daemon must compute exactly what the library computes;
- every other update against that reference within the window-to-window spread of a stationary signal;
- the states: the drive-end point in alarm on its outer-race envelope band, the other point not.

Then the input goes away twice: the feed pauses (a stalled converter: sensor_fault / stalled within about
two update intervals, recovery after it resumes), and the pipe source is unloaded from the sound server
(an interface unplugged: the daemon stays up, reports it and retries until it is back). Each daemon is
stopped with SIGTERM by its PID and must exit 0. Every wait is bounded.
"""

from __future__ import annotations

import json
import os
import re
import signal
import time
import uuid
from pathlib import Path

import numpy as np
import pytest

from components import MqttListener, wait_until

from .daemon_support import (
    REPO_ROOT,
    DaemonProcess,
    as_json,
    daemon_config,
    messages,
    wait_message,
    write_setup,
)

pytestmark = pytest.mark.integration

AGENT = "halden-ef3"  # site.agent_id of the demo configuration
FS = 48000  # rw_pipe_2ch: 48000 Hz, 2 channels
BLOCK = 4800  # 0.1 s blocks (PortAudio honours the block size through the pulse plugin: recipes)
INTERVAL_S = 1.0
WINDOW_S = 1.0
INPUT_RANGE_V = 2.0  # digital full scale = 2 V: the fed digital signal is volts / 2
DAY_S = 86400.0
FEED_DAY = 28.0
SIGNAL_S = 16.0  # looped; the exact comparison uses a snapshot taken before the first wrap
POINTS = ("de-h", "nde-h")  # channels 0 and 1 of the demo machine

# Absolute levels on the envelope bands, read off the in-process pipeline for this signal: at day 28
# de-outer-race reads 0.06-0.085 m/s^2 and nde-outer-race 0.010-0.017 m/s^2 over the 1 s windows at
# 48 kHz (the test checks the levels still sit clear of those spreads, in case the demo changes).
OUTER_RACE_LEVELS = {"warning": 0.03, "alarm": 0.04, "on_delay_updates": 1, "latching": False,
                     "clear_margin_pct": 10.0}


def unique_prefix() -> str:
    return f"rwcap-{uuid.uuid4().hex[:8]}"


@pytest.fixture
def daemons():
    started: list[DaemonProcess] = []
    yield started
    for d in started:
        d.stop()


@pytest.fixture(scope="module")
def fed_signal():
    """Sensor volts of the demo machine at day 28 (float64, per point), from the simulator."""
    from rotorwatch.simulators.render import ScenarioRenderer
    from rotorwatch.simulators.scenario import load_scenario

    renderer = ScenarioRenderer(load_scenario(REPO_ROOT / "config" / "scenarios" / "demo-outer-race.toml"))
    volts = renderer.snapshot(FEED_DAY * DAY_S, SIGNAL_S, float(FS))
    digital = np.stack([volts[p] / INPUT_RANGE_V for p in POINTS], axis=1).astype(np.float32)
    # what the soundcard source hands the rings: digital float32 times full_scale_v in float32
    captured_v = digital * np.float32(INPUT_RANGE_V)
    return digital, captured_v


def capture_config(broker, prefix: str, device: str) -> dict:
    cfg = daemon_config(broker, prefix=prefix, update_interval_s=INTERVAL_S,
                        mqtt={"metrics_interval_s": 0.2},  # every update's metrics go out
                        acquisition={"source": "soundcard", "device": device, "sample_rate_hz": FS,
                                     "channels": 2, "block_frames": BLOCK, "speedup": 1.0})
    del cfg["acquisition"]["scenario"]
    m = cfg["machines"][0]
    m["analysis"]["window_s"] = WINDOW_S
    for p in m["points"]:
        p["sensor"]["input_range_v"] = INPUT_RANGE_V
    for band in m["bands"]:
        if band["name"] in ("de-outer-race", "nde-outer-race"):
            band["levels"] = dict(OUTER_RACE_LEVELS)
    return cfg


def scrape_value(text: str, name: str, **labels: str) -> float | None:
    """Sum of the samples of ``name`` whose labels include ``labels`` (None when there is none)."""
    total, seen = 0.0, False
    for line in text.splitlines():
        if not line.startswith(name) or line.startswith("#"):
            continue
        head, _, value = line.rpartition(" ")
        metric, _, label_text = head.partition("{")
        if metric != name:
            continue
        have = dict(re.findall(r'(\w+)="([^"]*)"', label_text))
        if all(have.get(k) == v for k, v in labels.items()):
            total += float(value)
            seen = True
    return total if seen else None


def wait_started(d: DaemonProcess, count: int = 1, timeout_s: float = 30.0) -> None:
    """Until the source has been opened ``count`` times (the capture stream records)."""
    ok = wait_until(lambda: d.log().count("source started") >= count or not d.alive(), timeout_s, 0.05)
    assert ok and d.alive(), d.describe()


def settled_counter(d: DaemonProcess, timeout_s: float = 3.0) -> float | None:
    """rotorwatch_samples_captured_total once two scrapes 0.25 s apart agree (None if it keeps moving)."""
    last = None
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        now = scrape_value(d.scrape(), "rotorwatch_samples_captured_total")
        if now is not None and now == last:
            return now
        last = now
        time.sleep(0.25)
    return None


def locate(window: np.ndarray, signal_: np.ndarray) -> int | None:
    """Start index of ``window`` inside the looped ``signal_``, matched exactly, or None."""
    n = window.size
    tiled = np.concatenate((signal_, signal_[:n]))
    for start in np.flatnonzero(tiled[: signal_.size] == window[0]):
        if np.array_equal(tiled[start:start + n], window):
            return int(start)
    return None


def point_states(listener, root: str, pid: str, since: int = 0) -> list[dict]:
    topic = f"{root}/machine/ef3/point/{pid}/state"
    return [as_json(m) for m in list(listener.messages)[since:] if m.topic == topic]


def reference_pipeline(config_path: Path, state_dir: Path):
    from rotorwatch.pipeline import MachinePipeline
    from rotorwatch.settings.loading import load_config

    config = load_config(config_path)
    return MachinePipeline(config, config.machines[0], state_dir=state_dir), config


# ------------------------------------------------------------------------------------------------
def test_capture_matches_the_library_then_stalls_and_recovers(mosquitto_broker, pulse_audio, audio_env,
                                                             fed_signal, tmp_path, daemons):
    digital, captured_v = fed_signal
    prefix = unique_prefix()
    root = f"{prefix}/{AGENT}"
    cfg = capture_config(mosquitto_broker, prefix, "rw_pipe_2ch")
    listener = MqttListener(mosquitto_broker, topics=[f"{root}/#"]).connect()
    feed = None
    try:
        t0 = time.monotonic()
        d = DaemonProcess(write_setup(tmp_path, cfg), env=audio_env)
        daemons.append(d)
        wait_started(d)
        feed = pulse_audio.feed(digital, "rw_pipe_2ch", loop=True)  # capture records first, then feed
        t_feed = time.monotonic()
        print(f"\nsource open {t_feed - t0:.2f} s after start")

        # -- healthy phase: a few updates at 1 s -------------------------------------------------
        good = wait_until(lambda: len([s for s in point_states(listener, root, "de-h") if s["overall"]["velocity_mm_s"]]) >= 4,
                          20)
        assert good, d.describe()
        print(f"4 analysed updates {time.monotonic() - t_feed:.2f} s after the feed started")
        listener.client.publish(f"{root}/command", json.dumps({"command": "snapshot", "machine": "ef3", "id": "s1"}), qos=1)
        res = wait_message(listener, f"{root}/command/result", lambda m: as_json(m).get("id") == "s1", 10)
        assert res is not None and as_json(res)["ok"], res and as_json(res)
        folder = Path(as_json(res)["paths"][0])
        folder = folder if folder.is_absolute() else tmp_path / folder
        sidecar = json.loads((folder / "snapshot.json").read_text())

        # -- stall: the converter stops delivering ------------------------------------------------
        n_before_pause = len(listener.messages)
        feed.pause()
        t_pause = time.monotonic()
        # the counter: every fed frame was captured, on both channels in use, bar one block in flight
        captured = settled_counter(d)
        assert captured is not None, d.describe()
        fed_frames = feed.frames_written
        print(f"fed {fed_frames} frames, captured {captured / 2:.0f} per channel")
        assert abs(captured - 2 * fed_frames) <= 2 * BLOCK, (captured, fed_frames)

        stalled = wait_until(lambda: [s for s in point_states(listener, root, "de-h", n_before_pause)
                                      if s["sensor"]["fault"] == "stalled"], 2 * INTERVAL_S + 4)
        t_stalled = time.monotonic() - t_pause
        assert stalled, d.describe()
        print(f"stall reported {t_stalled:.2f} s after the feed paused")
        assert t_stalled < 2 * INTERVAL_S + 2.0  # two update intervals, plus the loaded box's slack
        assert stalled[0]["state"] == "sensor_fault" and "stalled" in stalled[0]["reason"]
        assert wait_until(lambda: [s for s in point_states(listener, root, "nde-h", n_before_pause)
                                   if s["state"] == "sensor_fault" and s["sensor"]["fault"] == "stalled"], 3)
        # what a dashboard connecting now is told: the retained state is the fault
        with MqttListener(mosquitto_broker, topics=[f"{root}/machine/ef3/point/de-h/state"]) as late:
            kept = wait_message(late, f"{root}/machine/ef3/point/de-h/state", timeout_s=5)
            assert kept is not None and kept.retain and as_json(kept)["state"] == "sensor_fault"

        n_before_resume = len(listener.messages)
        feed.resume()
        t_resume = time.monotonic()
        back = wait_until(lambda: [s for s in point_states(listener, root, "de-h", n_before_resume)
                                   if s["sensor"]["ok"] and s["overall"]["velocity_mm_s"]], 20)
        assert back, d.describe()
        print(f"analysis back {time.monotonic() - t_resume:.2f} s after the feed resumed")
        assert back[0]["state"] == "alarm"
        text = d.scrape()
        assert scrape_value(text, "rotorwatch_source_stalls_total") >= 1
        assert scrape_value(text, "rotorwatch_source_reopens_total") >= 2
        assert scrape_value(text, "rotorwatch_source_up") == 1.0
        assert d.alive()

        t_stop = time.monotonic()
        d.signal(signal.SIGTERM)
        rc = d.wait(15)
        assert rc == 0, d.describe()
        print(f"SIGTERM -> exit 0 in {time.monotonic() - t_stop:.2f} s (while the input streams)")
    finally:
        listener.close()
        if feed is not None:
            pulse_audio.stop_feeds([feed])
    log = d.log()
    assert "Traceback" not in log and "rotorwatch stopped" in log

    # -- the snapshot's windows are the fed samples, bit for bit --------------------------------------
    from rotorwatch.storage.snapshots import SnapshotStore

    store = SnapshotStore(tmp_path / "state" / "snapshots")
    n_window = int(WINDOW_S * FS)
    n_signal = captured_v.shape[0]
    pipeline, config = reference_pipeline(d.config_path, tmp_path / "reference-state")
    machine = config.machines[0]
    starts = []
    for i, pid in enumerate(POINTS):
        wave, fs = store.read_waveform(sidecar["id"], pid)
        assert fs == FS and wave.shape == (n_window,)
        # the daemon's calibration: volts / sensitivity, stored as float32 m/s^2
        fed_m_s2 = (captured_v[:, i].astype(np.float64) / machine.point(pid).sensor.volts_per_m_s2).astype(np.float32)
        start = locate(wave, fed_m_s2)
        assert start is not None, f"{pid}: the snapshot window is not a run of the fed samples"
        print(f"{pid}: snapshot window = fed frames {start}..{start + n_window} (block {start / BLOCK:.2f})")
        starts.append(start)
    assert starts[0] == starts[1], "the two points' windows of one update are not simultaneous"

    # -- the library on every window the daemon could have analysed before the pause ------------------
    # The capture is continuous until the pause, so those windows start at the snapshot's phase within a
    # block plus whole blocks (PortAudio hands out exact 4800-frame blocks).
    phase = starts[0] % BLOCK
    tiled = np.concatenate((captured_v, captured_v[:n_window]))
    reference = {}
    for k in range(n_signal // BLOCK):
        first = phase + k * BLOCK
        update = pipeline.step(1000.0 + k, {pid: tiled[first:first + n_window, i] for i, pid in enumerate(POINTS)})
        reference[k] = update
    pipeline.close()
    k_snap = (starts[0] - phase) // BLOCK

    # -- the snapshot's update: exactly what the library computes ------------------------------------
    expected = reference[k_snap]
    for pid in POINTS:
        want = expected.points[pid].result
        got = sidecar["points"][pid]
        assert got["overall_velocity_mm_s"] == pytest.approx(want.overall_velocity_mm_s, rel=1e-6)
        assert got["iso_zone"] == want.iso_zone == "A"  # ~1.2 mm/s, ISO 20816-3 group 2 rigid A/B at 1.4
        assert set(got["band_values"]) == set(want.bands)
        for name, value in want.bands.items():
            assert got["band_values"][name] == pytest.approx(value, rel=1e-6), (pid, name)

    # -- every update published before the pause: found among those windows by its time -------------
    # (MQTT values carry 6 significant digits: rel 1e-5.) The source clock advances by exactly one block
    # per block within an unbroken run, so the time offset from the snapshot is a whole number of blocks.
    checked = 0
    for pid in POINTS:
        for m in list(listener.messages)[:n_before_pause]:
            if m.topic != f"{root}/machine/ef3/point/{pid}/metrics":
                continue
            body = as_json(m)
            blocks = (body["time_s"] - sidecar["time_s"]) * FS / BLOCK
            assert abs(blocks - round(blocks)) < 0.01, (pid, body["time"], blocks)
            want = reference[(k_snap + round(blocks)) % len(reference)].points[pid].result
            assert body["overall_velocity_mm_s"] == pytest.approx(want.overall_velocity_mm_s, rel=1e-5)
            for name, value in want.bands.items():
                assert body["bands"][name]["value"] == pytest.approx(value, rel=1e-5), (pid, name, body["time"])
            checked += 1
    assert checked >= 6, checked

    # -- after the resume the windows sit anywhere (frames were dropped while no stream recorded):
    # the stationary signal keeps them within the spread the library finds over all windows, plus 10 %
    for pid in POINTS:
        spread = {name: (min(u.points[pid].result.bands[name] for u in reference.values()),
                         max(u.points[pid].result.bands[name] for u in reference.values()))
                  for name in expected.points[pid].result.bands}
        overall = [u.points[pid].result.overall_velocity_mm_s for u in reference.values()]
        print(f"{pid}: overall {min(overall):.4g}..{max(overall):.4g} mm/s, "
              + ", ".join(f"{n} {lo:.4g}..{hi:.4g}" for n, (lo, hi) in spread.items()))
        after = [as_json(m) for m in list(listener.messages)[n_before_resume:]
                 if m.topic == f"{root}/machine/ef3/point/{pid}/metrics"]
        assert after
        for body in after:
            assert 0.9 * min(overall) <= body["overall_velocity_mm_s"] <= 1.1 * max(overall)
            for name, (lo, hi) in spread.items():
                assert 0.9 * lo <= body["bands"][name]["value"] <= 1.1 * hi, (pid, name, body["time"])

    # -- states: outer-race alarm on the drive end only ------------------------------------------------
    de_low = min(u.points["de-h"].result.bands["de-outer-race"] for u in reference.values())
    nde_high = max(u.points["nde-h"].result.bands["nde-outer-race"] for u in reference.values())
    assert de_low > 1.2 * OUTER_RACE_LEVELS["alarm"] and nde_high < OUTER_RACE_LEVELS["warning"] / 1.2, \
        f"OUTER_RACE_LEVELS no longer fit the demo signal (de-outer-race >= {de_low:.4g}, nde-outer-race <= {nde_high:.4g})"
    analysed = [s for s in point_states(listener, root, "de-h") if s["overall"]["velocity_mm_s"]]
    assert analysed and all(s["state"] == "alarm" for s in analysed)
    assert all(s["values"]["de-outer-race"]["state"] == "alarm" for s in analysed)
    assert expected.points["de-h"].values["de-outer-race"].state == "alarm"
    # nde-h: below its absolute levels, still learning its baseline (learning_hours 1000 in these tests)
    assert expected.points["nde-h"].values["nde-outer-race"].state == "learning"
    other = [s for s in point_states(listener, root, "nde-h") if s["overall"]["velocity_mm_s"]]
    assert other and all(s["state"] == "learning" and s["values"]["nde-outer-race"]["state"] == "learning"
                         for s in other)
    machine_states = [as_json(m)["state"] for m in messages(listener, f"{root}/machine/ef3/state")]
    assert "alarm" in machine_states


# ------------------------------------------------------------------------------------------------
def _module_index(pulse_audio, source_name: str) -> str:
    listing = pulse_audio._pactl("list", "short", "modules").stdout
    for line in listing.splitlines():
        if f"source_name={source_name} " in line + " ":
            return line.split()[0]
    raise AssertionError(f"module of {source_name} not in:\n{listing}")


def test_vanished_device_is_reported_and_retried_until_it_is_back(mosquitto_broker, pulse_audio, audio_env,
                                                                 fed_signal, tmp_path, daemons):
    digital, _ = fed_signal
    name = f"rw_vanish_{os.getpid()}_{uuid.uuid4().hex[:6]}"
    source = pulse_audio.add_pipe_source(name, FS, 2)  # private: this test unloads it
    module_args = pulse_audio._module_args(source)
    prefix = unique_prefix()
    root = f"{prefix}/{AGENT}"
    listener = MqttListener(mosquitto_broker, topics=[f"{root}/#"]).connect()
    feeds = []
    loaded = True
    try:
        d = DaemonProcess(write_setup(tmp_path, capture_config(mosquitto_broker, prefix, name)), env=audio_env)
        daemons.append(d)
        wait_started(d)
        feeds.append(pulse_audio.feed(digital, source, loop=True))
        assert wait_until(lambda: [s for s in point_states(listener, root, "de-h") if s["overall"]["velocity_mm_s"]], 20), \
            d.describe()

        # the interface goes away: the writer stops, the sound server drops the source
        pulse_audio.stop_feeds(feeds)
        feeds.clear()
        done = pulse_audio._pactl("unload-module", _module_index(pulse_audio, name))
        assert done.returncode == 0, done.stderr
        loaded = False
        t_gone = time.monotonic()
        n = len(listener.messages)
        gone = wait_until(lambda: [s for s in point_states(listener, root, "de-h", n)
                                   if s["state"] == "no_data" and name in s["reason"]], 15)
        assert gone, d.describe()
        print(f"\nunplugged device reported {time.monotonic() - t_gone:.2f} s after the unload: {gone[0]['reason']!r}")
        assert "input unavailable" in gone[0]["reason"]
        text = d.scrape()
        reopens = scrape_value(text, "rotorwatch_source_reopens_total")
        assert scrape_value(text, "rotorwatch_source_up") == 0.0
        # it keeps trying (back-off 0.5 s doubling) and stays up
        assert wait_until(lambda: scrape_value(d.scrape(), "rotorwatch_source_reopens_total") > reopens, 6), d.describe()
        assert d.alive()
        warnings = [ln for ln in d.log().splitlines() if ln.startswith("WARNING") and "source unavailable" in ln]
        assert warnings and all(name in ln for ln in warnings)

        # plugged back in: same name, a new FIFO; the next retry finds it
        done = pulse_audio._pactl("load-module", "module-pipe-source", *module_args)
        assert done.returncode == 0, done.stderr
        loaded = True
        t_back = time.monotonic()
        opened = d.log().count("source started")
        wait_started(d, opened + 1, timeout_s=20)
        feeds.append(pulse_audio.feed(digital, source, loop=True))
        n = len(listener.messages)
        back = wait_until(lambda: [s for s in point_states(listener, root, "de-h", n)
                                   if s["sensor"]["ok"] and s["overall"]["velocity_mm_s"]], 20)
        assert back, d.describe()
        print(f"analysis back {time.monotonic() - t_back:.2f} s after the source was loaded again")
        assert back[0]["state"] == "alarm"

        t_stop = time.monotonic()
        d.signal(signal.SIGTERM)
        assert d.wait(15) == 0, d.describe()
        print(f"SIGTERM -> exit 0 in {time.monotonic() - t_stop:.2f} s")
    finally:
        listener.close()
        pulse_audio.stop_feeds(feeds)
        if loaded:
            pulse_audio._pactl("unload-module", _module_index(pulse_audio, name))
    assert "Traceback" not in d.log()


# ------------------------------------------------------------------------------------------------
def test_messages_held_while_the_broker_was_away_are_confirmed(make_mosquitto_broker, tmp_path):
    """Found through the stops above, which took 3.5 s instead of under 1 s: the retained ``info`` a
    daemon publishes before its first connection was re-sent by the old spool forwarder under a new
    message id, and the link kept waiting for the old id (today the outbox holds it until connected), so every clean stop sat out the whole flush timeout
    and then asked the broker for the last will instead of confirming its own ``offline``."""
    from rotorwatch.publishers.mqtt.link import MqttLink
    from rotorwatch.selfstats import SelfStats
    from rotorwatch.settings.service import MqttSettings
    from rotorwatch.storage.spool import Spool

    broker = make_mosquitto_broker()
    broker.stop()  # the daemon starts while the broker is away
    settings = MqttSettings(host=broker.host, port=broker.port, topic_prefix=unique_prefix(),
                            reconnect_min_s=0.2, reconnect_max_s=0.5)
    spool = Spool(tmp_path / "spool.sqlite")
    link = MqttLink(settings, "edge-1", tmp_path, SelfStats(), spool=spool)
    link.start()
    try:
        assert link.publish(link.topics.info, b'{"agent": "edge-1"}', retain=True)  # the outbox holds it offline
        assert link.pending == 1
        broker.start()
        assert link.wait_connected(10)
        assert link.flush(5.0), f"{link.pending} acknowledgement(s) never matched"
        with MqttListener(broker, topics=[link.topics.info]) as late:
            kept = late.wait_for(link.topics.info, timeout_s=5)
            assert kept is not None and kept.retain and kept.payload == b'{"agent": "edge-1"}'
    finally:
        link.stop()
        spool.close()
