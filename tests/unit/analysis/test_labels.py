"""Line names as an analyst writes them (harmonic "3x BPFO", sideband "BPFI - 2x", "BSF - FTF", electrical
"2xLF"), the same in ``rotorwatch analyze`` (text and JSON), the status page's markers and snapshots. The
frequencies are the CWRU drive-end bearing's published multiples (dataset README / references.md Ex. 1)."""

from __future__ import annotations

import json

import numpy as np
import pytest

from rotorwatch.analysis.labels import Line, harmonic, kinematic_lines, match_line, name_line, sideband
from rotorwatch.cli import main
from rotorwatch.storage.snapshots import markers_for
from rotorwatch.web.views import defect_markers

from .helpers import G_N, impact_train, machine

SHAFT_HZ = 29.95  # 1797 r/min
# CWRU drive-end bearing, published multiples (BPFI 5.4152, BPFO 3.5848, FTF 0.39828, BSF 2.3566)
BPFI, BPFO, FTF, BSF = 5.4152, 3.5848, 0.39828, 2.3566


def _name(order: float, m=None) -> str | None:
    m = m or machine(rpm=SHAFT_HZ * 60)
    lines = kinematic_lines(m, SHAFT_HZ, 1000.0)
    return name_line(order * SHAFT_HZ, lines, 0.05, tolerance=0.001)


@pytest.mark.parametrize("order, label", [
    (BPFO, "BPFO"), (3 * BPFO, "3x BPFO"), (BPFI - 2, "BPFI - 2x"), (BPFI + 1, "BPFI + 1x"),
    (2 * BPFI - 2, "2x BPFI - 2x"), (BSF, "BSF"), (2 * BSF, "2x BSF"), (3 * BSF, "3x BSF"), (BSF - FTF, "BSF - FTF"),
    (2 * BSF + 2 * FTF, "2x BSF + 2x FTF"), (2 * FTF, "2x FTF"), (1.0, "1x"), (4.0, "4x"),
])
def test_labels_read_as_an_analyst_writes_them(order, label):
    assert _name(order) == label


def test_no_label_repeats_a_multiplier_or_glues_numbers():
    labels = [ln.label for ln in kinematic_lines(machine(rpm=SHAFT_HZ * 60, blades=11, line_frequency_hz=60.0),
                                                 SHAFT_HZ, 1000.0)]
    assert not [s for s in labels if "2x2x" in s or "21x" in s or "x2x" in s], labels
    assert "2xLF" in labels and "4xLF" in labels and "2x blade pass" in labels
    assert len(set(labels)) == len(labels)  # one name per line


def test_the_electrical_line_and_the_bearing_travel_beside_the_label():
    m = machine(rpm=SHAFT_HZ * 60, line_frequency_hz=50.0)
    lines = kinematic_lines(m, SHAFT_HZ, 400.0)
    line = match_line(100.0, lines, 0.05, tolerance=0.001)
    assert line == Line(100.0, "2xLF", None, "electrical") and line.text() == "2xLF (electrical)"
    bpfo = match_line(BPFO * SHAFT_HZ, lines, 0.05, tolerance=0.001)
    assert bpfo.label == "BPFO" and bpfo.bearing == "b1" and bpfo.text(with_bearing=True) == "BPFO, bearing b1"
    assert harmonic(1, "1x") == "1x" and harmonic(3, "BPFO") == "3x BPFO" and sideband("BSF", -2, "FTF") == "BSF - 2x FTF"


def test_page_markers_and_snapshot_markers_use_the_same_names():
    m = machine(rpm=SHAFT_HZ * 60)
    page = {mk["label"] for mk in defect_markers(m, "p1", SHAFT_HZ * 60)}
    snap = {mk["name"] for mk in markers_for(m, SHAFT_HZ)}
    assert {"BPFO", "2x BPFO", "3x BPFO", "2x BSF", "1x", "2x"} <= page
    assert {"BPFO", "2x BPFO", "3x BPFO", "2x BSF", "1x", "2x"} <= snap


def test_analyze_names_the_envelope_peaks_alike_in_text_and_json(tmp_path, capsys):
    import soundfile

    fs, rate = 25600, BPFI * SHAFT_HZ
    x = impact_train(fs, 6.0, rate, 4000.0, amplitude=6.0, seed=4)
    t = np.arange(x.size) / fs
    x *= 1.0 + 0.5 * np.cos(2 * np.pi * 2 * SHAFT_HZ * t)  # sidebands at +/- 2x, as on the rig's 0.007 in records
    f = tmp_path / "ir.wav"
    soundfile.write(f, (x / G_N).astype(np.float32), fs, subtype="FLOAT")
    args = ["analyze", str(f), "--rpm", f"{SHAFT_HZ * 60:g}", "--bearing", "n=9,d=0.3126in,D=1.537in,angle=0",
            "--unit", "g"]
    assert main(args + ["--format", "json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    names = [p["matches"] for p in doc["envelope_peaks"]]
    assert "BPFI" in names and "BPFI - 2x" in names, names
    assert main(args) == 0
    text = capsys.readouterr().out
    assert all(f"  {n}\n" in text for n in names if n), text


def _cases():
    rng = np.random.default_rng(11)
    yield rng.standard_normal(2000)  # noise: maxima everywhere
    spec = np.abs(rng.standard_normal(1600)) * 0.1
    spec[[100, 103, 250, 251, 900]] = [3.0, 2.5, 4.0, 4.0, 1.0]  # close rivals, a two-sample flat top
    yield spec
    yield np.round(rng.standard_normal(3000), 1)  # many flat stretches, some rising again after them
    yield np.array([0.0, 1.0, 1.0, 1.0, 0.5, 2.0, 2.0, 3.0, 3.0, 1.0, 1.0])


@pytest.mark.parametrize("distance", [1, 2, 5, 17])
def test_peaks_are_scipy_find_peaks(distance):
    # reference: scipy.signal.find_peaks(x, distance=d), which reports used to call
    from scipy.signal import find_peaks

    from rotorwatch.analysis.labels import _spaced_peaks, local_maxima

    for x in _cases():
        assert np.array_equal(local_maxima(x), find_peaks(x)[0])
        assert np.array_equal(_spaced_peaks(x, distance), find_peaks(x, distance=distance)[0])


def test_analyze_does_not_load_scipy_signal_or_stats(tmp_path):
    # the reports' peak picking is numpy's own: analyze stays off scipy.signal and scipy.stats (memory)
    import subprocess
    import sys

    fs = 20000.0
    x = impact_train(fs, 3.0, 87.0, amplitude=20.0, seed=3) / G_N
    path = tmp_path / "rec.npz"
    np.savez(path, signal=x.astype(np.float32), fs=fs)
    code = (
        "import sys, io, contextlib\n"
        "from rotorwatch.cli import main\n"
        "with contextlib.redirect_stdout(io.StringIO()):\n"
        f"    rc = main(['analyze', {str(path)!r}, '--rpm', '1500', '--bearing', 'n=9,d=8mm,D=40mm,angle=0'])\n"
        "print(rc, sorted(m for m in ('scipy.signal', 'scipy.stats') if m in sys.modules))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert out.stdout.strip() == "0 []", out.stdout + out.stderr
