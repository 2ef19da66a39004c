"""End to end: ``rotorwatch replay`` over the shipped scenarios, short scenarios and recordings.

Each shipped scenario (config/scenarios/*.toml) is replayed in full through the CLI, and its own
``expect`` list must pass: this is the check that the alarm logic tells the stories the scenarios were
written to tell. The short scenarios below run in a few seconds and check exit codes, output formats,
worker parity and recordings.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import soundfile

from rotorwatch.cli import main
from rotorwatch.settings.models import G_N

REPO = Path(__file__).resolve().parents[2]
SCENARIOS = sorted((REPO / "config" / "scenarios").glob("*.toml"))
DEMO_CONFIG = REPO / "config" / "demo-fan.toml"


def replay(capsys, *args: str) -> tuple[int, list[dict], str]:
    rc = main(["replay", *args, "--format", "jsonl"])
    cap = capsys.readouterr()
    return rc, [json.loads(line) for line in cap.out.splitlines()], cap.err


def short_scenario(tmp_path: Path, expect: list[str] | None = None, extra: str = "") -> Path:
    """Three days every 3 h; an outer-race spall appears at day 1 on fan-de."""
    path = tmp_path / "short.toml"
    path.write_text(
        f"""
[scenario]
name = "short outer-race check"
config = "{DEMO_CONFIG}"
duration_days = 3
cadence_s = 10800
seed = 5
expect = {json.dumps(expect or [])}

