"""Reference-tone measurement and the calibrate command on real files (WAV input, TOML copies).

Check values: the RMS of a sine of amplitude A is A / sqrt(2) (definition); scipy.signal.welch with
scipy's flat-top window is the independent estimate (flat-top scalloping <= 0.01 dB, see
/work/shared/references.md section 4, confirmed (lib)); g = 9.80665 m/s^2 (standard gravity, CGPM 1901).
The reference level of 10 m/s^2 RMS at 159.2 Hz is common practice for field shakers.
"""

from __future__ import annotations

import re
import shutil
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf

from rotorwatch.cli import main
from rotorwatch.commands.calibrate import edit_sensitivity
from rotorwatch.errors import ConfigError, InputError
from rotorwatch.settings.loading import load_config
from rotorwatch.settings.models import G_N
from rotorwatch.sources.calibration import measure_tone, mv_per_g, sensitivity_mv_per_m_s2

REPO = Path(__file__).resolve().parents[3]
DEMO = REPO / "config" / "demo-fan.toml"


@pytest.mark.parametrize("fs, f_hz, seconds", [(51200, 159.2, 2.0), (48000, 159.2, 0.73), (44100, 160.9, 3.1)])
def test_sine_fit_recovers_rms_off_bin_with_offset_hum_and_noise(fs, f_hz, seconds):
    rms = 0.0980665
    t = np.arange(int(fs * seconds)) / fs
    rng = np.random.default_rng(4)
    x = rms * np.sqrt(2) * np.sin(2 * np.pi * f_hz * t + 1.1) + 0.003 + 0.004 * np.sin(2 * np.pi * 50 * t)
    x += 0.002 * rng.standard_normal(t.size)
    m = measure_tone(x, fs, 159.2)
    assert m.rms_v == pytest.approx(rms, rel=2e-3)
    assert m.frequency_hz == pytest.approx(f_hz, abs=0.01)
    assert m.welch_rms_v == pytest.approx(rms, rel=5e-3)  # scipy flat-top Welch: the independent check
    assert m.residual_ratio == pytest.approx(np.sqrt(0.002**2 + 0.004**2 / 2) / rms, rel=0.1)


def test_sensitivity_units():
    # 0.1 V RMS at 10 m/s^2 -> 10 mV/(m/s^2) -> 98.0665 mV/g
    assert sensitivity_mv_per_m_s2(0.1, 10.0) == pytest.approx(10.0)
    assert mv_per_g(10.0) == pytest.approx(98.0665)


def test_too_short_or_bad_records():
    with pytest.raises(InputError, match="too short"):
        measure_tone(np.zeros(100), 48000, 159.2)
    x = np.ones(48000)
    x[5] = np.nan
    with pytest.raises(InputError, match="non-finite"):
        measure_tone(x, 48000, 159.2)


def _shaker_wav(path: Path, mv_per_g_true: float, fs: int = 51200, seconds: float = 6.0) -> float:
    tone_v = 10.0 * mv_per_g_true / G_N / 1000.0
    t = np.arange(int(fs * seconds)) / fs
    ch0 = tone_v * np.sqrt(2) * np.sin(2 * np.pi * 159.2 * t) + 1e-4 * np.random.default_rng(1).standard_normal(t.size)
    ch1 = 0.01 * np.sin(2 * np.pi * 24.7 * t)
    sf.write(path, np.stack([ch0, ch1], axis=1).astype(np.float32), fs, subtype="FLOAT")
    return tone_v


def test_calibrate_from_wav_writes_only_the_number(tmp_path, capsys):
    config = tmp_path / "demo-fan.toml"
    shutil.copy(DEMO, config)
    wav = tmp_path / "shaker.wav"
    _shaker_wav(wav, 103.7)
    assert main(["calibrate", "--config", str(config), "--point", "ef3/de-h", "--input", str(wav), "--write"]) == 0
    out = capsys.readouterr().out
    assert re.search(r"= 103\.[67]\d* mV/g", out), out
    before, after = DEMO.read_text().splitlines(), config.read_text().splitlines()
    diff = [(a, b) for a, b in zip(before, after) if a != b]
    assert len(before) == len(after) and len(diff) == 1
    assert diff[0][1] == '  sensor = { channel = 0, sensitivity_mv_per_g = 103.7, direction = "horizontal" }'
    assert (tmp_path / "demo-fan.toml.bak").read_text() == DEMO.read_text()
    point = load_config(config).machine("ef3").point("de-h")
    assert point.sensor.sensitivity_mv_per_g == pytest.approx(103.7, rel=1e-3)
    assert load_config(config).machine("ef3").point("nde-h").sensor.sensitivity_mv_per_g == 100.0


