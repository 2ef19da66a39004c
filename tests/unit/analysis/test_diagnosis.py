"""Shaft, drive, flow and electrical findings on signals built to the patterns of the trade's fault tables
(ISO 13373-3:2015; Scheffer & Girdhar 2004, ch. 6-8; from memory): each pattern must be named as its own
fault and as no other, and the healthy machine's content (1x 1.0 mm/s, 2x 0.3 mm/s: zone A) as nothing."""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.signal

from rotorwatch.analysis.point import PointAnalyzer

from .helpers import machine

FS = 25600.0
SECONDS = 4.0
RPM = 1482.0
F1 = RPM / 60.0


def tones(spec: list[tuple[float, float]], *, noise_m_s2: float = 0.05, seed: int = 0, n: int | None = None,
          fs: float = FS) -> np.ndarray:
    """Acceleration (m/s^2) of tones given as (Hz, velocity RMS mm/s), in white noise; a tone of velocity RMS
    V at f has acceleration RMS V 2 pi f (ISO 10816-1 Annex A)."""
    rng = np.random.default_rng(seed)
    n = n or int(SECONDS * fs)
    t = np.arange(n) / fs
    x = rng.normal(0.0, noise_m_s2, n)
    for hz, v in spec:
        x += math.sqrt(2) * v / 1000.0 * 2 * math.pi * hz * np.cos(2 * math.pi * hz * t + rng.uniform(0, 2 * math.pi))
    return x


def found(m, x, point: int = 0, fs: float = FS, **kw) -> list[str]:
    r = PointAnalyzer(m, m.points[point], fs).analyze(x, **kw)
    return [f.name for f in r.findings if f.kind != "bearing"]


def demo_like(**extra):
    return machine(rpm=RPM, iso_group=2, support="rigid", **extra)


HEALTHY = [(F1, 1.0), (2 * F1, 0.3)]


def test_healthy_machine_names_nothing():
    m = demo_like(blades=11, line_frequency_hz=50, motor_poles=4)
    assert found(m, tones(HEALTHY + [(11 * F1, 0.4)])) == []


def test_unbalance_pattern_and_its_evidence():
    m = demo_like()
    r = PointAnalyzer(m, m.points[0], FS).analyze(tones([(F1, 3.5), (2 * F1, 0.3), (3 * F1, 0.1)]))
    names = [f.name for f in r.findings if f.kind != "bearing"]
    assert names == ["unbalance"]
    f = next(f for f in r.findings if f.name == "unbalance")
    assert f.kind == "shaft" and f.confidence in ("medium", "high") and "Unbalance" in f.sentence
    one = f.evidence[0]
    assert one.label == "1x" and one.expected_hz == pytest.approx(F1) and one.measured_hz == pytest.approx(F1, abs=0.3)
    # the 1x velocity against scipy: a flat-top periodogram's peak reads a tone's amplitude (scipy.signal.periodogram)
    x = tones([(F1, 3.5)], noise_m_s2=0.0)
    fr, p = scipy.signal.periodogram(x, FS, window="flattop", scaling="spectrum")
    i = int(np.argmin(abs(fr - F1)))
    ref_mm_s = math.sqrt(p[i - 3:i + 4].max()) / (2 * math.pi * F1) * 1000.0
    assert one.amplitude == pytest.approx(ref_mm_s, rel=0.03) and ref_mm_s == pytest.approx(3.5, rel=0.02)


def test_a_varying_1x_is_not_unbalance():
    # 1x beating: the same tone at 3.5 mm/s in the first half and 1.5 mm/s in the second
    m = demo_like()
    x = tones([(F1, 3.5)], noise_m_s2=0.05)
    half = x.size // 2
    t = np.arange(x.size) / FS
    x[half:] -= math.sqrt(2) * 2.0 / 1000 * 2 * math.pi * F1 * np.cos(2 * math.pi * F1 * t[half:])
    assert "unbalance" not in found(m, x)
    assert found(m, tones([(F1, 3.5)], noise_m_s2=0.05)) == ["unbalance"]  # the same 1x, steady


def test_misalignment_pattern():
    m = demo_like()
    assert found(m, tones([(F1, 1.2), (2 * F1, 1.6), (3 * F1, 0.6)])) == ["misalignment"]


def test_misalignment_needs_axial_content_when_the_machine_has_axial_points():
    from rotorwatch.analysis import diagnosis

    points = [{"id": "h", "sensor": {"channel": 0, "sensitivity_mv_per_g": 100.0, "direction": "horizontal"}},
              {"id": "a", "sensor": {"channel": 1, "sensitivity_mv_per_g": 100.0, "direction": "axial"}}]
    m = demo_like(points=points)
    radial = tones([(F1, 1.2), (2 * F1, 1.6), (3 * F1, 0.6)])
    res = {p.id: None for p in m.points}
    res["h"] = PointAnalyzer(m, m.points[0], FS).analyze(radial)
    for axial_mm_s, kept in ((0.2, False), (1.4, True)):
        res["a"] = PointAnalyzer(m, m.points[1], FS).analyze(tones([(F1, 0.3), (2 * F1, axial_mm_s)], seed=2))
        out = diagnosis.across_points(m, res)
        names = [f.name for f in out["h"].findings]
        assert ("misalignment" in names) is kept, (axial_mm_s, names)
        if kept:
            f = next(f for f in out["h"].findings if f.name == "misalignment")
            assert f.confidence == "high" and f.evidence[-1].label == "axial 1x/2x over radial"


