"""Figures behind the bearing decision rule and the kept envelope band (prints tables; asserts nothing).

    .venv/bin/python tests/bench/bench_findings.py [--updates 30000] [--skip-nulls] [--skip-spread]

1. Null distributions (cases of our own, ``tests/unit/analysis/null_cases.py``): false findings per case,
   and for the lone-line case (one unexplained line in the BPFI window, nothing else) how often noise
   lifts the line's harmonic and sideband windows above the confirmation thresholds, which is what the
   rule in ``agent/analysis/findings.py`` was set on.
2. The shared CWRU recordings (``../shared/datasets/bearing-faults``): finding, prominence (dB over the
   local floor), severity (m/s^2 of the envelope), lines found, and the BSF prominence, with the band
   searched and fixed at 2-5 kHz.
3. Band-value spread over healthy updates of the demo fan (``config/scenarios/healthy.toml``, searched
   band): the configured fixed band against a band searched on every update and a band kept from the
   first update (what the pipeline does now).
4. Severity and prominence along the demo's growing outer-race spall (``demo-outer-race.toml``).
"""

from __future__ import annotations

import argparse
import math
import sys
import time
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(REPO / "tests" / "unit" / "analysis"))

import null_cases  # noqa: E402

from rotorwatch.analysis import findings as F  # noqa: E402
from rotorwatch.analysis import point as point_mod  # noqa: E402


def nulls(updates: int) -> None:
    print(f"1. False findings over {updates} updates per case (fixed seeds 0..{updates - 1})")
    captured: list = []
    real_assess = point_mod.assess

    def spy(ses, df, shaft, defects, **kw):
        captured.append((np.array(ses), df, shaft, defects, kw.get("line_frequency_hz")))
        return real_assess(ses, df, shaft, defects, **kw)

    point_mod.assess = spy
    try:
        for name in null_cases.CASES:
            c = null_cases.case(name)
            t0 = time.perf_counter()
            false = 0
            support: list[list[float]] = []
            fundamental: list[float] = []
            for seed in range(updates):
                captured.clear()
                false += bool(c.analyze(seed).findings)
                ses, df, shaft, defects, lf = captured[0]
                ev = F.Evidence(shaft, df, lf)
                for cand in F.candidates(ses, df, shaft, defects, ev):
                    fundamental.append(cand.fundamental.ratio)
                    if name == "lone_line" and cand.name == "BPFI":
                        support.append(sorted((x.ratio for x in cand.harmonics + cand.sidebands), reverse=True))
            ms = 1000 * (time.perf_counter() - t0) / updates
            print(f"   {name:<10} false findings {false} of {updates} ({ms:.1f} ms per update with the signal)")
            fr = np.asarray(fundamental)
            print(f"              fundamental windows (every defect): >= 4x in {np.mean(fr >= 4):.2e} of "
                  f"{fr.size}, 99.9 % quantile {np.quantile(fr, 0.999):.2f}")
            if support:
                s = np.array([(v + [0, 0])[:2] for v in support])
                print("              lone line's harmonic and sideband windows (4 per update):")
                for t in (2.5, 3.0, 3.5, 4.0, 4.5, 5.0):
                    print(f"                one >= {t:<4}: {np.mean(s[:, 0] >= t):.2e}   two >= {t:<4}: "
                          f"{np.mean(s[:, 1] >= t):.2e}")
                print(f"                rule (one >= {F.SUPPORT_ONE_RATIO:g} or two >= {F.SUPPORT_TWO_RATIO:g}): "
                      f"{np.mean((s[:, 0] >= F.SUPPORT_ONE_RATIO) | (s[:, 1] >= F.SUPPORT_TWO_RATIO)):.2e}")
    finally:
        point_mod.assess = real_assess


def recordings() -> None:
    from rotorwatch.analysis.point import PointAnalyzer
    from rotorwatch.settings.models import Machine

    data = REPO.parent / "shared" / "datasets" / "bearing-faults"
    files = sorted(data.glob("*.npz"))
    print(f"\n2. Shared recordings ({data}): drive-end bearing n=9, d=0.3126 in, D=1.537 in, speed as stored")
    if not files:
        print("   (not present)")
        return
    print(f"   {'file':<40}{'band':<11}{'finding':<9}{'prominence dB':>14}{'severity m/s^2':>16}{'lines h/s':>10}"
          f"{'BSF prominence':>16}")
    for path in files:
        with np.load(path, allow_pickle=False) as z:
            x = z["signal"].astype(float) * 9.80665
            fs, rpm = float(z["fs"]), float(z["rpm"])
        for band in (None, [2000.0, 5000.0]):
            m = Machine.model_validate({
                "id": "rig", "speed": {"mode": "fixed", "rpm": rpm},
                "bearings": [{"id": "de", "elements": 9, "element_diameter": 0.3126, "pitch_diameter": 1.537,
                              "diameter_unit": "in"}],
                "points": [{"id": "de", "bearing": "de", "sensor": {"channel": 0, "sensitivity_mv_per_g": 100.0}}],
                "analysis": {"window_s": x.size / fs, "envelope": {"band_hz": band}}})
            r = PointAnalyzer(m, m.points[0], fs).analyze(x)
            f = r.findings[0] if r.findings else None
            label = "searched" if band is None else "2-5 kHz"
            row = (f"{f.name:<9}{f.prominence_db:>14.1f}{f.severity_m_s2:>16.3g}"
                   f"{f'{f.harmonics_found}/{f.sidebands_found}':>10}" if f else f"{'none':<9}{'':>14}{'':>16}{'':>10}")
            print(f"   {path.stem:<40}{label:<11}{row}{r.defect_prominence.get('BSF:de', math.nan):>16.1f}")


