"""Every command the README prints runs as printed, from the checkout's root after the two set-up commands.

The set-up commands leave rotorwatch in ``.venv``, not on ``PATH``, so every command is written as
``.venv/bin/rotorwatch ...``; each is run here (with this interpreter's rotorwatch, in a scratch folder
that sees the checkout's ``config/``, ``deploy/`` and ``tests/``, so the checkout's ``var/`` stays clean) and
must exit 0; the ``.venv/bin/python tests/...`` lines that write the real-data example's input run first,
where the shared recordings are (a user's clone without them skips that example). The two ``bash`` set-up scripts are checked to exist and to answer ``--help``.
"""

from __future__ import annotations

import re
import shlex
import subprocess
import sys
from pathlib import Path

import pytest

from components import shared_datasets_dir

REPO = Path(__file__).resolve().parents[2]
README = REPO / "README.md"


def _commands() -> list[str]:
    """Command lines of the README's code blocks (indented four spaces, or fenced), comments dropped."""
    out = []
    in_fence = False
    for line in README.read_text().splitlines():
        if line.startswith("```"):
            in_fence = not in_fence
            continue
        text = line[4:] if line.startswith("    ") else line if in_fence else None
        if text is None:
            continue
        text = re.sub(r"\s+#.*$", "", text).strip()
        if re.match(r"^(\S*/)?rotorwatch\s|^bash\s|^\.venv/bin/python\s", text):
            out.append(text)
    return out


COMMANDS = _commands()


def test_the_readme_prints_commands_that_run_where_the_set_up_leaves_rotorwatch():
    assert len(COMMANDS) >= 7, COMMANDS
    bare = [c for c in COMMANDS if c.startswith("rotorwatch ")]
    assert not bare, f"not on PATH after the set-up commands; write .venv/bin/rotorwatch: {bare}"


@pytest.fixture(scope="module")
def scratch(tmp_path_factory) -> Path:
    root = tmp_path_factory.mktemp("readme")
    for name in ("config", "deploy", "tests"):
        (root / name).symlink_to(REPO / name)
    if shared_datasets_dir().is_dir():  # the real-data example's history (tests/realdata/test_history.py)
        for command in (c for c in COMMANDS if c.startswith(".venv/bin/python ")):
            done = subprocess.run([sys.executable, *shlex.split(command)[1:]], cwd=root, capture_output=True, text=True,
                                  timeout=900, stdin=subprocess.DEVNULL)
            assert done.returncode == 0, f"{command}\n{done.stderr[-1500:]}"
    return root


@pytest.mark.parametrize("command", [c for c in COMMANDS if c.startswith(".venv/bin/rotorwatch ")])
def test_each_readme_command_runs_as_printed(command, scratch):
    if "var/cwru-" in command and not shared_datasets_dir().is_dir():
        pytest.skip(f"the real-data example needs {shared_datasets_dir()}")
    argv = shlex.split(command)
    done = subprocess.run([sys.executable, "-m", "rotorwatch", *argv[1:]], cwd=scratch, capture_output=True,
                          text=True, timeout=900, stdin=subprocess.DEVNULL)
    assert done.returncode == 0, f"{command}\n{done.stdout[-1500:]}\n{done.stderr[-1500:]}"
    assert "Traceback" not in done.stderr


@pytest.mark.parametrize("command", [c for c in COMMANDS if c.startswith("bash ")])
def test_the_set_up_scripts_exist_and_answer_help(command):
    script = REPO / shlex.split(command)[1]
    assert script.is_file(), command
    if script.name == "demo":
        done = subprocess.run(["bash", str(script), "--help"], capture_output=True, text=True, timeout=30)
        assert done.returncode == 0 and "--minutes N" in done.stdout
