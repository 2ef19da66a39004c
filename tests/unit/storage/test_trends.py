"""The trend store and ``rotorwatch trend``: rows from updates, retention by age and count, filters, CLI."""

from __future__ import annotations

import csv
import io
import sqlite3
import subprocess
import sys

import pytest

from rotorwatch.cli import main
from rotorwatch.commands.trend import parse_time_utc
from rotorwatch.errors import RotorwatchError
from rotorwatch.storage import StorageError
from rotorwatch.storage.trends import DAY_S, TrendStore

from .samples import T0, update


class Clock:
    def __init__(self, t: float) -> None:
        self.t = t

    def __call__(self) -> float:
        return self.t


def test_rows_from_an_update(tmp_path):
    with TrendStore(tmp_path / "t.sqlite", clock=Clock(T0)) as store:
        n = store.record(update(T0, overall=2.5))
        rows = store.query(point="de")
    # per point: 3 values + 4 waveform figures; plus the machine speed
    assert n == 2 * 7 + 1
    by_name = {r.name: r for r in rows}
    assert by_name["overall"].value == 2.5 and by_name["overall"].unit == "mm/s"
    assert by_name["bearing_env"].value is None and by_name["bearing_env"].state == "learning"  # NaN -> NULL
    assert by_name["kurtosis"].value == pytest.approx(3.1) and by_name["kurtosis"].state == "-"
    (speed,) = TrendStore(tmp_path / "t.sqlite", read_only=True).query(point="", value="speed")
    assert speed.value == 1470.0 and speed.unit == "rpm"


def test_chatter_and_findings_are_trended(tmp_path):
    import dataclasses

    from rotorwatch.alarms.records import FindingStatus

    base = update(T0, overall=2.5)
    de = base.points["de"]
    values = dict(de.values)
    values["overall"] = dataclasses.replace(values["overall"], raises=3, chatter=2)
    findings = {"BPFO": FindingStatus("BPFO", "warning", True, 6, 6, 7.5, "fan-de", "persisting")}
    changed = dataclasses.replace(base, points={**base.points, "de": dataclasses.replace(de, values=values,
                                                                                          findings=findings)})
    with TrendStore(tmp_path / "t.sqlite", clock=Clock(T0)) as store:
        n = store.record(changed)
        rows = {r.name: r for r in store.query(point="de")}
    assert n == 2 * 7 + 1 + 2  # the chatter count and the finding on "de"
    assert rows["overall:chatter"].value == 2.0 and rows["overall:chatter"].unit == "1"
    assert rows["finding:BPFO"].value == 7.5 and rows["finding:BPFO"].state == "warning"
    assert "bearing_env:chatter" not in rows  # no chatter, no row


def test_retention_by_age(tmp_path):
    clock = Clock(T0)
    # days pass on both clocks (the wall clock and the monotonic one)
    with TrendStore(tmp_path / "t.sqlite", retention_days=2, prune_interval_s=3600, clock=clock,
                    monotonic=clock) as store:
        for day in range(5):
            clock.t = T0 + day * DAY_S
            store.record(update(clock.t))
        # pruning ran at each record (a day apart > prune interval): only the last 2 days (+ today) remain
        times = sorted({r.time_s for r in store.query()})
        assert times == [T0 + 2 * DAY_S, T0 + 3 * DAY_S, T0 + 4 * DAY_S]
        assert store.stats().pruned_by_age == 2 * 15


def test_retention_by_row_count_deletes_oldest(tmp_path):
    with TrendStore(tmp_path / "t.sqlite", max_rows=100, clock=Clock(T0)) as store:
        for i in range(20):
            store.record(update(T0 + 10 * i))
        st = store.stats()
        rows = store.query()
    assert st.rows == len(rows) == 100
    assert min(r.time_s for r in rows) > T0  # the oldest went first
    assert max(r.time_s for r in rows) == T0 + 190
    with sqlite3.connect(tmp_path / "t.sqlite") as db:  # sqlite's own count agrees
        assert db.execute("SELECT COUNT(*) FROM samples").fetchone()[0] == 100


def test_min_interval_thins_storage(tmp_path):
    with TrendStore(tmp_path / "t.sqlite", min_interval_s=60, clock=Clock(T0)) as store:
        for i in range(13):  # every 10 s for 2 minutes
            store.record(update(T0 + 10 * i))
        times = sorted({r.time_s for r in store.query(value="overall", point="de")})
    assert times == [T0, T0 + 60, T0 + 120]


