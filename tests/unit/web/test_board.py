"""StatusBoard: what it keeps, how it downsamples, and the JSON views the page reads."""

from __future__ import annotations

import json
import math
import threading

import numpy as np
import pytest

from rotorwatch.alarms.records import ValueStatus
from rotorwatch.analysis.plan import build_plan
from rotorwatch.web import views
from rotorwatch.web.board import StatusBoard

from . import helpers


class FakeClock:
    def __init__(self, t: float = 1_700_000_000.0) -> None:
        self.t = t

    def __call__(self) -> float:
        return self.t


@pytest.fixture()
def config():
    return helpers.demo_config()


def strict_json(obj) -> dict:
    """Round-trip through JSON as the server sends it (NaN/inf are not JSON)."""
    return json.loads(json.dumps(obj, allow_nan=False))


# ------------------------------------------------------------------------------- downsampling
def test_peak_downsample_keeps_a_one_line_peak_exactly():
    freqs = np.arange(12_801) * 0.5
    amp = np.full(freqs.size, 1e-3)
    amp[7_777] = 2.5  # one narrow line
    f, a = views.peak_downsample(freqs, amp, 2000)
    assert f.size <= 2000
    assert a.max() == 2.5 and f[a.argmax()] == freqs[7_777]
    assert np.all(np.diff(f) > 0)


def test_peak_downsample_leaves_short_spectra_alone():
    freqs = np.arange(100.0)
    amp = np.random.default_rng(1).random(100)
    f, a = views.peak_downsample(freqs, amp, 2000)
    np.testing.assert_array_equal(a, amp)


def test_minmax_downsample_keeps_extremes_in_time_order():
    x = np.random.default_rng(2).normal(size=50_001)
    x[31_415] = 40.0
    x[2_718] = -35.0
    idx, vals = views.minmax_downsample(x, 2000)
    assert vals.size <= 2000
    assert vals.max() == 40.0 and vals.min() == -35.0
    assert np.all(np.diff(idx) >= 0)
    np.testing.assert_array_equal(vals, x[idx])


def test_sig_rounds_and_drops_non_finite():
    assert views.sig(1234.5678) == 1235.0
    assert views.sig(0.000123456) == 0.0001235
    assert views.sig(float("nan")) is None and views.sig(float("inf")) is None and views.sig(None) is None


# -------------------------------------------------------------------------------- the board
def test_before_any_update_everything_reads_no_data(config):
    board = StatusBoard(config, clock=FakeClock())
    ov = strict_json(board.overview())
    (m,) = ov["machines"]
    assert m["id"] == "ef3" and m["state"] == "no_data" and m["age_s"] is None
    assert [p["state"] for p in m["points"]] == ["no_data", "no_data"]
    assert board.health() == (False, "waiting for the first update of ef3")
    pv = strict_json(board.point("ef3", "de-h"))
    assert pv["state"] == "no_data" and pv["spectra"] == {}


def test_overview_carries_states_reasons_speed_overall_and_zone(config):
    clock = FakeClock()
    board = StatusBoard(config, clock=clock)
    update, raw = helpers.machine_update(config, 1000.0, fault=0.8)
    board.publish(update, raw)
    ov = strict_json(board.overview())
    m = ov["machines"][0]
    assert m["state"] == update.state == "alarm"
    assert m["reason"] == update.reason
    assert m["rpm"] == 1482.0 and m["rpm_source"] == "fixed"
    de = next(p for p in m["points"] if p["id"] == "de-h")
    res = update.points["de-h"].result
    assert de["state"] == "alarm" and de["overall_mm_s"] == pytest.approx(res.overall_velocity_mm_s, rel=1e-3)
    assert de["zone"] == res.iso_zone
    assert {v["name"] for v in de["values"]} == set(update.points["de-h"].values)
    # ISO 20816-3 group 2 rigid: 1.4 / 2.8 / 4.5 mm/s (ISO 10816-3:2009 Table A.2; from memory, unconfirmed)
    assert m["iso"]["boundaries_mm_s"] == [1.4, 2.8, 4.5]
    assert ov["site"]["agent_id"] == "halden-ef3"
    assert board.health() == (True, "ok")


def full_fs_hz(update) -> float:
    return update.points["de-h"].result.fs_hz


