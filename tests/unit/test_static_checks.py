"""The static checks are part of the suite: ruff and mypy, configured in pyproject.toml, report nothing.

Both are pinned in the ``[test]`` extras, so the gate moves only when the pins do. mypy runs through
``tests/typecheck.py``, which lays the checkout out in its installed shape first (see its docstring).
A finding fails the run with the tool's own lines, under the checkout's paths.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

REPO = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(REPO / "tests"))

import typecheck  # noqa: E402


def test_ruff_finds_nothing():
    done = subprocess.run([sys.executable, "-m", "ruff", "check", "--no-cache", "."], cwd=REPO,
                          capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stdout + done.stderr


def test_mypy_finds_nothing():
    done = typecheck.run()
    assert done.returncode == 0, done.stdout + done.stderr


def test_mypy_gate_can_fail(tmp_path):
    # The gate is only worth something if a type error in the checked tree makes it fail: add one
    # module with a wrong return type to a copy of the layout and check that mypy reports it.
    root = typecheck.lay_out_tree(tmp_path / "tree")
    (root / "rotorwatch" / "_gate_probe.py").write_text('def f() -> int:\n    return "not an int"\n')
    done = typecheck.run(tree=root)
    assert done.returncode == 1, done.stdout + done.stderr
    assert "_gate_probe.py:2: error" in done.stdout
