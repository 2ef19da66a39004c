"""A machine's recorded life, replayed: histories built from the CWRU bearing recordings (shared set).

Each history is healthy windows first, then faulted ones, every window an element at its own time (30 min
apart, from 2004-02-12 10:00 UTC: the cadence and dates are ours, the samples are the data center's):

- healthy: the normal baseline ``cwru_097`` (48 kHz, dataset README) decimated to 12 kHz with scipy's
  zero-phase FIR decimator, cut into 10 overlapping 4 s windows (5 h);
- faulted: 8 windows of the 0.007 in outer-race (``cwru_130``) or inner-race (``cwru_105``) record, 12 kHz.

The labels are the data center's (dataset README): the outer-race record must raise the outer-race
envelope band and name BPFO, the inner-race record the inner-race band and BPFI, both only after the
fault starts, never in the healthy part. Each history is written in every input format and must replay
the same. The growth history (healthy, then 0.007 in, then 0.021 in inner race, same rate and load)
must show the inner-race envelope value rising at each step.
"""

from __future__ import annotations

import json
import zipfile
from datetime import UTC, datetime, timedelta
from pathlib import Path

import numpy as np
import pytest
from scipy.signal import decimate

if __name__ == "__main__":  # run as a script: tests/ on the path for components
    import sys

    sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
from components import shared_datasets_dir  # noqa: E402
from rotorwatch.cli import main  # noqa: E402
from rotorwatch.recordings import write_wav  # noqa: E402

pytestmark = pytest.mark.realdata

REPO = Path(__file__).resolve().parents[2]
CONFIG = REPO / "config" / "university-rig.toml"
DATA = shared_datasets_dir()
FS = 12000
WIN = 4 * FS  # analysis.window_s = 4 s in the rig's configuration
T0 = datetime(2004, 2, 12, 10, 0, tzinfo=UTC)
STEP = timedelta(minutes=30)
HEALTHY = 10
FAULT_START = T0 + HEALTHY * STEP  # 2004-02-12 15:00
FORMATS = ("wav", "npz", "text", "stack", "zip")
FAULTS = {"outer": ("cwru_130_outer_race_007_at6_0hp_12k.npz", "outer-race", "BPFO"),
          "inner": ("cwru_105_inner_race_007_0hp_12k.npz", "inner-race", "BPFI")}


def _load(name: str) -> np.ndarray:
    with np.load(DATA / name, allow_pickle=False) as z:
        return np.asarray(z["signal"], dtype=np.float64)  # g (dataset README)


def _windows(x: np.ndarray, n: int) -> list[np.ndarray]:
    starts = np.linspace(0, len(x) - WIN, n).astype(int)
    return [x[s:s + WIN] for s in starts]


def _healthy() -> list[np.ndarray]:
    normal_48k = _load("cwru_097_normal_0hp_48k.npz")  # 48 kHz, not 12 kHz (dataset README)
    return _windows(decimate(normal_48k, 4, ftype="fir", zero_phase=True), HEALTHY)


def _times(n: int) -> list[datetime]:
    return [T0 + k * STEP for k in range(n)]


def write_history(root: Path, fmt: str, windows: list[np.ndarray]) -> tuple[Path, list[str]]:
    """Write ``windows`` (g, 12 kHz) in one input format; returns the path and the extra options."""
    times = _times(len(windows))
    root.mkdir(parents=True, exist_ok=True)
    if fmt == "stack":
        path = root / "history.npz"
        np.savez_compressed(path, snapshots=np.asarray(windows, dtype=np.float32),
                            timestamps=np.array([t.strftime("%Y-%m-%dT%H:%M:%SZ") for t in times]), fs=float(FS), unit="g")
        return path, []
    folder = root / fmt
    folder.mkdir()
    for t, w in zip(times, windows):
        stem = t.strftime("%Y.%m.%d.%H.%M.%S")
        if fmt in ("wav", "zip"):
            p = write_wav(folder / f"de-{k_of(t)}.wav", w, FS, "g")
            p.with_suffix(".json").write_text(json.dumps({"time": t.isoformat()}))
        elif fmt == "npz":
            np.savez(folder / f"rig-{stem}.npz", signal=w.astype(np.float32), fs=float(FS), unit="g")
        else:
            np.savetxt(folder / f"{stem}.csv", w[:, None], fmt="%.7g", header="de (g)", comments="")
    if fmt == "zip":
        path = root / "history.zip"
        with zipfile.ZipFile(path, "w") as z:
            for f in sorted(folder.iterdir()):
                z.write(f, f"export/{f.name}")
        return path, []
    if fmt == "npz":
        return folder, ["--time-pattern", "%Y.%m.%d.%H.%M.%S"]
    if fmt == "text":
        return folder, ["--time-pattern", "%Y.%m.%d.%H.%M.%S", "--header-lines", "1", "--sample-rate", str(FS),
                        "--unit", "g", "--columns", "de=0"]
    return folder, []


def k_of(t: datetime) -> int:
    return int((t - T0) / STEP)


def replay(capsys, path: Path, *extra: str) -> tuple[int, list[dict], str]:
    rc = main(["replay", "--config", str(CONFIG), "--history", str(path), "--learning-updates", "6",
               "--format", "jsonl", *extra])
    out = capsys.readouterr()
    return rc, [json.loads(x) for x in out.out.splitlines() if x.strip()], out.err


def of_type(lines: list[dict], kind: str) -> list[dict]:
    return [x for x in lines if x["type"] == kind]


@pytest.fixture(scope="module")
def healthy_windows(shared_datasets) -> list[np.ndarray]:
    return _healthy()