def test_point_view_spectra_are_bounded_and_markers_follow_the_speed(config):
    board = StatusBoard(config, max_spectrum_points=2000, clock=FakeClock())
    update, raw = helpers.machine_update(config, 1000.0, fault=0.5)
    board.publish(update, raw)
    pv = strict_json(board.point("ef3", "de-h"))
    assert set(pv["spectra"]) == {"acceleration", "velocity", "envelope"}
    for q, spec in pv["spectra"].items():
        assert len(spec["freqs_hz"]) == len(spec["amplitude"]) <= 2000
        full = getattr(update.points["de-h"].result, q)
        # one line count everywhere: the page says what the plan (and `rotorwatch check`) says
        plan = build_plan(config.machine("ef3"), config.machine("ef3").point("de-h"), full_fs_hz(update))
        if q != "envelope":  # (envelope lines follow the speed and the block's length)
            assert spec["n_lines"] == plan.lines
        assert spec["n_lines"] == full.amplitude.size - 1  # the 0 Hz bin is not a line
        # the largest line survives downsampling (to 4 significant digits)
        assert max(spec["amplitude"]) == pytest.approx(full.amplitude.max(), rel=1e-3)
    markers = {(m["family"], m["k"]): m for m in pv["markers"]}
    f_r = 1482.0 / 60.0
    assert markers[("shaft", 1)]["freq_hz"] == pytest.approx(f_r, rel=1e-5)
    assert markers[("shaft", 2)]["freq_hz"] == pytest.approx(2 * f_r, rel=1e-5)
    assert markers[("blade_pass", 1)]["freq_hz"] == pytest.approx(11 * f_r, rel=1e-5)
    # BPFO = n/2 f_r (1 - d/D cos phi): Randall & Antoni, MSSP 25(2) 2011, section 2; computed here
    # independently of rotorwatch.kinematics from the demo bearing fan-de (10 x 22.0 mm on 71.4 mm).
    bpfo = 10 / 2 * f_r * (1 - 22.0 / 71.4)
    bpfi = 10 / 2 * f_r * (1 + 22.0 / 71.4)
    ftf = f_r / 2 * (1 - 22.0 / 71.4)
    bsf = 71.4 / (2 * 22.0) * f_r * (1 - (22.0 / 71.4) ** 2)
    for fam, want in (("bpfo", bpfo), ("bpfi", bpfi), ("ftf", ftf), ("bsf", bsf)):
        assert markers[(fam, 1)]["freq_hz"] == pytest.approx(want, rel=1e-5)
        assert markers[(fam, 3)]["freq_hz"] == pytest.approx(3 * want, rel=1e-5)
        assert markers[(fam, 1)]["bearing"] == "fan-de"
    # only the point's own bearing is marked
    assert {m["bearing"] for m in pv["markers"]} == {None, "fan-de"}


def test_band_regions_sit_where_the_bands_read(config):
    board = StatusBoard(config, clock=FakeClock())
    update, raw = helpers.machine_update(config, 1000.0, fault=0.5)
    board.publish(update, raw)
    regions = {r["name"]: r for r in board.point("ef3", "de-h")["regions"]}
    f_r = 1482.0 / 60.0
    bpfo = 10 / 2 * f_r * (1 - 22.0 / 71.4)  # Randall & Antoni 2011, as above
    outer = regions["de-outer-race"]
    assert outer["quantity"] == "envelope" and len(outer["parts_hz"]) == 3  # harmonics = 3 (default)
    for k, (lo, hi) in enumerate(outer["parts_hz"], start=1):
        assert lo == pytest.approx(k * bpfo * 0.975, rel=1e-4) and hi == pytest.approx(k * bpfo * 1.025, rel=1e-4)  # tolerance_pct = 2.5
    assert outer["state"] == update.points["de-h"].values["de-outer-race"].state
    assert regions["shaft-2x"]["parts_hz"] == [[pytest.approx(1.9 * f_r, rel=1e-4), pytest.approx(2.1 * f_r, rel=1e-4)]]
    assert regions["bearing-hf"]["parts_hz"] == [[2000.0, 10000.0]]
    assert regions["overall"]["parts_hz"] == [[10.0, 1000.0]] and regions["overall"]["quantity"] == "velocity"
    assert regions["envelope band"]["parts_hz"] == [[2000.0, 7000.0]]
    assert "nde-outer-race" not in regions  # limited to point nde-h


def test_waveform_is_calibrated_and_bounded(config):
    board = StatusBoard(config, max_waveform_points=500, waveform_span_s=0.1, clock=FakeClock())
    update, _ = helpers.machine_update(config, 1000.0, fault=0.0)
    volts = np.zeros(51200)
    volts[-10] = 0.1  # 0.1 V on a 100 mV/g sensor is 1 g = 9.80665 m/s^2 (standard gravity, ISO 80000-3)
    board.publish(update, {"de-h": volts})
    wf = board.point("ef3", "de-h")["waveform"]
    assert len(wf["values"]) <= 500 and wf["n_samples"] == 5120
    assert max(wf["values"]) == pytest.approx(9.80665, rel=1e-3)
    assert wf["t_ms"][-1] <= 100.0
    assert board.point("ef3", "nde-h")["waveform"] is None  # no block given for that point


