"""A searched demodulation band is chosen when a point starts learning its baseline and kept (with the
baselines, on disk) so that its band values can be trended; a later search that would choose a clearly
better band is reported, and relearning the point searches again (issue 10, item 7).

Signals of our own making: a healthy 1780 r/min machine (broadband noise, machine noise ringing a
4.5 kHz housing resonance, 1x, 2x and blade-pass tones, +/- 0.2 % speed wander between updates), and an
outer-race fault whose impacts ring a 9 kHz resonance (the usual simulated fault: Randall & Antoni 2011,
from memory). The band value is an envelope band on the bearing's BPFO and its harmonics.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from rotorwatch.pipeline import MachinePipeline
from rotorwatch.settings.models import Config
from rotorwatch.simulators.render import ScenarioRenderer
from rotorwatch.simulators.scenario import load_scenario

from .helpers import impact_train

REPO = Path(__file__).resolve().parents[3]
FS = 25600.0
WINDOW_S = 4.0
RPM = 1780.0
CADENCE_S = 600.0
BEARING = {"id": "b", "elements": 8, "element_diameter": 14.0, "pitch_diameter": 60.0}
BPFO_ORDER = 8 / 2 * (1 - 14.0 / 60.0)  # references.md section 2 formula: 3.0667 x


def _config(band_hz, review_hours: float = 1.0) -> Config:
    return Config.model_validate({
        "acquisition": {"sample_rate_hz": FS, "channels": 1},
        "machines": [{
            "id": "m", "speed": {"mode": "fixed", "rpm": RPM}, "bearings": [BEARING],
            "points": [{"id": "p", "bearing": "b", "sensor": {"channel": 0, "sensitivity_mv_per_g": 100.0}}],
            "bands": [{"name": "outer-race", "quantity": "envelope", "feature": "bpfo", "bearing": "b"}],
            "alarms": {"learning_hours": 2.0, "min_learning_updates": 10},
            "analysis": {"window_s": WINDOW_S, "fmax_hz": 10000.0,
                         "envelope": {"band_hz": band_hz, "band_review_hours": review_hours}},
        }],
    })


def healthy(seed: int) -> np.ndarray:
    """One healthy window in m/s^2."""
    rng = np.random.default_rng(seed)
    n = int(WINDOW_S * FS)
    t = np.arange(n) / FS
    fr = RPM / 60 * (1 + 0.002 * rng.standard_normal())
    x = 0.3 * rng.standard_normal(n)
    spec = np.fft.rfft(rng.standard_normal(n))
    f = np.fft.rfftfreq(n, 1 / FS)
    spec /= np.sqrt(1 + ((f - 4500.0) / 300.0) ** 2)
    y = np.fft.irfft(spec, n)
    x += 0.5 * y / np.std(y)
    for k, v_mm_s in ((1, 1.0), (2, 0.4), (11, 0.3), (22, 0.15)):  # velocity RMS -> acceleration
        x += v_mm_s * np.sqrt(2) * 2 * np.pi * k * fr / 1000 * np.sin(2 * np.pi * k * fr * t + rng.uniform(0, 2 * np.pi))
    return x


def _run(config: Config, blocks, state_dir, t0: float = 0.0):
    machine = config.machines[0]
    pipe = MachinePipeline(config, machine, state_dir=state_dir)
    volts_per = machine.points[0].sensor.volts_per_m_s2
    out = [pipe.step(t0 + i * CADENCE_S, {"p": x * volts_per}).points["p"].result for i, x in enumerate(blocks)]
    pipe.close()
    return pipe, out


def _spread(values) -> tuple[float, float]:
    v = np.asarray(values)
    return float(v.max() / v.min()), float(v.std() / v.mean())


def test_band_values_on_the_kept_band_spread_like_a_fixed_band(tmp_path):
    blocks = [healthy(s) for s in range(60)]
    _, fixed = _run(_config([2000.0, 7000.0]), blocks, tmp_path / "fixed")
    _, kept = _run(_config(None), blocks, tmp_path / "kept")
    # what searching on every update gave (the analysis alone, no kept band)
    searched = [_run(_config(None), [x], tmp_path / f"s{i}")[1][0] for i, x in enumerate(blocks[:40])]
    assert kept[0].envelope_band_source == "searched" and {r.envelope_band_source for r in kept[1:]} == {"kept"}
    assert len({r.envelope_band_hz for r in kept}) == 1
    f, k, s = (_spread([r.bands["outer-race"] for r in rs]) for rs in (fixed, kept, searched))
    print(f"band value over healthy updates, max/min and coefficient of variation: fixed 2-7 kHz {f[0]:.3f} / "
          f"{f[1]:.3f}; kept {kept[0].envelope_band_hz[0]:.0f}-{kept[0].envelope_band_hz[1]:.0f} Hz {k[0]:.3f} / "
          f"{k[1]:.3f}; searched every update ({len({r.envelope_band_hz for r in searched})} bands) {s[0]:.3f} / {s[1]:.3f}")
    assert k[0] <= 1.10 * f[0]
    assert s[0] > 1.2 * k[0]  # what the kept band removes


def test_the_band_is_kept_across_a_restart_and_searched_again_on_relearn(tmp_path):
    blocks = [healthy(s) for s in range(6)]
    pipe, first = _run(_config(None), blocks[:3], tmp_path)
    band = first[0].envelope_band_hz
    doc = json.loads((tmp_path / "baselines" / "m.json").read_text())
    assert doc["envelope_bands"]["p"]["band_hz"] == list(band)
    # a restarted pipeline (a new process) demodulates in the band on disk, with no search
    pipe2, later = _run(_config(None), blocks[3:], tmp_path, t0=3 * CADENCE_S)
    assert [(r.envelope_band_source, r.envelope_band_hz) for r in later] == [("kept", band)] * 3
    # relearning one value keeps the band; relearning the point forgets it
    pipe3 = MachinePipeline(_config(None), _config(None).machines[0], state_dir=tmp_path)
    pipe3.relearn("p", "outer-race")
    assert pipe3.monitor.baselines.envelope_band("p") == band
    pipe3.relearn("p")
    assert pipe3.monitor.baselines.envelope_band("p") is None
    r = pipe3.step(10 * CADENCE_S, {"p": blocks[0] * _config(None).machines[0].points[0].sensor.volts_per_m_s2})
    assert r.points["p"].result.envelope_band_source == "searched"


def test_results_do_not_depend_on_the_order_of_the_updates(tmp_path):
    # with the band kept on disk, any process analysing any update gets the same numbers
    blocks = [healthy(s) for s in range(8)]
    _run(_config(None), blocks[:1], tmp_path / "a")
    import shutil

    shutil.copytree(tmp_path / "a", tmp_path / "b")
    _, forward = _run(_config(None), blocks, tmp_path / "a", t0=CADENCE_S)
    _, backward = _run(_config(None), blocks[::-1], tmp_path / "b", t0=CADENCE_S)
    assert [r.bands["outer-race"] for r in forward] == [r.bands["outer-race"] for r in backward[::-1]]
    assert [r.defect_prominence for r in forward] == [r.defect_prominence for r in backward[::-1]]


def test_a_review_reports_a_clearly_better_band_when_a_fault_rings_elsewhere(tmp_path, caplog):
    shaft = RPM / 60
    fault = [healthy(100 + s) + impact_train(FS, WINDOW_S, BPFO_ORDER * shaft * 1.006, 9000.0, amplitude=3.0,
                                              noise_rms=0.0, seed=s) for s in range(3)]
    config = _config(None, review_hours=0.1)  # every update (10 min apart) is reviewed
    with caplog.at_level("INFO", logger="rotorwatch.pipeline"):
        _, results = _run(config, [healthy(s) for s in range(4)] + fault, tmp_path)
    band = results[0].envelope_band_hz
    assert band[1] < 8000.0, band  # the healthy machine's band is not the one the fault will ring
    reviews = [r.envelope_band_review for r in results[1:]]
    assert all(v is not None for v in reviews)
    healthy_reviews, fault_reviews = reviews[:3], reviews[3:]
    assert not any(v.clearly_better for v in healthy_reviews), healthy_reviews
    assert all(v.clearly_better and v.best_hz[0] < 9000.0 < v.best_hz[1] for v in fault_reviews), fault_reviews
    assert all(r.envelope_band_hz == band for r in results)  # reported, not taken
    said = [m for m in caplog.messages if "clearly better band" in m]
    assert len(said) == 1, said  # once, not on every update


# ------------------------------------------------------------------------ the demo fan, healthy
DEMO_UPDATES = 96  # hourly, from the start of the healthy scenario (its learning starts on the first)


def _searched(machine):
    env = machine.analysis.envelope.model_copy(update={"band_hz": None})
    return machine.model_copy(update={"analysis": machine.analysis.model_copy(update={"envelope": env})})


def test_the_demo_fans_kept_band_spreads_like_its_fixed_band(tmp_path):
    """The healthy demo scenario (config/scenarios/healthy.toml, fixed seed) through the pipeline twice:
    with the configured 2-7 kHz band, and with the band searched on the first update of learning and
    kept. Max/min of each envelope band value over the updates: the kept band's within 10 % of the fixed
    band's (issue 10 item 7). Before the envelope spectrum kept both of its Welch segments for any band,
    the band kept on de-h (22.9-24.0 kHz) spread 1.55 against 1.33."""
    sc = load_scenario(REPO / "config" / "scenarios" / "healthy.toml")
    renderer = ScenarioRenderer(sc)
    fs = sc.config.acquisition.sample_rate_hz
    window_s = sc.machine.analysis.window_s
    searched_m = _searched(sc.machine)
    searched_c = sc.config.model_copy(update={"machines": [searched_m]})
    pipes = {"fixed": MachinePipeline(sc.config, sc.machine, state_dir=tmp_path / "fixed"),
             "kept": MachinePipeline(searched_c, searched_m, state_dir=tmp_path / "kept")}
    values: dict[tuple[str, str, str], list[float]] = {}
    bands: dict[str, set] = {}
    for k in range(DEMO_UPDATES):
        t_s = 3600.0 * k
        volts = renderer.snapshot(t_s, window_s, fs)
        for how, pipe in pipes.items():
            for pid, pr in pipe.step(t_s, volts).points.items():
                res = pr.result
                if how == "kept":
                    bands.setdefault(pid, set()).add(res.envelope_band_hz)
                for b in sc.machine.bands_for(pid):
                    if b.quantity == "envelope":
                        values.setdefault((how, pid, b.name), []).append(res.bands[b.name])
    for pipe in pipes.values():
        pipe.close()
    assert all(len(s) == 1 for s in bands.values()), bands  # chosen once, kept
    wider = []
    for (how, pid, name), v in sorted(values.items()):
        if how != "kept":
            continue
        fixed, kept = _spread(values[("fixed", pid, name)]), _spread(v)
        print(f"{pid} {name}: fixed 2-7 kHz max/min {fixed[0]:.3f} (CoV {fixed[1]:.3f}); kept "
              f"{next(iter(bands[pid]))} max/min {kept[0]:.3f} (CoV {kept[1]:.3f})")
        if kept[0] > 1.10 * fixed[0]:
            wider.append((pid, name, kept, fixed))
    assert not wider
