"""Evidence snapshots: WAV/npz round trip, sidecar contents, credentials kept out, quota, policy, CLI, plot."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from datetime import UTC, datetime

import numpy as np
import pytest
import scipy.io.wavfile

from rotorwatch.cli import main
from rotorwatch.settings.models import Config
from rotorwatch.settings.storage import SnapshotSettings
from rotorwatch.storage import StorageError
from rotorwatch.storage.snapshot_policy import DailySchedule, SnapshotPolicy
from rotorwatch.storage.snapshots import SnapshotStore, config_fingerprint

from .samples import T0, transition, update

RPM = 1797.0  # CWRU drive-end test speed at 0 hp (shared references.md, Ex. 1)


def make_config(username: str = "edge-user-7f3") -> Config:
    """An invented fan "ahu-3" with the CWRU drive-end bearing geometry (references.md Ex. 1)."""
    return Config.model_validate({
        "site": {"name": "Harbour Street plant", "agent_id": "edge-hs-2"},
        "acquisition": {"source": "simulated", "sample_rate_hz": 12800, "channels": 2},
        "mqtt": {"host": "broker.internal", "username": username,
                 "password_file": "/etc/rotorwatch/very-secret-pw"},
        "status_page": {"token_file": "/etc/rotorwatch/page-token-9q"},
        "machines": [{
            "id": "ahu-3", "kind": "fan", "blades": 7,
            "speed": {"mode": "fixed", "rpm": RPM},
            "bearings": [{"id": "de-brg", "elements": 9, "element_diameter": 0.3126,
                          "pitch_diameter": 1.537, "diameter_unit": "in"}],
            "points": [{"id": "de", "bearing": "de-brg", "sensor": {"channel": 0, "sensitivity_mv_per_g": 100}},
                       {"id": "nde", "sensor": {"channel": 1, "sensitivity_mv_per_g": 100}}],
            "bands": [
                {"name": "shaft_1x", "quantity": "velocity", "low_order": 0.8, "high_order": 1.2},
                {"name": "bearing_env", "quantity": "envelope", "feature": "bpfo", "bearing": "de-brg",
                 "harmonics": 2, "tolerance_pct": 3},
                {"name": "hf_acc", "quantity": "acceleration", "low_hz": 2000, "high_hz": 4000},
            ],
        }],
    })


def waveform(n: int = 12800, seed: int = 3) -> np.ndarray:
    rng = np.random.default_rng(seed)
    t = np.arange(n) / 12800.0
    return (0.9 * np.sin(2 * np.pi * RPM / 60 * t) + 0.1 * rng.standard_normal(n)).astype(np.float64)


def save_one(store: SnapshotStore, t: float = T0, reason: str = "transition", config: Config | None = None,
             **kw) -> object:
    config = config or make_config()
    upd = update(t, overall=7.5, state="alarm", with_spectra=True, events=[transition(t)], rpm=RPM)
    return store.save(upd, {"de": waveform(), "nde": waveform(seed=4)}, reason=reason,
                      machine=config.machines[0], config_hash=config_fingerprint(config),
                      detail="de/overall normal->alarm", **kw)


# libsndfile writes a PEAK chunk into float WAV files; scipy skips chunks it does not know, with a warning
@pytest.mark.filterwarnings("ignore::scipy.io.wavfile.WavFileWarning")
def test_round_trip_waveform_and_spectra(tmp_path):
    store = SnapshotStore(tmp_path / "snapshots")
    info = save_one(store)
    data, fs = store.read_waveform(info.id, "de")
    expected = waveform().astype(np.float32)
    np.testing.assert_array_equal(data, expected)  # float32 in, the same float32 out
    assert fs == 12800.0
    # an independent WAV reader (scipy.io.wavfile) sees IEEE float32 samples at 12800 Hz
    rate, raw = scipy.io.wavfile.read(info.path / "de.wav")
    assert rate == 12800 and raw.dtype == np.float32
    np.testing.assert_array_equal(raw, expected)
    spectra = store.read_spectra(info.id, "de")
    assert set(spectra) == {"acceleration", "velocity", "envelope"}
    src = update(T0, with_spectra=True, rpm=RPM).points["de"].result
    np.testing.assert_array_equal(spectra["velocity"].amplitude, src.velocity.amplitude)
    np.testing.assert_array_equal(spectra["envelope"].freqs_hz, src.envelope.freqs_hz)
    assert spectra["acceleration"].unit == "m/s^2" and spectra["velocity"].unit == "mm/s"


def test_sidecar_contents(tmp_path):
    store = SnapshotStore(tmp_path / "snapshots")
    info = save_one(store)
    doc = json.loads((info.path / "snapshot.json").read_text())
    assert doc["format"] == "rotorwatch-snapshot/1" and doc["id"] == info.id
    assert info.id == "20260101T000000Z-ahu-3-transition"
    assert doc["machine"] == "ahu-3" and doc["time_utc"] == "2026-01-01T00:00:00Z"
    assert doc["reason"] == "transition" and doc["detail"] == "de/overall normal->alarm"
    assert doc["config_hash"].startswith("sha256:") and len(doc["config_hash"]) == 7 + 64
    assert doc["speed"] == {"rpm": RPM, "source": "fixed", "shaft_hz": pytest.approx(29.95)}
    assert doc["machine_state"] == "alarm" and doc["events"][0]["new_state"] == "alarm"
    de = doc["points"]["de"]
    assert de["state"] == "alarm" and de["waveform_file"] == "de.wav" and de["spectra_file"] == "de.spectra.npz"
    assert de["values"]["overall"].items() >= {"value": 7.5, "unit": "mm/s", "state": "alarm", "warning_level": 4.5,
                                               "alarm_level": 7.1, "baseline": 2.0, "latched": False}.items()
    assert de["values"]["bearing_env"]["value"] is None  # NaN is stored as null (JSON has no NaN)
    assert de["envelope_band_hz"] == [2000.0, 4000.0] and de["iso_zone"] == "A"
    bands = {b["name"]: b for b in de["bands"]}
    # order band 0.8..1.2 x 29.95 Hz
    assert bands["shaft_1x"]["parts_hz"] == [[pytest.approx(23.96), pytest.approx(35.94)]]
    # BPFO of the CWRU drive-end bearing at 1797 r/min: 107.36 Hz (references.md Ex. 1), +/- 3 %
    lo, hi = bands["bearing_env"]["parts_hz"][0]
    assert (lo + hi) / 2 == pytest.approx(107.36, abs=0.01) and hi / lo == pytest.approx(1.03 / 0.97)
    assert len(bands["bearing_env"]["parts_hz"]) == 2
    assert bands["overall"]["parts_hz"] == [[10.0, 1000.0]]
    markers = {m["name"]: m["frequency_hz"] for m in doc["markers"]}
    # references.md Ex. 1 at 1797 r/min: BPFO 107.36, BPFI 162.19, FTF 11.93, BSF 70.58 Hz
    assert markers["BPFO"] == pytest.approx(107.36, abs=0.01)
    assert markers["BPFI"] == pytest.approx(162.19, abs=0.01)
    assert markers["FTF"] == pytest.approx(11.93, abs=0.01)
    assert markers["BSF"] == pytest.approx(70.58, abs=0.01)
    assert markers["2x BPFO"] == pytest.approx(2 * 107.36, abs=0.02)
    assert markers["1x"] == pytest.approx(29.95) and markers["2x"] == pytest.approx(59.9)
    assert markers["blade pass"] == pytest.approx(7 * 29.95)  # blade count x shaft (common practice)


def test_no_credentials_in_a_snapshot(tmp_path):
    store = SnapshotStore(tmp_path / "snapshots")
    info = save_one(store)
    blob = b"".join(f.read_bytes() for f in info.path.iterdir())
    for secret in (b"edge-user-7f3", b"very-secret-pw", b"page-token-9q", b"broker.internal"):
        assert secret not in blob
    # the fingerprint ignores connection sections and follows the monitoring configuration
    assert config_fingerprint(make_config(username="someone-else")) == config_fingerprint(make_config())
    changed = make_config().model_dump()
    changed["machines"][0]["blades"] = 9
    assert config_fingerprint(Config.model_validate(changed)) != config_fingerprint(make_config())


def test_quota_prunes_oldest_first_and_keeps_the_new_one(tmp_path):
    probe = SnapshotStore(tmp_path / "probe")
    size = save_one(probe).size_bytes
    store = SnapshotStore(tmp_path / "snapshots", quota_bytes=int(2.5 * size))
    ids = [save_one(store, t=T0 + 3600 * k).id for k in range(5)]
    left = [i.id for i in store.list()]
    assert left == ids[-2:]  # the two newest fit; older ones went, oldest first
    assert store.total_bytes() <= 2.5 * size
    tiny = SnapshotStore(tmp_path / "tiny", quota_bytes=size // 2)
    only = save_one(tiny)
    assert [i.id for i in tiny.list()] == [only.id]  # larger than the quota alone: kept


def test_same_second_gets_a_distinct_id_and_list_order(tmp_path):
    store = SnapshotStore(tmp_path / "snapshots")
    a = save_one(store, reason="command")
    b = save_one(store, reason="command")
    c = save_one(store, t=T0 - 60, reason="schedule")
    assert b.id == a.id + "-2"
    assert [i.id for i in store.list()] == [c.id, a.id, b.id]
    assert store.last_time("ahu-3", "command") == T0 and store.last_time("ahu-3", "schedule") == T0 - 60


def test_crash_leftovers_are_removed_and_ignored(tmp_path):
    root = tmp_path / "snapshots"
    store = SnapshotStore(root)
    save_one(store)
    leftover = root / ".tmp-20260101T010000Z-ahu-3-command-999"
    leftover.mkdir()
    (leftover / "de.wav").write_bytes(b"partial")
    assert len(store.list()) == 1
    SnapshotStore(root)
    assert not leftover.exists()


def test_bad_ids_and_points_are_one_line_errors(tmp_path):
    store = SnapshotStore(tmp_path / "snapshots")
    info = save_one(store)
    for call in (lambda: store.load("../../etc"), lambda: store.load("nope"),
                 lambda: store.read_waveform(info.id, "xyz")):
        with pytest.raises(StorageError) as e:
            call()
        assert "\n" not in str(e.value)
    with pytest.raises(ValueError, match="reason"):
        save_one(store, reason="because")


def test_daily_schedule():
    sched = DailySchedule("03:00", grace_s=6 * 3600)
    day = datetime(2026, 3, 10, tzinfo=UTC).timestamp()
    slot = day + 3 * 3600
    assert sched.slot_at_or_before(day + 2 * 3600) == slot - 86400
    assert sched.slot_at_or_before(slot) == slot
    assert sched.due(slot + 60, None)
    assert sched.due(slot + 60, slot - 86400 + 5)  # yesterday's was taken: today's is due
    assert not sched.due(slot + 120, slot + 60)  # taken already today
    assert not sched.due(slot + 7 * 3600, None)  # past the grace: wait for tomorrow
    with pytest.raises(ValueError, match="HH:MM"):
        DailySchedule("25:00")


def test_policy_transitions_min_interval_and_schedule(tmp_path):
    settings = SnapshotSettings(min_interval_s=600, daily_at_utc="03:00", on_transition_to=("alarm",))
    policy = SnapshotPolicy(settings, SnapshotStore(tmp_path / "snapshots"))
    t = datetime(2026, 3, 10, 12, tzinfo=UTC).timestamp()  # noon: no schedule due
    assert policy.decide(update(t), now_s=t) is None
    reason, detail = policy.decide(update(t, events=[transition(t)]), now_s=t)
    assert reason == "transition" and detail == "de/overall normal->alarm"
    assert policy.decide(update(t + 60, events=[transition(t + 60)]), now_s=t + 60) is None  # within 600 s
    assert policy.decide(update(t + 700, events=[transition(t + 700)]), now_s=t + 700)[0] == "transition"
    assert policy.decide(update(t, events=[transition(t, new="warning")]), now_s=t + 2000) is None  # not listed
    morning = datetime(2026, 3, 11, 3, 5, tzinfo=UTC).timestamp()
    assert policy.decide(update(morning), now_s=morning) == ("schedule", "daily at 03:00 UTC")
    assert policy.decide(update(morning + 60), now_s=morning + 60) is None


def test_policy_resumes_from_the_store(tmp_path):
    store = SnapshotStore(tmp_path / "snapshots")
    morning = datetime(2026, 3, 11, 3, 5, tzinfo=UTC).timestamp()
    save_one(store, t=morning, reason="schedule")
    policy = SnapshotPolicy(SnapshotSettings(daily_at_utc="03:00"), store)  # e.g. after a restart
    assert policy.decide(update(morning + 600), now_s=morning + 600) is None


@pytest.fixture
def state_dir(tmp_path):
    store = SnapshotStore(tmp_path / "snapshots")
    save_one(store)
    save_one(store, t=T0 + 86400 + 3 * 3600, reason="schedule")
    return tmp_path


def test_cli_list_and_show(state_dir, capsys):
    assert main(["snapshot", "list", "--state-dir", str(state_dir)]) == 0
    out = capsys.readouterr().out.splitlines()
    assert out[2].split()[:4] == ["20260101T000000Z-ahu-3-transition", "ahu-3", "2026-01-01T00:00:00Z", "transition"]
    assert out[3].split()[3] == "schedule" and out[-1].startswith("2 snapshots")
    assert main(["snapshot", "show", "20260101T000000Z-ahu-3-transition", "--state-dir", str(state_dir)]) == 0
    text = capsys.readouterr().out
    assert "reason     transition: de/overall normal->alarm" in text
    assert "BPFO/de-brg 107.36 Hz" in text
    overall_line = next(line for line in text.splitlines() if line.strip().startswith("overall "))
    assert overall_line.split()[:4] == ["overall", "7.5", "mm/s", "alarm"]
    assert "point de: alarm, overall 7.5 mm/s zone A" in text
    assert main(["snapshot", "show", "20260101T000000Z-ahu-3-transition", "--format", "json",
                 "--state-dir", str(state_dir)]) == 0
    assert json.loads(capsys.readouterr().out)["machine"] == "ahu-3"


def test_cli_plot_writes_a_png(state_dir, tmp_path, capsys):
    out = tmp_path / "plots" / "evidence.png"
    assert main(["snapshot", "plot", "20260101T000000Z-ahu-3-transition", "--out", str(out),
                 "--state-dir", str(state_dir)]) == 0
    data = out.read_bytes()
    assert data[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (RFC 2083 section 3.1)
    assert len(data) > 30_000  # three drawn panels, not an empty canvas
    keep = os.environ.get("RW_KEEP_PLOT")
    if keep:
        out.replace(keep)


def test_cli_errors_are_one_line(state_dir, tmp_path):
    script = ("import sys; sys.modules['matplotlib'] = None; from rotorwatch.cli import main; "
              "sys.exit(main(sys.argv[1:]))")  # matplotlib made unimportable: the 'plot' extra is absent
    cases = [
        ([sys.executable, "-m", "rotorwatch", "snapshot", "show", "nope", "--state-dir", str(state_dir)], "not found"),
        ([sys.executable, "-c", script, "snapshot", "plot", "20260101T000000Z-ahu-3-transition", "--out",
          str(tmp_path / "x.png"), "--state-dir", str(state_dir)], "pip install 'rotorwatch[plot]'"),
    ]
    for argv, needle in cases:
        done = subprocess.run(argv, capture_output=True, text=True, timeout=60)
        assert done.returncode == 2, done.stderr
        assert done.stderr.count("\n") == 1 and needle in done.stderr and "Traceback" not in done.stderr


def test_policy_keeps_every_escalation_and_drops_only_repeats(tmp_path):
    """Warning then alarm of the same value, seconds apart: both are evidence. The same value entering
    the same state again within min_interval_s (flapping) is not kept twice."""
    policy = SnapshotPolicy(SnapshotSettings(min_interval_s=600, daily_at_utc=None), SnapshotStore(tmp_path / "s"))
    t = T0 + 12 * 3600
    assert policy.decide(update(t, events=[transition(t, new="warning")]))[0] == "transition"
    esc = transition(t + 5, new="alarm")
    assert policy.decide(update(t + 5, events=[esc])) == ("transition", "de/overall normal->alarm")
    other = transition(t + 6, point_id="nde", new="warning")
    assert policy.decide(update(t + 6, events=[other]))[0] == "transition"  # another point: kept
    assert policy.decide(update(t + 60, events=[transition(t + 60, new="warning")])) is None  # a repeat
    assert policy.decide(update(t + 700, events=[transition(t + 700, new="warning")]))[0] == "transition"


def test_policy_counts_in_the_time_of_the_data(tmp_path):
    """A sped-up simulation: updates 9.6 h apart in their own time arrive seconds apart on the wall clock.
    The interval and the daily slot are measured on the data's clock (update.time_s)."""
    policy = SnapshotPolicy(SnapshotSettings(min_interval_s=600, daily_at_utc="03:00"), SnapshotStore(tmp_path / "s"))
    step = 9.6 * 3600
    answers = [policy.decide(update(T0 + k * step, events=[transition(T0 + k * step, new="warning")]))
               for k in range(4)]
    assert [a[0] for a in answers] == ["transition"] * 4  # a repeat, but 9.6 h later in the data's time
    slot = datetime(2026, 1, 3, 3, 30, tzinfo=UTC).timestamp()
    assert policy.decide(update(slot)) == ("schedule", "daily at 03:00 UTC")