@pytest.mark.parametrize("spec", [
    [(F1, 1.2)] + [(k * F1, 0.9 / (k - 1)) for k in range(2, 10)],  # a long series of 1x harmonics
    [(F1, 1.2), (0.5 * F1, 0.6), (1.5 * F1, 0.5), (2.5 * F1, 0.4), (2 * F1, 0.3)],  # half orders
])
def test_looseness_patterns(spec):
    assert found(demo_like(), tones(spec)) == ["looseness"]


def test_blade_pass_above_1x():
    m = demo_like(blades=11)
    assert found(m, tones([(F1, 1.0), (11 * F1, 1.8), (22 * F1, 0.6)])) == ["blade_pass"]
    assert found(m, tones([(F1, 1.0), (11 * F1, 0.6)])) == []


def test_broadband_subsynchronous_content_is_flow():
    m = demo_like()
    rng = np.random.default_rng(4)
    n = int(SECONDS * FS)
    sos = scipy.signal.butter(4, (0.15 * F1, 0.8 * F1), btype="bandpass", fs=FS, output="sos")
    vel_mm_s = scipy.signal.sosfilt(sos, rng.standard_normal(n))
    vel_mm_s *= 2.0 / vel_mm_s[n // 4:].std()
    accel = np.gradient(vel_mm_s / 1000.0, 1 / FS)
    assert found(m, tones([(F1, 1.0)]) + accel) == ["flow"]
    # one sub-synchronous line is not flow (it is a belt, or a half order)
    assert "flow" not in found(m, tones([(F1, 1.0), (0.4 * F1, 2.0)]))


def test_belt_pass_and_which_1x():
    drive = {"kind": "belt", "speed_of": "driven", "driver_sheave_mm": 180.0, "driven_sheave_mm": 355.0,
             "belt_length_mm": 2500.0}
    m = machine(rpm=740.0, drive=drive, iso_group=2, support="rigid")
    fan = 740.0 / 60
    motor = fan * 355 / 180
    fb = math.pi * 180 * motor / 2500  # belt pass: belt speed / belt length (common practice)
    r = PointAnalyzer(m, m.points[0], FS).analyze(
        tones([(fan, 0.8), (motor, 0.5), (fb, 0.9), (2 * fb, 1.3), (3 * fb, 0.5)]))
    names = [f.name for f in r.findings if f.kind != "bearing"]
    assert names == ["belt"]
    f = r.findings[-1]
    assert f.expected_hz == pytest.approx(2 * fb) and "driven" in f.sentence
    labels = [e.label for e in f.evidence]
    assert "driver 1x" in labels and "driven 1x" in labels


def test_twice_line_frequency_and_pole_pass():
    m = demo_like(line_frequency_hz=50.0, motor_poles=4)
    assert found(m, tones(HEALTHY + [(100.0, 2.0)])) == ["2xLF"]
    # 4 poles on 50 Hz: synchronous 25 Hz; at 1482 r/min the slip is 0.3 Hz and the pole pass 1.2 Hz, under
    # 5 lines of a 4 s window: too close to 1x to tell apart, nothing is named
    assert found(m, tones([(F1, 1.0), (F1 - 1.2, 0.3), (F1 + 1.2, 0.25)])) == []
    # at 1470 r/min: slip 0.5 Hz, pole pass 2.0 Hz: sidebands at 1x +/- 2 Hz
    m = machine(rpm=1470.0, iso_group=2, support="rigid", line_frequency_hz=50.0, motor_poles=4)
    f1 = 1470.0 / 60
    assert found(m, tones([(f1, 1.0), (f1 - 2.0, 0.3), (f1 + 2.0, 0.25)])) == ["pole_pass"]
    assert found(m, tones([(f1, 1.0)])) == []


def test_gear_mesh_with_sidebands_of_one_shaft():
    drive = {"kind": "gear", "driver_teeth": 23, "driven_teeth": 71}
    m = machine(rpm=RPM, kind="gearbox", drive=drive, iso_group=2, support="rigid")
    fin, fout = F1, F1 * 23 / 71
    mesh = 23 * fin
    healthy = [(fin, 0.6), (fout, 0.4), (mesh, 1.5)]
    assert found(m, tones(healthy)) == []
    worn = healthy + [(mesh - fout, 0.5), (mesh + fout, 0.6), (mesh + 2 * fout, 0.3)]
    r = PointAnalyzer(m, m.points[0], FS).analyze(tones(worn))
    g = [f for f in r.findings if f.kind == "gear"]
    assert [f.name for f in g] == ["gear_mesh"] and "driven" in g[0].sentence


def test_drive_config_errors_are_one_line():
    from rotorwatch.settings.models import Machine

    base = {"id": "m", "speed": {"rpm": 1000}, "points": [{"id": "p", "sensor": {"channel": 0, "sensitivity_mv_per_g": 100}}]}
    for drive, words in (({"kind": "belt", "driver_sheave_mm": 100}, "driver_sheave_mm and driven_sheave_mm"),
                         ({"kind": "belt", "driver_sheave_mm": 100, "driven_sheave_mm": 200}, "one of belt_length_mm"),
                         ({"kind": "gear", "driver_teeth": 20}, "needs driver_teeth and driven_teeth")):
        with pytest.raises(ValueError, match=words):
            Machine.model_validate({**base, "drive": drive, "kind": "gearbox"})
    with pytest.raises(ValueError, match="even number of poles"):
        Machine.model_validate({**base, "motor_poles": 3})
    with pytest.raises(ValueError, match="needs kind = 'gearbox'"):
        Machine.model_validate({**base, "drive": {"kind": "gear", "driver_teeth": 20, "driven_teeth": 40}})