def test_query_filters_and_limit(tmp_path):
    with TrendStore(tmp_path / "t.sqlite", clock=Clock(T0)) as store:
        for i in range(10):
            store.record(update(T0 + 60 * i, overall=1.0 + i))
        rows = store.query(machine="ahu-3", point="nde", value="overall", since_s=T0 + 120, until_s=T0 + 300)
        assert [r.value for r in rows] == [3.0, 4.0, 5.0, 6.0]
        last = store.query(point="de", value="overall", limit=2)
        assert [r.value for r in last] == [9.0, 10.0]
        assert store.query(machine="elsewhere") == []
        names = {(s.point, s.name) for s in store.series()}
        assert ("", "speed") in names and ("de", "crest_factor") in names


def test_read_only_missing_store_is_one_line(tmp_path):
    with pytest.raises(StorageError) as info:
        TrendStore(tmp_path / "nothing.sqlite", read_only=True)
    assert "\n" not in str(info.value) and "no trend store" in str(info.value)


def test_iso_times_are_utc():
    # reference values from GNU date: `date -u -d 2026-05-01 +%s` = 1777593600,
    # `date -u -d 2026-05-01T06:30:00+02:00 +%s` = 1777609800
    assert parse_time_utc("2026-05-01", "--since") == 1777593600
    assert parse_time_utc("2026-05-01T00:00:00Z", "--since") == 1777593600
    assert parse_time_utc("2026-05-01T06:30:00+02:00", "--since") == 1777609800
    with pytest.raises(RotorwatchError, match="not an ISO 8601 time"):
        parse_time_utc("yesterday", "--since")


@pytest.fixture
def state_dir(tmp_path):
    with TrendStore(tmp_path / "trends.sqlite", clock=Clock(T0)) as store:
        for i in range(3):
            store.record(update(T0 + 3600 * i, overall=2.0 + i, state="warning" if i == 2 else "normal"))
    return tmp_path


def test_cli_table(state_dir, capsys):
    assert main(["trend", "--state-dir", str(state_dir), "--point", "de", "--value", "overall"]) == 0
    out = capsys.readouterr().out.splitlines()
    assert out[0].split() == ["time", "(UTC)", "machine", "point", "value", "reading", "unit", "state"]
    assert out[2].split() == ["2026-01-01T00:00:00Z", "ahu-3", "de", "overall", "2", "mm/s", "normal"]
    assert out[4].split()[-3:] == ["4", "mm/s", "warning"]
    assert len(out) == 5


def test_cli_csv_since(state_dir, capsys):
    assert main(["trend", "--state-dir", str(state_dir), "--value", "overall", "--since",
                 "2026-01-01T01:00:00Z", "--format", "csv"]) == 0
    rows = list(csv.DictReader(io.StringIO(capsys.readouterr().out)))
    assert {(r["point"], float(r["value"])) for r in rows} == {("de", 3.0), ("nde", 3.0), ("de", 4.0), ("nde", 4.0)}
    assert rows[0]["time_utc"] == "2026-01-01T01:00:00Z" and float(rows[0]["time_s"]) == T0 + 3600


def test_cli_series(state_dir, capsys):
    assert main(["trend", "--state-dir", str(state_dir), "--series", "--point", "-"]) == 0
    out = capsys.readouterr().out.splitlines()
    assert len(out) == 3 and out[2].split()[:5] == ["ahu-3", "-", "speed", "rpm", "3"]


def test_cli_errors_are_one_line(tmp_path, state_dir):
    for argv, needle in (
        (["trend", "--state-dir", str(tmp_path / "none")], "no trend store"),
        (["trend", "--state-dir", str(state_dir), "--since", "last tuesday"], "not an ISO 8601 time"),
        (["trend", "--state-dir", str(state_dir), "--days", "-1"], "must be above 0"),
    ):
        done = subprocess.run([sys.executable, "-m", "rotorwatch", *argv], capture_output=True, text=True,
                              timeout=60)
        assert done.returncode == 2, done.stderr
        assert done.stderr.count("\n") == 1 and needle in done.stderr and "Traceback" not in done.stderr
