"""The analysis on real recordings: the CWRU bearing test rig (shared dataset, see its README).

Every recording is run through the command line twice: quick mode with the rig's drive-end bearing
geometry at the file's stored speed, and with ``config/university-rig.toml`` (speed estimated from the
spectrum). Expected outcomes come from the dataset's labels (CWRU Bearing Data Center): outer-race files
-> first finding BPFO, inner-race files -> BPFI, the normal baseline -> neither. The ball-fault record is
weak (dataset README): it is only required to read as abnormal next to the normal baseline.
"""

from __future__ import annotations

import json
import re
from pathlib import Path

import numpy as np
import pytest

from components import shared_datasets_dir
from rotorwatch.cli import main

pytestmark = pytest.mark.realdata

REPO = Path(__file__).resolve().parents[2]
CONFIG = REPO / "config" / "university-rig.toml"
# CWRU drive-end bearing (CWRU Bearing Data Center bearing page, via the dataset README)
BEARING = "n=9,d=0.3126in,D=1.537in,angle=0"
DATA = shared_datasets_dir()
FILES = sorted(DATA.glob("*.npz")) if DATA.is_dir() else []
EXPECTED_FIRST = {"outer_race": "BPFO", "inner_race": "BPFI"}


def _label(path: Path) -> tuple[str, float]:
    with np.load(path, allow_pickle=False) as z:
        return str(z["fault"]), float(z["rpm"])


def _analyze(capsys, path: Path, *extra: str) -> dict:
    rc = main(["analyze", str(path), *extra, "--format", "json"])
    out = capsys.readouterr()
    assert rc == 0, out.err
    return json.loads(out.out)


def _quick(capsys, path: Path, *extra: str) -> dict:
    _, rpm = _label(path)
    return _analyze(capsys, path, "--rpm", f"{rpm:g}", "--bearing", BEARING, *extra)


def _configured(capsys, path: Path, *extra: str) -> dict:
    return _analyze(capsys, path, "--config", str(CONFIG), "--point", "de", *extra)


def test_the_shared_set_is_complete(shared_datasets):
    faults = sorted(_label(p)[0] for p in sorted(shared_datasets.glob("*.npz")))
    assert faults == ["ball", "inner_race", "inner_race", "inner_race", "normal", "outer_race", "outer_race",
                      "outer_race"]


@pytest.mark.parametrize("path", FILES, ids=[p.stem for p in FILES])
@pytest.mark.parametrize("mode", ["quick", "config"])
def test_first_finding_matches_the_label(path, mode, shared_datasets, capsys):
    fault, rpm = _label(path)
    doc = _quick(capsys, path) if mode == "quick" else _configured(capsys, path)
    names = [f["name"] for f in doc["findings"]]
    print(f"{path.name} [{mode}] rpm {doc['rpm']:.1f} ({doc['rpm_source']}), band {doc['envelope_band_hz']}, "
          f"findings {[(f['name'], round(f['prominence_db'], 1), round(f['severity_m_s2'], 3)) for f in doc['findings']]}")
    # the rig runs a healthy shaft and motor: no shaft, drive, flow or electrical finding is invented
    assert [f["name"] for f in doc["findings"] if f["kind"] != "bearing"] == [], names
    if fault in EXPECTED_FIRST:
        assert names and names[0] == EXPECTED_FIRST[fault], names
        first = doc["findings"][0]
        assert first["measured_hz"] == pytest.approx(first["expected_hz"], rel=0.03)  # slip + speed (references.md s.3)
        assert first["harmonics_found"] >= 2
    elif fault == "normal":
        assert "BPFO" not in names and "BPFI" not in names, names
    if mode == "config":
        assert doc["rpm_source"] == "estimated"
        assert doc["rpm"] == pytest.approx(rpm, rel=3e-3)  # stored rpm, hand-recorded (dataset README)


@pytest.mark.parametrize("extra", [(), ("--envelope-band", "2000,5000")], ids=["searched", "2-5kHz"])
def test_ball_fault_reads_abnormal_next_to_the_normal_baseline(extra, shared_datasets, capsys):
    # dataset README: in the ball record the lines at BPFO, BPFI, BSF (and 2xBPFO, 1x) are all about
    # equally raised, with no clean BSF series; the normal baseline shows 2-3 x at those lines. So: every
    # defect line of the ball record must stand higher over its floor than any defect line of the
    # normal record, with the rig configuration's searched band and with the README's 2-5 kHz band.
    ball = next(p for p in FILES if _label(p)[0] == "ball")
    normal = next(p for p in FILES if _label(p)[0] == "normal")
    # A line claimed by a finding's family is no evidence for another defect (findings.py rule 8): a
    # window whose only lines a finding claimed reads 0, and is left out of the comparison.
    b, n = _configured(capsys, ball, *extra), _configured(capsys, normal, *extra)
    print("ball", b["defect_prominence"], [f["name"] for f in b["findings"]], "normal", n["defect_prominence"])
    emptied = [k for k, v in b["defect_prominence"].items() if v == 0.0]
    assert not emptied or b["findings"], emptied
    assert min(v for v in b["defect_prominence"].values() if v > 0) > max(n["defect_prominence"].values())