def test_calibrate_errors_are_one_line(tmp_path, capsys):
    config = tmp_path / "demo-fan.toml"
    shutil.copy(DEMO, config)
    wav = tmp_path / "shaker.wav"
    _shaker_wav(wav, 100.0)
    cases = [
        (["--point", "nope", "--input", str(wav)], "no such point (known: ef3/de-h, ef3/nde-h)"),
        (["--point", "nde-h", "--input", str(wav)], "no clean tone at 159.2 Hz"),  # channel 1 has no tone
        (["--point", "de-h"], "calibrate captures from a sound interface"),          # demo is simulated
        (["--point", "de-h", "--input", str(tmp_path / "x.wav")], "x.wav: no such file"),
        (["--point", "de-h", "--input", str(wav), "--seconds", "0"], "--seconds = 0: must be positive"),
    ]
    for extra, expect in cases:
        assert main(["calibrate", "--config", str(config), *extra]) == 2
        err = capsys.readouterr().err.strip()
        assert expect in err and err.count("\n") == 0, (extra, err)
    assert config.read_text() == DEMO.read_text()


def test_clipping_channel_is_refused(tmp_path, capsys):
    config = tmp_path / "c.toml"
    shutil.copy(DEMO, config)
    wav = tmp_path / "hot.wav"
    fs = 48000
    t = np.arange(fs * 3) / fs
    x = np.clip(1.5 * np.sin(2 * np.pi * 159.2 * t), -1.0, 1.0)  # input_range_v = 1 V
    sf.write(wav, np.stack([x, x], axis=1).astype(np.float32), fs, subtype="FLOAT")
    assert main(["calibrate", "--config", str(config), "--point", "de-h", "--input", str(wav)]) == 2
    assert "clips" in capsys.readouterr().err


TABLE_STYLE = """
[acquisition]
source = "soundcard"   # the interface in cabinet 2
sample_rate_hz = 48000
channels = 3

[[machines]]
id = "p1"
speed = { mode = "fixed", rpm = 2950 }

  [[machines.points]]
  id = "a"
  [machines.points.sensor]
  channel = 0
  sensitivity_mv_per_m_s2 = 10.2   # label value
  # sensitivity_mv_per_g = 100     (the other way to give it)

  [[machines.points]]
  id = "b"
  sensor = { channel = 1, sensitivity_mv_per_g = 500 }

[[machines]]
id = "p2"
speed = { mode = "fixed", rpm = 1480 }
  [[machines.points]]
  id = "a"
  sensor = { channel = 2, sensitivity_mv_per_g = 100 }
"""


def test_edit_finds_the_right_table_and_keeps_comments():
    text = TABLE_STYLE
    new, key, value = edit_sensitivity(text, 0, 0, 10.512345)
    assert key == "sensitivity_mv_per_m_s2" and value == 10.512
    assert "  sensitivity_mv_per_m_s2 = 10.512   # label value\n" in new
    assert "# sensitivity_mv_per_g = 100     (the other way to give it)" in new  # comment untouched
    changed = [(a, b) for a, b in zip(text.splitlines(), new.splitlines(), strict=True) if a != b]
    assert changed == [("  sensitivity_mv_per_m_s2 = 10.2   # label value", "  sensitivity_mv_per_m_s2 = 10.512   # label value")]
    new, key, value = edit_sensitivity(text, 1, 0, 10.0)  # the second machine's point "a"
    assert key == "sensitivity_mv_per_g" and value == pytest.approx(98.066)
    assert new.count("sensitivity_mv_per_g = 98.066") == 1 and "sensitivity_mv_per_g = 500" in new
    new, _, _ = edit_sensitivity(text, 0, 1, 51.0)
    assert "sensor = { channel = 1, sensitivity_mv_per_g = 500.14 }" in new


def test_ambiguous_point_and_inline_arrays(tmp_path, capsys):
    config = tmp_path / "two.toml"
    config.write_text(TABLE_STYLE)
    wav = tmp_path / "s.wav"
    _shaker_wav(wav, 100.0, fs=48000)
    assert main(["calibrate", "--config", str(config), "--point", "a", "--input", str(wav)]) == 2
    assert "several machines have it; give MACHINE/POINT (p1/a, p2/a)" in capsys.readouterr().err
    # a point written inline in an array is edited in place too (the file is edited as a TOML document)
    inline = ('[[machines]]\nid = "m"\nspeed = { mode = "fixed", rpm = 1 }\n'
              'points = [{ id = "a", sensor = { channel = 0, sensitivity_mv_per_g = 1 } }]  # one point\n')
    new, key, value = edit_sensitivity(inline, 0, 0, 1.0)
    assert key == "sensitivity_mv_per_g" and value == pytest.approx(9.8066)  # 1 mV/(m/s^2) x g_n
    assert new == inline.replace("sensitivity_mv_per_g = 1 ", "sensitivity_mv_per_g = 9.8066 ")
    with pytest.raises(ConfigError, match="by hand"):
        edit_sensitivity(inline, 0, 1, 1.0)  # no such point
    with pytest.raises(ConfigError, match="found 2: write the sensitivity by hand"):
        edit_sensitivity(inline.replace("sensitivity_mv_per_g = 1", "sensitivity_mv_per_g = 1, sensitivity_mv_per_m_s2 = 1"),
                         0, 0, 1.0)
