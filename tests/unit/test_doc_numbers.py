"""Every kinematic number the docs quote is what ``rotorwatch check`` computes.

The README, the operations docs (deploy/*.md) and the example and scenario files' comments quote defect
multiples and frequencies (``BPFO (3.46 x shaft speed, ~85.4 Hz)``, ``BPFI 6.54x``, a payload example's
``"frequency_hz"``) and the zone boundaries. These went stale once (BPFO 4.07 x / 100.4 Hz for a bearing
whose geometry gives 3.459 x / 85.45 Hz); this test reads the files, finds every such quote and compares
it with the table ``rotorwatch check`` prints for the machine the file describes, to the digits quoted.
The check's own numbers are held to published values elsewhere (test_config.py: the university rig's
published multiples).
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from rotorwatch.cli import main
from rotorwatch.settings.loading import read_toml

REPO = Path(__file__).resolve().parents[2]
DEMO = REPO / "config" / "demo-fan.toml"
NAME = re.compile(r"2 ?x ?BSF|BPFO|BPFI|BSF|FTF")
ORDER = re.compile(r"(?<![\d.])(\d+\.\d+) ?x(?![A-Za-z])")
HZ = re.compile(r"(?<![\d.])(\d+\.\d+) Hz")
PAYLOAD = re.compile(r'"name": "(BPFO|BPFI|BSF|FTF)", "bearing": "([\w.-]+)", (?:"series": "\w+", )?'
                     r'"expected_hz": ([\d.]+), "measured_hz": ([\d.]+)')


def _check_table(config: Path, capsys) -> dict:
    """``check``'s frequency table: {(name, bearing): (order, hz)}, plus the zone boundaries line."""
    # the table comes first; check may still refuse the file after it (the rig configuration names no
    # recording to play, and run would refuse it)
    assert main(["check", str(config)]) in (0, 2)
    out = capsys.readouterr().out
    table: dict = {}
    bearing = None
    for line in out.splitlines():
        m = re.match(r"  bearing (\S+)", line)
        if m:
            bearing = m.group(1)
            continue
        m = re.match(r"\s+(BPFO|BPFI|BSF|2xBSF|FTF)\s+([\d.]+)\s+([\d.]+)$", line)
        if m and bearing:
            table[(m.group(1), bearing)] = (float(m.group(2)), float(m.group(3)))
        m = re.search(r"zone boundaries (A/B [\d.]+, B/C [\d.]+, C/D [\d.]+)", line)
        if m:
            table["zones"] = m.group(1)
    assert any(k != "zones" for k in table), f"check printed no frequency table for {config}"
    return table


def _machine_config(path: Path) -> Path:
    """The configuration a documentation file talks about."""
    if path.parent.name == "scenarios":
        return (path.parent / read_toml(path)["scenario"]["config"]).resolve()
    if path.suffix == ".toml" and "machines" in read_toml(path):
        return path
    return DEMO  # the README and the operations docs use the demo fan


DOCS = sorted([REPO / "README.md", REPO / "DEVELOPERS.md", *(REPO / "deploy").glob("*.md"),
               *(REPO / "config").glob("*.toml"), *(REPO / "config" / "scenarios").glob("*.toml")])


def _agrees(quoted: str, value: float, extra: float = 0.0) -> bool:
    decimals = len(quoted.split(".")[1])
    return abs(float(quoted) - value) <= 0.5 * 10.0**-decimals + extra + 1e-9


def _quotes(text: str):
    """(line number, name, bearing or None, [orders], [Hz]) for each defect name followed by numbers."""
    for i, line in enumerate(text.splitlines(), start=1):
        names = list(NAME.finditer(line))
        bearings = set(re.findall(r"\bfan-n?de\b", line))
        bearing = bearings.pop() if len(bearings) == 1 else None
        for j, m in enumerate(names):
            end = names[j + 1].start() if j + 1 < len(names) else min(len(line), m.end() + 40)
            seg = line[m.end(): end]
            # an order follows its name closely ("BPFO 3.46x", "BPFO (3.46 x shaft speed"); a ratio further
            # on ("... at least 2.5x over its floor") is not one
            orders = [o.group(1) for o in ORDER.finditer(seg) if o.start() <= 12]
            hz = HZ.findall(seg)
            if orders or hz:
                yield i, re.sub(r"\s", "", m.group(0)), bearing, orders, hz


@pytest.mark.parametrize("path", DOCS, ids=[str(p.relative_to(REPO)) for p in DOCS])
def test_quoted_defect_numbers_match_check(path, capsys):
    table = _check_table(_machine_config(path), capsys)
    text = path.read_text()
    wrong = []
    for line_no, name, bearing, orders, hz in _quotes(text):
        rows = [v for (n, b), v in ((k, v) for k, v in table.items() if k != "zones")
                if n == name and (bearing is None or b == bearing)]
        for q in orders:
            if not any(_agrees(q, order) for order, _ in rows):
                wrong.append(f"line {line_no}: {name} {q} x; check gives {[o for o, _ in rows]}")
        for q in hz:
            if not any(_agrees(q, f, 0.006) for _, f in rows):  # check prints Hz to 2 decimals
                wrong.append(f"line {line_no}: {name} {q} Hz; check gives {[f for _, f in rows]}")
    # payload examples: {"name": "BPFO", "bearing": "fan-de", "series": "BPFO", "expected_hz": 85.4467,
    # "measured_hz": ...}
    for m in PAYLOAD.finditer(text):
        name, bearing, f, found = m.groups()
        expected = table.get((name, bearing))
        if expected is None or not _agrees(f, expected[1], 0.006):
            wrong.append(f"payload example: {name} on {bearing} at {f} Hz; check gives {expected}")
        elif abs(float(found) / float(f) - 1) > 0.03:
            wrong.append(f"payload example: measured_hz {found} is outside the 3 % search window of {f}")
    for m in re.finditer(r"A/B [\d.]+, B/C [\d.]+, C/D [\d.]+", text):
        if "group 2" in text[max(0, m.start() - 200): m.start()] and "flexible" not in text[max(0, m.start() - 60): m.start()]:
            if m.group(0) != table["zones"] and _machine_config(path) == DEMO:
                wrong.append(f"zone boundaries {m.group(0)!r}; check gives {table['zones']!r}")
    assert not wrong, f"{path.relative_to(REPO)}: " + "; ".join(wrong)


def test_the_scanner_finds_the_quotes_it_must_check():
    # a stale quote of each kind is found and refused (the scanner cannot silently pass everything)
    m = PAYLOAD.search('{"name": "BPFO", "bearing": "fan-de", "series": "BPFO", "expected_hz": 100.4, '
                       '"measured_hz": 100.7}')
    assert m is not None and m.groups() == ("BPFO", "fan-de", "100.4", "100.7")
    found = list(_quotes("impacts at BPFO (4.07 x shaft speed, ~100.4 Hz); BPFI 6.54x, 2 x BSF (5.33 x)"))
    assert [(n, o, h) for _, n, _, o, h in found] == [("BPFO", ["4.07"], ["100.4"]), ("BPFI", ["6.54"], []),
                                                      ("2xBSF", ["5.33"], [])]
    assert not _agrees("4.07", 3.45938) and _agrees("3.46", 3.45938) and _agrees("85.4", 85.45, 0.006)