@pytest.mark.parametrize("fault", sorted(FAULTS))
@pytest.mark.parametrize("fmt", FORMATS)
def test_history_learns_then_raises_only_after_the_fault(fault, fmt, tmp_path, capsys, healthy_windows):
    name, band, finding = FAULTS[fault]
    windows = healthy_windows + _windows(_load(name), 8)
    path, extra = write_history(tmp_path, fmt, windows)
    start = FAULT_START.strftime("%Y-%m-%d %H:%M")
    expect = [f"{band} on de never warning before {start}",
              f"machine never warning before {start}",
              f"{band} on de reaches alarm before 2004-02-12 17:00",
              f"{band} on de reaches warning at least 3 h before the end",
              f"finding:{finding} on de reaches warning after {start}",
              "point de is learning before 2004-02-12 12:30"]
    rc, lines, err = replay(capsys, path, *extra, *[a for e in expect for a in ("--expect", e)],
                            "--workers", "2" if fmt == "text" else "1")
    verdicts = of_type(lines, "expectation")
    assert rc == 0 and all(v["passed"] for v in verdicts), [v for v in verdicts if not v["passed"]] or err
    ups = of_type(lines, "update")
    assert len(ups) == 18
    for u in ups:
        faulted = u["date"] >= FAULT_START.strftime("%Y-%m-%dT%H:%M:%SZ")
        assert u["points"]["de"]["findings"][finding]["present"] == faulted, (u["date"], finding)
    margin = next(m for m in of_type(lines, "margin") if m["value"] == band)
    assert margin["first_crossed"]["warning"] == FAULT_START.strftime("%Y-%m-%dT%H:%M:%SZ")
    assert margin["healthy_spread"] < 1.5  # the healthy windows stay near their baseline


def test_every_format_replays_the_same(tmp_path, capsys, healthy_windows):
    windows = healthy_windows + _windows(_load(FAULTS["outer"][0]), 8)
    seen = {}
    for fmt in FORMATS:
        path, extra = write_history(tmp_path / fmt, fmt, windows)
        rc, lines, err = replay(capsys, path, *extra)
        assert rc == 0, err
        seen[fmt] = [(u["date"], u["state"], u["points"]["de"]["values"]["outer-race"]["value"]) for u in of_type(lines, "update")]
    ref = seen["stack"]
    for fmt, got in seen.items():
        assert [g[:2] for g in got] == [r[:2] for r in ref], fmt
        # float32 samples (WAV, archive) and 7-digit text agree to 1e-4
        assert [g[2] for g in got] == pytest.approx([r[2] for r in ref], rel=1e-4), fmt


def test_growth_raises_the_inner_race_value_at_each_step(tmp_path, capsys, healthy_windows):
    stages = [healthy_windows, _windows(_load("cwru_105_inner_race_007_0hp_12k.npz"), 6),
              _windows(_load("cwru_209_inner_race_021_0hp_12k.npz"), 6)]
    path, extra = write_history(tmp_path, "stack", [w for s in stages for w in s])
    # The 2-5 kHz demodulation band the single-record tests also use (test_cwru.py). With the band searched
    # on the healthy windows (3.7-5.0 kHz) the 0.021 in record reads lower than the 0.007 in one: see the README.
    band = ["--set", "machines.rig.analysis.envelope.band_hz=[2000, 5000]"]
    rc = main(["replay", "--config", str(CONFIG), "--history", str(path), "--learning-updates", "6", *band,
               "--lead", "2 h"])
    text = capsys.readouterr().out
    assert rc == 0
    table = text[text.index("Threshold margins"):]
    row = next(line.split() for line in table.splitlines() if line.split()[:2] == ["de", "inner-race"])
    assert row[7:9] == ["2004-02-12", "15:00"]  # first crossed the warning level: the first faulted update
    rc, lines, err = replay(capsys, path, *band, "--lead", "2 h")
    assert rc == 0, err
    ups = of_type(lines, "update")
    values = [u["points"]["de"]["values"]["inner-race"]["value"] for u in ups]
    healthy, small, large = values[:10], values[10:16], values[16:]
    assert max(healthy) < min(small) and max(small) < min(large), (healthy, small, large)
    present = [u["points"]["de"]["findings"]["BPFI"]["present"] for u in ups]
    assert present == [False] * 10 + [True] * 12
    margin = next(m for m in of_type(lines, "margin") if m["value"] == "inner-race")
    assert margin["first_crossed"]["warning"] == "2004-02-12T15:00:00Z"
    lo, hi = margin["warn_range"]
    # any level above the healthy spread and below the 0.007 in values warns from the first faulted update;
    # with 2 h of lead (the last update 20:30, the 0.021 in record from 18:00) levels up to its values do too
    assert max(healthy[6:]) <= lo < min(small)
    assert hi >= min(large[:2])


if __name__ == "__main__":
    # python tests/realdata/test_history.py OUT.npz [outer|inner]: the history these tests build, as one
    # .npz of snapshots (the README's example)
    out, fault = Path(sys.argv[1]), (sys.argv[2] if len(sys.argv) > 2 else "outer")
    out.parent.mkdir(parents=True, exist_ok=True)
    path, _ = write_history(out.parent / (out.stem + ".d"), "stack", _healthy() + _windows(_load(FAULTS[fault][0]), 8))
    path.replace(out)
    (out.parent / (out.stem + ".d")).rmdir()
    print(f"{out}: {HEALTHY} healthy windows then 8 {fault}-race windows, 30 min apart from {T0:%Y-%m-%d %H:%M} UTC")