[[change]]
start_day = 1
component = "outer_race"
bearing = "fan-de"
to = 0.7
shape = "step"
{extra}
"""
    )
    return path


# ------------------------------------------------------------------------------------------ shipped
def test_scenarios_are_shipped():
    names = {p.stem for p in SCENARIOS}
    assert {"demo-outer-race", "healthy", "sensor-fault"} <= names


@pytest.mark.parametrize("scenario", SCENARIOS, ids=lambda p: p.stem)
def test_shipped_scenario_meets_its_expectations(capsys, scenario):
    rc, lines, err = replay(capsys, "--scenario", str(scenario))
    expectations = [x for x in lines if x["type"] == "expectation"]
    assert expectations, f"{scenario.name} has no expect lines: the replay would check nothing"
    failed = [f"{x['text']} ({x['detail']})" for x in expectations if not x["passed"]]
    assert not failed, failed
    assert rc == 0, err
    updates = [x for x in lines if x["type"] == "update"]
    summary = lines[-1]
    assert summary["type"] == "summary" and summary["updates"] == len(updates) > 0
    print(f"{scenario.stem}: {len(updates)} updates in {summary['wall_s']:.1f} s")  # benchmark figure
    if scenario.stem == "demo-outer-race":
        projection_brackets_the_alarm(updates, "de-h", "de-outer-race")


def projection_brackets_the_alarm(updates: list[dict], point: str, value: str) -> None:
    """The time to alarm projected at the value's first warning (rotorwatch.alarms.projection) brackets the
    alarm as it came in the same replay (the issue's check on the demo's growing outer-race fault)."""
    day = lambda u, dt=0.0: (u["time_s"] + dt - updates[0]["time_s"]) / 86400.0  # noqa: E731
    states = [u["points"][point]["values"][value]["state"] for u in updates]
    warned = updates[states.index("warning")]
    alarmed = updates[states.index("alarm")]
    p = warned["points"][point]["values"][value]["projection"]
    assert p["status"] == "rising" and p["alarm"]["status"] == "rising", p
    a = p["alarm"]
    lo, mid, hi = day(warned, a["in_low_s"]), day(warned, a["in_s"]), day(warned, a["in_high_s"])
    print(f"{value} on {point}: first warning day {day(warned):.2f}; alarm projected then for day {mid:.2f} "
          f"({lo:.2f}-{hi:.2f}, {p['points']} updates fitted); alarm came day {day(alarmed):.2f}")
    assert lo <= day(alarmed) <= hi


# -------------------------------------------------------------------------------------- short runs
def test_wrong_threshold_exits_1(tmp_path):
    path = short_scenario(tmp_path, expect=["de-outer-race on de-h reaches alarm between day 1 and day 2"])
    cmd = [sys.executable, "-m", "rotorwatch", "replay", "--scenario", str(path), "--learning-updates", "4",
           "--expect", "de-outer-race on de-h reaches alarm before day 0.9"]
    proc = subprocess.run(cmd, capture_output=True, text=True, timeout=600, cwd=REPO)
    assert proc.returncode == 1, proc.stderr
    assert "PASS  de-outer-race on de-h reaches alarm between day 1 and day 2" in proc.stdout
    assert "FAIL  de-outer-race on de-h reaches alarm before day 0.9" in proc.stdout
    assert "First warning and alarm of each value" in proc.stdout
    err = proc.stderr.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("rotorwatch: 1 of 2 expectation(s) failed")


def test_jsonl_lines_parse_and_carry_updates_and_events(tmp_path, capsys):
    path = short_scenario(tmp_path)
    rc, lines, _ = replay(capsys, "--scenario", str(path), "--learning-updates", "4",
                          "--expect", "de-outer-race on de-h reaches alarm between day 1 and day 2")
    assert rc == 0
    kinds = [x["type"] for x in lines]
    assert kinds.count("update") == 24 and kinds[-1] == "summary"
    first = lines[0]
    assert first["points"]["de-h"]["values"]["de-outer-race"]["unit"] == "m/s^2"
    assert first["points"]["de-h"]["iso_zone"] in "ABCD"
    alarm = [x for x in lines if x["type"] == "event" and x["value"] == "de-outer-race" and x["new_state"] == "alarm"]
    assert alarm and alarm[0]["level_kind"] == "alarm" and "learned baseline" in alarm[0]["reason"]
    assert 1.0 <= alarm[0]["day"] <= 2.0


def test_render_workers_give_the_same_updates(tmp_path, capsys):
    path = short_scenario(tmp_path)
    runs = []
    for workers in ("1", "2"):
        rc, lines, _ = replay(capsys, "--scenario", str(path), "--learning-updates", "4", "--workers", workers)
        assert rc == 0
        runs.append([x for x in lines if x["type"] in ("update", "event")])
    assert runs[0] == runs[1]


def test_config_override_replays_other_levels(tmp_path, capsys):
    text = DEMO_CONFIG.read_text().replace(
        'levels = { relative_warning = 2.5, relative_alarm = 5.0, on_delay_updates = 3 }',
        'levels = { relative_warning = 2.5, relative_alarm = 5.0, on_delay_updates = 3, latching = true }',
    )
    text = text.replace('scenario = "scenarios/demo-outer-race.toml"', f'scenario = "{REPO}/config/scenarios/healthy.toml"')
    cfg = tmp_path / "latching.toml"
    cfg.write_text(text)
    path = short_scenario(tmp_path)
    rc, lines, _ = replay(capsys, "--scenario", str(path), "--config", str(cfg), "--learning-updates", "4",
                          "--expect", "de-outer-race on de-h ends alarm")
    assert rc == 0


def test_bad_scenario_file_is_one_line(tmp_path, capsys):
    bad = tmp_path / "bad.toml"
    bad.write_text(f'[scenario]\nname = "x"\nconfig = "{DEMO_CONFIG}"\nduration_days = 1\ncolour = "red"\n')
    rc = main(["replay", "--scenario", str(bad)])
    err = capsys.readouterr().err.strip().splitlines()
    assert rc == 2 and len(err) == 1 and "scenario.colour" in err[0] and "unknown key" in err[0]


def test_bad_expectation_is_one_line(tmp_path, capsys):
    path = short_scenario(tmp_path)
    rc = main(["replay", "--scenario", str(path), "--expect", "de-outer-race on de-h gets worse"])
    err = capsys.readouterr().err.strip().splitlines()
    assert rc == 2 and len(err) == 1 and "--expect[0] = 'de-outer-race on de-h gets worse': expected a verb" in err[0]


def test_bad_expectation_in_scenario_names_the_file(tmp_path, capsys):
    path = short_scenario(tmp_path, expect=["outer on de-h reaches alarm"])
    rc = main(["replay", "--scenario", str(path)])
    err = capsys.readouterr().err.strip()
    assert rc == 2 and f"{path}: scenario.expect[0]" in err and "unknown value 'outer'" in err


# --------------------------------------------------------------------------------------- recordings
@pytest.fixture(scope="module")
def recorded_volts():
    """40 s of the short scenario after the spall (volts per point) and its rate."""
    import tempfile

    from rotorwatch.simulators.render import ScenarioRenderer
    from rotorwatch.simulators.scenario import load_scenario

    with tempfile.TemporaryDirectory() as d:
        sc = load_scenario(short_scenario(Path(d)))
        fs = 25600.0
        return ScenarioRenderer(sc).snapshot(86400.0 * 1.5, 40.0, fs), fs, sc.machine


def test_wav_in_volts_and_in_g_read_the_same(tmp_path, capsys, recorded_volts):
    volts, fs, machine = recorded_volts
    ids = [p.id for p in sorted(machine.points, key=lambda p: p.sensor.channel)]
    v = np.column_stack([volts[i] for i in ids])
    g = np.column_stack([volts[i] / machine.point(i).sensor.volts_per_m_s2 / G_N for i in ids])
    soundfile.write(tmp_path / "volts.wav", v, int(fs), subtype="DOUBLE")
    soundfile.write(tmp_path / "g.wav", g, int(fs), subtype="DOUBLE")
    outs = []
    for name, unit in (("volts.wav", "volts"), ("g.wav", "g")):
        rc, lines, _ = replay(capsys, "--config", str(DEMO_CONFIG), "--input", str(tmp_path / name), "--unit", unit,
                              "--learning-updates", "3")
        assert rc == 0
        outs.append([x for x in lines if x["type"] == "update"])
    assert len(outs[0]) == 10  # 40 s in 4 s windows
    a = [u["points"]["de-h"]["values"]["de-outer-race"]["value"] for u in outs[0]]
    b = [u["points"]["de-h"]["values"]["de-outer-race"]["value"] for u in outs[1]]
    assert np.allclose(a, b, rtol=1e-9)
    assert outs[0][-1]["points"]["de-h"]["state"] == "normal"  # learned on the spalled bearing: its normal


def test_npz_recording_by_point_id(tmp_path, capsys, recorded_volts):
    volts, fs, _ = recorded_volts
    np.savez(tmp_path / "rec.npz", fs_hz=fs, unit="volts", **{"de-h": volts["de-h"]})
    rc, lines, err = replay(capsys, "--config", str(DEMO_CONFIG), "--input", str(tmp_path / "rec.npz"), "--learning-updates", "3")
    assert rc == 0
    last = [x for x in lines if x["type"] == "update"][-1]
    assert last["points"]["nde-h"]["state"] == "no_data" and last["points"]["de-h"]["state"] == "normal"


def test_integer_wav_needs_volts_unit(tmp_path, capsys, recorded_volts):
    volts, fs, _ = recorded_volts
    soundfile.write(tmp_path / "pcm.wav", np.column_stack([volts["de-h"], volts["nde-h"]]), int(fs), subtype="PCM_24")
    rc = main(["replay", "--config", str(DEMO_CONFIG), "--input", str(tmp_path / "pcm.wav"), "--unit", "g"])
    err = capsys.readouterr().err.strip().splitlines()
    assert rc == 2 and len(err) == 1 and "integer PCM_24" in err[0]
    rc, lines, _ = replay(capsys, "--config", str(DEMO_CONFIG), "--input", str(tmp_path / "pcm.wav"), "--learning-updates", "3")
    assert rc == 0 and lines[-1]["updates"] == 10


def test_recording_shorter_than_a_window_is_one_line(tmp_path, capsys):
    soundfile.write(tmp_path / "short.wav", np.zeros((1000, 2)), 25600, subtype="FLOAT")
    rc = main(["replay", "--config", str(DEMO_CONFIG), "--input", str(tmp_path / "short.wav")])
    err = capsys.readouterr().err.strip().splitlines()
    assert rc == 2 and len(err) == 1 and "shorter than one analysis window" in err[0]
