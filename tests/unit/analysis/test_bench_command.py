"""``rotorwatch bench`` runs and prints its table (figures are measurements, not asserted)."""

from __future__ import annotations

import re

from rotorwatch.cli import main


def test_bench_prints_a_row_per_case(capsys):
    rc = main(["bench", "--duration", "4", "--reference-duration", "4", "--repeat", "1", "--rates", "25600",
               "--channels", "1,2"])
    out = capsys.readouterr().out
    assert rc == 0
    rows = re.findall(r"^\s+25600\s+(\d)\s+(fixed|searched)\s+([0-9.]+)\s+(\d+)", out, re.M)
    assert [(ch, band) for ch, band, _, _ in rows] == [("1", "fixed"), ("2", "fixed"), ("1", "searched")]
    assert all(float(ms) > 0 and int(rtf) > 0 for _, _, ms, rtf in rows)
    assert "peak RSS" in out


def test_bench_rejects_a_rate_too_low_for_its_machine(capsys):
    assert main(["bench", "--rates", "12000", "--duration", "4", "--reference-duration", "4"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("rotorwatch: ") and "too low" in err and "Traceback" not in err
