"""Without the PortAudio library, sound-interface commands say what to install, in one line.

The child process hides libportaudio from ctypes' library search, which is how sounddevice finds it,
so ``import sounddevice`` fails exactly as on a machine without the libportaudio2 package.
"""

from __future__ import annotations

import subprocess
import sys
import textwrap

HIDE = textwrap.dedent("""
    import ctypes.util, sys
    _find = ctypes.util.find_library
    ctypes.util.find_library = lambda name: None if "portaudio" in name else _find(name)
    from rotorwatch.cli import main
    sys.exit(main(sys.argv[1:]))
""")


def _run(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-c", HIDE, *args], capture_output=True, text=True, timeout=60)


def test_devices_without_portaudio():
    done = _run("devices")
    assert done.returncode == 1
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1 and "PortAudio library not found" in lines[0]
    assert "apt-get install libportaudio2" in lines[0] and "Traceback" not in done.stderr


def test_soundcard_source_without_portaudio(tmp_path):
    config = tmp_path / "c.toml"
    config.write_text(textwrap.dedent("""
        [acquisition]
        source = "soundcard"
        sample_rate_hz = 48000
        channels = 1
        [[machines]]
        id = "m"
        speed = { mode = "fixed", rpm = 1500 }
        [[machines.points]]
        id = "p"
        sensor = { channel = 0, sensitivity_mv_per_g = 100 }
    """))
    done = _run("calibrate", "--config", str(config), "--point", "p")
    assert done.returncode == 2
    assert done.stderr.strip().count("\n") == 0
    assert "PortAudio library not found" in done.stderr and "libportaudio2" in done.stderr