def spread(updates: int = 40) -> None:
    from rotorwatch.analysis.point import PointAnalyzer
    from rotorwatch.simulators.render import ScenarioRenderer
    from rotorwatch.simulators.scenario import load_scenario

    sc = load_scenario(REPO / "config" / "scenarios" / "healthy.toml")
    r = ScenarioRenderer(sc)
    m = sc.machine
    fs = 51200.0
    env = m.analysis.envelope.model_copy(update={"band_hz": None})
    searched_m = m.model_copy(update={"analysis": m.analysis.model_copy(update={"envelope": env})})
    print(f"\n3. Envelope band values over {updates} healthy hourly updates of the demo fan (healthy scenario)")
    print(f"   {'point':<7}{'band':<34}{'max/min':>8}{'CoV':>8}{'bands used':>12}")
    for p in m.points:
        name = next(b.name for b in m.bands_for(p.id) if b.quantity == "envelope")
        blocks = [r.snapshot(43200.0 + 3600.0 * k, m.analysis.window_s, fs)[p.id] / p.sensor.volts_per_m_s2
                  for k in range(updates)]
        fixed = PointAnalyzer(m, p, fs)
        searched = PointAnalyzer(searched_m, p, fs)
        rows = [("fixed (configured " + "-".join(f"{v:g}" for v in m.analysis.envelope.band_hz) + " Hz)",
                 [fixed.analyze(x) for x in blocks])]
        for criterion in ("cyclic", "kurtosis"):
            a = PointAnalyzer(searched_m, p, fs, band_criterion=criterion)
            rows.append((f"searched every update ({criterion})", [a.analyze(x) for x in blocks]))
        kept_band = searched.analyze(blocks[0]).envelope_band_hz
        rows.append((f"kept from update 1 ({kept_band[0]:.0f}-{kept_band[1]:.0f} Hz)",
                     [searched.analyze(x, envelope_band_hz=kept_band) for x in blocks]))
        for label, results in rows:
            v = np.array([res.bands[name] for res in results])
            print(f"   {p.id:<7}{label:<34}{v.max() / v.min():>8.3f}{v.std() / v.mean():>8.3f}"
                  f"{len({res.envelope_band_hz for res in results}):>12}")


def growing(days=(10, 13, 16, 19, 22, 25, 28, 30)) -> None:
    from rotorwatch.analysis.point import PointAnalyzer
    from rotorwatch.simulators.render import ScenarioRenderer
    from rotorwatch.simulators.scenario import load_scenario

    sc = load_scenario(REPO / "config" / "scenarios" / "demo-outer-race.toml")
    r = ScenarioRenderer(sc)
    m = sc.machine
    p = m.point("de-h")
    a = PointAnalyzer(m, p, 51200.0)
    print("\n4. The demo's growing outer-race spall on fan-de (de-h, configured 2-7 kHz band)")
    print(f"   {'day':>5}{'finding':>9}{'severity m/s^2':>16}{'prominence dB':>15}{'BPFO prominence':>17}")
    for day in days:
        res = a.analyze(r.snapshot(86400.0 * day, m.analysis.window_s, 51200.0)["de-h"] / p.sensor.volts_per_m_s2)
        f = next((x for x in res.findings if x.name == "BPFO"), None)
        sev = f"{f.severity_m_s2:>16.4f}{f.prominence_db:>15.1f}" if f else f"{'-':>16}{'-':>15}"
        print(f"   {day:>5}{(f.name if f else 'none'):>9}{sev}{res.defect_prominence.get('BPFO:fan-de', 0.0):>17.1f}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--updates", type=int, default=5000, help="updates per null case (default 5000)")
    ap.add_argument("--skip-nulls", action="store_true")
    ap.add_argument("--skip-spread", action="store_true")
    args = ap.parse_args()
    if not args.skip_nulls:
        nulls(args.updates)
    recordings()
    if not args.skip_spread:
        spread()
    growing()


if __name__ == "__main__":
    main()
