"""The machine's line frequency: 2xLF and its harmonics are electrical lines, not shaft orders.

Fact of the trade used as the check (references.md section 8, from memory / common practice): an
induction motor on the mains vibrates at twice the line frequency (100 Hz on 50 Hz mains, 120 Hz on
60 Hz); a 4-pole motor runs a little below 1500 (1800) r/min, so its 4x falls close to 2xLF, and a
2-pole motor's 2x falls close to it. The motors, levels and seeds below are invented test cases.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from rotorwatch.analysis.labels import kinematic_lines, name_line
from rotorwatch.analysis.point import PointAnalyzer
from rotorwatch.cli import main
from rotorwatch.kinematics import frequency_table

from .helpers import G_N, machine

FS = 51200.0
T = np.arange(int(4 * FS)) / FS


def _sine(f_hz, amp, phase=0.0):
    return amp * np.sin(2 * np.pi * f_hz * T + phase)


def _electrical(base_hz, amps=(0.3, 0.1, 0.05)):
    return sum(_sine(h * base_hz, a, h) for h, a in enumerate(amps, start=1))


def _four_pole(seed, mech=(0.006, 0.004, 0.003, 0.002)):
    # 4-pole motor on 60 Hz mains at 1776 r/min (1.3 % slip): weak shaft harmonics, strong 120/240/360 Hz
    rng = np.random.default_rng(seed)
    f1 = 1776.0 / 60.0
    x = sum(_sine(k * f1, a, rng.uniform(0, 6.28)) for k, a in enumerate(mech, start=1))
    return x + _electrical(120.0) + rng.normal(0, 0.05, T.size)


def _estimated(line_frequency_hz=None):
    m = machine(rpm=1776.0, mode="estimated", analysis={"fmax_hz": 10000}, line_frequency_hz=line_frequency_hz)
    return PointAnalyzer(m, m.points[0], FS)


@pytest.mark.parametrize("seed", range(4))
def test_speed_estimate_does_not_lock_on_2xlf(seed):
    # without the line frequency the comb locks on 120/240 Hz as the 4th and 8th harmonics of 1800 r/min
    # (the synchronous speed) and calls it clear; with it, the motor's own 1776 r/min
    x = _four_pole(seed)
    assert _estimated().analyze(x).rpm == pytest.approx(1800.0, abs=1.0)  # the failure, kept visible
    r = _estimated(60.0).analyze(x)
    assert r.rpm_source == "estimated"
    assert r.rpm == pytest.approx(1776.0, abs=0.5)


@pytest.mark.parametrize("seed", range(4))
def test_electrical_lines_alone_give_no_clear_speed(seed):
    rng = np.random.default_rng(100 + seed)
    x = _electrical(100.0, (0.5, 0.2, 0.1, 0.05)) + rng.normal(0, 0.05, T.size)
    m = machine(rpm=1470.0, mode="estimated", analysis={"fmax_hz": 10000}, line_frequency_hz=50.0)
    r = PointAnalyzer(m, m.points[0], FS).analyze(x)
    assert (r.rpm, r.rpm_source) == (1470.0, "nominal")


def _two_pole_2x_band(line_frequency_hz, rpm=3560.0, electrical_mm_s=1.5, two_x_mm_s=0.4):
    # 2-pole motor on 60 Hz mains at 3560 r/min: 2x at 118.67 Hz, 1.33 Hz below 2xLF (120 Hz)
    bands = [{"name": "2x", "quantity": "velocity", "low_order": 1.9, "high_order": 2.1},
             {"name": "2xLF-fixed", "quantity": "velocity", "low_hz": 119.6, "high_hz": 120.4}]
    m = machine(rpm=rpm, bands=bands, analysis={"fmax_hz": 10000}, line_frequency_hz=line_frequency_hz)

    def vel_tone(f, mm_s, ph):  # |a| = 2 pi f |v| (formula)
        return _sine(f, mm_s / 1000 * 2 * np.pi * f * np.sqrt(2), ph)

    f2 = 2 * rpm / 60.0
    x = vel_tone(rpm / 60.0, 1.0, 0.3) + vel_tone(f2, two_x_mm_s, 1.1) + vel_tone(120.0, electrical_mm_s, 0.2)
    x = x + np.random.default_rng(9).normal(0, 0.005, T.size)
    return PointAnalyzer(m, m.points[0], FS).analyze(x).bands


def test_2x_band_of_a_two_pole_motor_leaves_the_electrical_line_out():
    # before: the 2x band read sqrt(0.4^2 + 1.5^2) = 1.55 mm/s, +288 % "misalignment"
    assert _two_pole_2x_band(None)["2x"] == pytest.approx(np.hypot(0.4, 1.5), rel=0.02)
    bands = _two_pole_2x_band(60.0)
    assert bands["2x"] == pytest.approx(0.4, rel=0.03)
    assert bands["2xLF-fixed"] == pytest.approx(1.5, rel=0.02)  # a band fixed in Hz keeps it (on purpose)


def test_2x_band_with_no_misalignment_reads_near_nothing():
    assert _two_pole_2x_band(60.0, two_x_mm_s=0.0)["2x"] < 0.02


def test_electrical_lines_and_table():
    from rotorwatch.kinematics import electrical_lines

    m = machine(rpm=1485.0, line_frequency_hz=50.0)
    assert electrical_lines(m, 350.0) == [("2xLF", 100.0), ("4xLF", 200.0), ("6xLF", 300.0)]
    assert frequency_table(m, 1485.0)["2xLF"] == 100.0
    assert electrical_lines(machine(rpm=1485.0), 350.0) == []


def test_a_peak_at_2xlf_is_labelled_electrical():
    # 4-pole motor at 1485 r/min on 50 Hz mains: 4x at 99.0 Hz, 2xLF at 100 Hz; each peak keeps its name
    m = machine(rpm=1485.0, line_frequency_hz=50.0)
    lines = kinematic_lines(m, 1485.0 / 60.0, 500.0)
    assert name_line(100.02, lines, 0.25) == "2xLF (electrical)"
    assert name_line(99.0, lines, 0.25) == "4x"
    assert name_line(200.0, lines, 0.25) == "4xLF (electrical)"


def test_analyze_quick_mode_takes_the_line_frequency(tmp_path, capsys):
    # an envelope that beats at 100 Hz (noise amplitude-modulated by the 2xLF magnetic force): the
    # strongest envelope peak is 2xLF and is named so
    fs = 12000.0
    rng = np.random.default_rng(3)
    t = np.arange(int(6 * fs)) / fs
    carrier = rng.normal(0, 1.0, t.size)
    x_g = (1 + 0.8 * np.sin(2 * np.pi * 100.0 * t)) * carrier * 0.5 / G_N + 0.01 * np.sin(2 * np.pi * 24.75 * t)
    f = tmp_path / "motor.npz"
    np.savez(f, signal=x_g, fs=fs)
    assert main(["analyze", str(f), "--rpm", "1485", "--line-frequency", "50", "--envelope-band", "500,4500",
                 "--format", "json"]) == 0
    r = json.loads(capsys.readouterr().out)
    assert r["line_frequency_hz"] == 50.0
    top = r["envelope_peaks"][0]
    assert top["frequency_hz"] == pytest.approx(100.0, abs=0.5)
    assert top["matches"] == "2xLF" and top["electrical"]
    assert main(["analyze", str(f), "--rpm", "1485", "--line-frequency", "5"]) == 2
    assert "line_frequency_hz" in capsys.readouterr().err


def test_check_prints_the_line_frequency_and_2xlf(tmp_path, capsys):
    cfg = tmp_path / "motor.toml"
    cfg.write_text("""
[acquisition]
source = "stdin"
sample_rate_hz = 25600
channels = 1
[[machines]]
id = "p1"
kind = "motor"
line_frequency_hz = 50
speed = { mode = "fixed", rpm = 2976 }
points = [{ id = "de", sensor = { channel = 0, sensitivity_mv_per_g = 100 } }]
bands = [{ name = "2x", quantity = "velocity", low_order = 1.9, high_order = 2.1 }]
""")
    assert main(["check", str(cfg)]) == 0
    out = capsys.readouterr().out
    assert "line frequency 50 Hz: 2xLF (100 Hz)" in out
    assert "2xLF (electrical)" in out and "100.00" in out
    # 2-pole at 2976 r/min: 2x at 99.2 Hz, 0.8 Hz from 2xLF: part of it goes with the electrical stretch
    assert "warning: the 2x at 99.20 Hz lies 0.80 Hz from 2xLF (100 Hz)" in out