def test_check_table_matches_the_dataset_readme(shared_datasets, capsys):
    # the README's published multiples (CWRU Bearing Data Center): | BPFI | BPFO | FTF | BSF | row
    text = (shared_datasets / "README.md").read_text()
    m = re.search(r"\|\s*BPFI\s*\|\s*BPFO\s*\|\s*FTF\s*\|\s*BSF\s*\|\s*\n\|[-| ]+\|\s*\n\|([^\n]+)\|", text)
    assert m, "published multiples table not found in the dataset README"
    published = dict(zip(("BPFI", "BPFO", "FTF", "BSF"), (float(v) for v in m.group(1).split("|"))))
    recording = next(shared_datasets.glob("*_12k.npz"))  # the rig configuration plays a 12 kHz recording
    assert main(["check", str(CONFIG), "--set", f'acquisition.recording="{recording}"']) == 0
    out = capsys.readouterr().out
    for name, value in published.items():
        row = re.search(rf"^\s+{name}\s+([0-9.]+)\s+([0-9.]+)\s*$", out, re.M)
        assert row, name
        assert float(row.group(1)) == pytest.approx(value, abs=5e-4)  # tolerance: references.md section 2


def _by_fault_and_size(fault: str, size: str) -> Path:
    return next(p for p in FILES if _label(p)[0] == fault and f"_{size}_" in p.name and p.name.endswith("_12k.npz"))


@pytest.mark.parametrize("band", ["2000,5000", "1000,3000"])
def test_severity_and_prominence_on_the_0007_and_0021_recordings(band, shared_datasets, capsys):
    # Pairs of the dataset (README): inner race 0.007 in (105) and 0.021 in (209), outer race at 6:00 0.007 in
    # (130) and 0.021 in (234), all at 12 kHz and 0 hp, each analysed in one fixed demodulation band.
    # What the data shows in the 2-5 kHz and 1-3 kHz bands (printed): the prominence (signal to noise) of
    # the race line falls from 0.007 in to 0.021 in, for both faults, so it is no measure of defect size;
    # the severity (envelope line level) of the inner-race fault grows. The outer-race severity does not:
    # it falls in 2-5 kHz (5.6 -> 4.2 m/s^2) and stays level in 1-3 kHz (2.45 -> 2.43). In 500-2500 Hz it
    # is the other way round (outer race 0.18 -> 0.62, inner race 0.60 -> 0.29 m/s^2). The seeded faults
    # sit in different bearings mounted one after the other, so these records do not show a severity
    # that grows with the fault in every band, and the test claims only what they show.
    rows = {}
    for fault, name in (("inner_race", "BPFI"), ("outer_race", "BPFO")):
        for size in ("007", "021"):
            doc = _quick(capsys, _by_fault_and_size(fault, size), "--envelope-band", band)
            assert doc["findings"] and doc["findings"][0]["name"] == name, doc["findings"]
            rows[fault, size] = doc["findings"][0]
    print(f"band {band} Hz: " + "; ".join(f"{fault} {size}: severity {f['severity_m_s2']:.3g} m/s^2, prominence "
                                          f"{f['prominence_db']:.1f} dB" for (fault, size), f in rows.items()))
    assert rows["outer_race", "021"]["prominence_db"] < rows["outer_race", "007"]["prominence_db"] - 6.0
    assert rows["inner_race", "021"]["prominence_db"] < rows["inner_race", "007"]["prominence_db"] - 3.0
    assert rows["inner_race", "021"]["severity_m_s2"] > 1.3 * rows["inner_race", "007"]["severity_m_s2"]


@pytest.mark.parametrize("path", [p for p in FILES if _label(p)[0] in EXPECTED_FIRST], ids=lambda p: p.stem)
def test_bsf_prominence_is_not_a_line_of_the_race_fault(path, shared_datasets, capsys):
    # On outer-race records the BPFO + 1x line falls inside the 2 x BSF window (3.5848 + 1 = 4.5848 vs
    # 4.7135 x shaft, within 3 %), on inner-race records BPFI - 3x inside the BSF window (2.4152 vs
    # 2.3566, published multiples in the dataset README). Those lines belong to the race fault's family
    # and must not be reported as the BSF prominence: without them the BSF prominence is that of some
    # unrelated line, below a tenth of the race line's own (the records have no element fault).
    fault, _ = _label(path)
    seen = []
    for extra in ((), ("--envelope-band", "2000,5000")):
        doc = _configured(capsys, path, *extra)
        seen.append((extra, doc["defect_prominence"][f"{EXPECTED_FIRST[fault]}:de"], doc["defect_prominence"]["BSF:de"]))
    print(path.name, [(e, round(race, 1), round(bsf, 1)) for e, race, bsf in seen])
    assert all(bsf < 0.1 * race for _, race, bsf in seen), seen