def test_trend_is_bounded_and_carries_levels(config):
    board = StatusBoard(config, trend_length=25, clock=FakeClock())
    for i in range(40):
        update, _ = helpers.machine_update(config, 1000.0 + 60 * i, fault=i / 40)
        board.publish(update)
    tr = strict_json(board.trend("ef3", "de-h"))
    assert tr["length"] == 25 and len(tr["time_s"]) == 25
    assert tr["time_s"][0] == 1000.0 + 60 * 15 and tr["time_s"][-1] == 1000.0 + 60 * 39
    series = {s["name"]: s for s in tr["series"]}
    assert tr["series"][0]["name"] == "overall"
    outer = series["de-outer-race"]
    assert len(outer["values"]) == 25 and outer["unit"] == "m/s^2" and outer["quantity"] == "envelope"
    assert outer["values"][-1] == pytest.approx(0.01 + 0.4 * 39 / 40, rel=1e-3)
    assert outer["warning"][-1] is not None and outer["alarm"][-1] > outer["warning"][-1]
    assert outer["state"][-1] == "alarm"
    assert series["shaft-1x"]["state"] == ["normal"] * 25


def test_events_are_bounded_newest_first(config):
    board = StatusBoard(config, events_length=5, clock=FakeClock())
    for i in range(8):
        update, _ = helpers.machine_update(config, 1000.0 + i, 0.1, events=[helpers.event(1000.0 + i, "normal", "warning")])
        board.publish(update)
    ev = board.overview()["events"]
    assert [e["time_s"] for e in ev] == [1007.0, 1006.0, 1005.0, 1004.0, 1003.0]
    assert ev[0]["to"] == "warning" and ev[0]["value"] == "de-outer-race"


def test_non_finite_values_serialise_as_null(config):
    board = StatusBoard(config, clock=FakeClock())
    update, _ = helpers.machine_update(config, 1000.0, 0.0)
    pu = update.points["de-h"]
    bad = ValueStatus("overall", float("nan"), "mm/s", "normal", 2.8, 4.5, None)
    update.points["de-h"] = type(pu)(pu.point_id, pu.state, pu.reason, pu.result, pu.health, {**pu.values, "overall": bad})
    board.publish(update)
    row = next(r for r in strict_json(board.point("ef3", "de-h"))["values"] if r["name"] == "overall")
    assert row["value"] is None and row["warning"] == 2.8
    strict_json(board.trend("ef3", "de-h"))


def test_unknown_machine_is_ignored_and_unknown_point_is_a_key_error(config):
    board = StatusBoard(config, clock=FakeClock())
    update, _ = helpers.machine_update(config, 1000.0, 0.0)
    import dataclasses

    board.publish(dataclasses.replace(update, machine_id="nope"))
    assert board.revision() == 0
    with pytest.raises(KeyError):
        board.point("ef3", "nope")
    with pytest.raises(KeyError):
        board.trend("nope", "de-h")


def test_stale_after_missing_updates(config):
    clock = FakeClock()
    board = StatusBoard(config, stale_after_updates=3, min_stale_s=15, clock=clock)
    update, _ = helpers.machine_update(config, 1000.0, 0.0)
    board.publish(update)
    clock.t += 14.0  # demo: update_interval_s 5 at speedup 1 -> stale after max(15, 3 x 5) s
    assert board.overview()["machines"][0]["stale"] is False
    clock.t += 2.0
    m = board.overview()["machines"][0]
    assert m["stale"] is True and m["age_s"] == 16.0
    ok, reason = board.health()
    assert not ok and reason == "no recent update from ef3 (16 s)"


def test_reconfigure_keeps_data_of_remaining_machines(config):
    board = StatusBoard(config, clock=FakeClock())
    update, _ = helpers.machine_update(config, 1000.0, 0.8)
    board.publish(update)
    board.reconfigure(config)
    assert board.overview()["machines"][0]["state"] == "alarm"


def test_publish_and_read_from_many_threads(config):
    board = StatusBoard(config, trend_length=50)
    updates = [helpers.machine_update(config, 1000.0 + i, i / 20) for i in range(20)]
    errors: list[BaseException] = []
    stop = threading.Event()

    def reader() -> None:
        try:
            for _ in range(200):  # bounded
                if stop.is_set():
                    return
                strict_json(board.overview())
                strict_json(board.point("ef3", "de-h"))
                strict_json(board.trend("ef3", "nde-h"))
        except BaseException as exc:  # noqa: BLE001 - collected for the assertion below
            errors.append(exc)

    readers = [threading.Thread(target=reader) for _ in range(3)]
    for t in readers:
        t.start()
    for update, raw in updates:
        board.publish(update, raw)
    stop.set()
    for t in readers:
        t.join(timeout=30)
    assert not errors
    assert board.revision("ef3") == 20
    assert board.trend("ef3", "de-h")["length"] == 20
    assert math.isclose(board.trend("ef3", "de-h")["series"][0]["values"][-1],
                        views.sig(updates[-1][0].points["de-h"].result.overall_velocity_mm_s))