def test_policy_remembers_entries_across_a_restart(tmp_path):
    store = SnapshotStore(tmp_path / "snapshots")
    save_one(store, t=T0)  # holds de/overall normal->alarm
    policy = SnapshotPolicy(SnapshotSettings(min_interval_s=600, daily_at_utc=None), store)
    assert policy.decide(update(T0 + 30, events=[transition(T0 + 30)])) is None  # the same entry, 30 s later
    assert policy.decide(update(T0 + 40, events=[transition(T0 + 40, new="warning")]))[0] == "transition"


def _two_bearing_config() -> Config:
    """make_config's fan with a second (invented) bearing on the non-drive end."""
    raw = make_config().model_dump(mode="json", exclude_none=True)
    m = raw["machines"][0]
    m["bearings"].append({"id": "nde-brg", "elements": 8, "element_diameter": 0.25, "pitch_diameter": 1.3,
                          "diameter_unit": "in"})
    m["points"][1]["bearing"] = "nde-brg"
    return Config.model_validate(raw)


def test_plot_marks_the_point_s_own_bearing_and_keeps_the_title_clear_of_the_legend(tmp_path):
    import matplotlib.pyplot as plt

    from rotorwatch.kinematics import bearing_multiples
    from rotorwatch.storage.snapshot_plot import draw_snapshot

    config = _two_bearing_config()
    machine = config.machines[0]
    store = SnapshotStore(tmp_path / "snapshots")
    long_detail = "; ".join(f"de/band-{i} warning->alarm" for i in range(12))  # a long transition line
    upd = update(T0, overall=7.5, state="alarm", with_spectra=True, events=[transition(T0)], rpm=RPM)
    info = store.save(upd, {"de": waveform(), "nde": waveform(seed=4)}, reason="transition", machine=machine,
                      config_hash=config_fingerprint(config), detail=long_detail)
    shaft_hz = RPM / 60.0
    bpfo = {b.id: bearing_multiples(b).bpfo * shaft_hz for b in machine.bearings}

    def envelope_lines(fig) -> list[float]:
        ax = next(a for a in fig.axes if a.get_title(loc="left") == "envelope spectrum")
        return [float(line.get_xdata()[0]) for line in ax.get_lines() if len(set(line.get_xdata())) == 1]

    fig = draw_snapshot(store, info.id, "de")
    try:
        lines = envelope_lines(fig)
        assert any(abs(x - bpfo["de-brg"]) < 1e-6 for x in lines)
        assert not any(abs(x - bpfo["nde-brg"]) < 1e-6 for x in lines)  # the other bearing is not marked
        fig.canvas.draw()
        renderer = fig.canvas.get_renderer()
        legend = fig.legends[0].get_window_extent(renderer)
        for text in fig.texts:
            assert not text.get_window_extent(renderer).overlaps(legend), text.get_text()
        for ax in fig.axes:  # the header and the legend sit above every panel
            assert ax.get_tightbbox(renderer).y1 <= legend.y0 + 1
    finally:
        plt.close(fig)
    fig = draw_snapshot(store, info.id, "de", all_bearings=True)
    try:
        assert any(abs(x - bpfo["nde-brg"]) < 1e-6 for x in envelope_lines(fig))  # asked for: every bearing
    finally:
        plt.close(fig)
