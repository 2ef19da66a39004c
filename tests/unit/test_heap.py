"""hold_freed_memory: glibc's thresholds raised where glibc is the C library, a no-op elsewhere."""

from __future__ import annotations

import platform
import subprocess
import sys


def test_thresholds_are_raised_on_glibc():
    # run in a child: the setting lasts for the life of the process
    code = "from rotorwatch.heap import hold_freed_memory; print(hold_freed_memory())"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=60)
    expected = "True" if platform.libc_ver()[0] == "glibc" else "False"
    assert out.stdout.strip() == expected, out.stderr
