"""``rotorwatch bench`` runs and prints its table (figures are measurements, not asserted)."""

from __future__ import annotations

import re

from rotorwatch.cli import main


def test_bench_prints_a_row_per_case(capsys):
    rc = main(["bench", "--duration", "6", "--repeat", "2", "--rates", "25600", "--channels", "1,2"])
    out = capsys.readouterr().out
    assert rc == 0
    cell = r"(\d+) \((\d+)-(\d+)\)"
    rows = re.findall(r"^\s+25\.6 kHz\s+(\d)\s+" + r"\s+".join([cell] * 5), out, re.M)
    assert [r[0] for r in rows] == ["1", "2"]
    for r in rows:
        figures = [int(v) for v in r[1:]]
        assert all(v > 0 for v in figures)
        for i in range(0, 15, 3):  # median within min..max
            assert figures[i + 1] <= figures[i] <= figures[i + 2]
    assert "peak RSS" in out and "machine:" in out


def test_bench_rejects_a_rate_too_low_for_its_machine(capsys):
    assert main(["bench", "--rates", "12000", "--duration", "4"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("rotorwatch: ") and "too low" in err and "Traceback" not in err


def test_bench_rejects_an_interval_longer_than_the_window(capsys):
    assert main(["bench", "--update-interval", "5", "--window", "4"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("rotorwatch: --update-interval 5") and "Traceback" not in err
