"""mypy over the package as it installs: ``agent/`` is ``rotorwatch``, ``simulators/`` is ``rotorwatch.simulators``.

mypy names modules after folders on disk, and the editable install maps the folders onto the import
names with an import hook that mypy cannot follow; so ``agent/`` would be checked as ``agent`` and the
absolute imports between the core and the simulator (``rotorwatch.settings.models``,
``rotorwatch.simulators.render``) would not resolve. This script lays out a tree of symbolic links in
the installed shape (``build/typecheck/rotorwatch/...``, rebuilt at every run), runs mypy on it with
the settings of ``[tool.mypy]`` in pyproject.toml, and prints the findings under the checkout's own
paths (``agent/...``, ``simulators/...``).

    .venv/bin/python tests/typecheck.py [extra mypy arguments]

Exit status is mypy's (0 clean, 1 findings, 2 usage error). ``tests/unit/test_static_checks.py`` runs
it with ruff as part of the suite.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
TREE = REPO / "build" / "typecheck"
FOLDERS = {"rotorwatch": REPO / "agent", "rotorwatch/simulators": REPO / "simulators"}


def lay_out_tree(root: Path = TREE) -> Path:
    """(Re)build ``root/rotorwatch`` as links to the checkout's files; returns ``root``."""
    package = root / "rotorwatch"
    if package.exists():
        shutil.rmtree(package)
    for name, folder in FOLDERS.items():
        target = root / name
        target.mkdir(parents=True, exist_ok=True)
        for entry in sorted(folder.iterdir()):
            if entry.name == "__pycache__" or (entry.is_file() and entry.suffix not in (".py", ".pyi", ".typed")):
                continue
            os.symlink(entry, target / entry.name)
    return root


def to_checkout_paths(text: str, root: Path = TREE) -> str:
    """mypy's findings with the link tree's paths turned back into the checkout's."""
    for name, folder in sorted(FOLDERS.items(), key=lambda item: -len(item[0])):
        prefixes = [f"{root / name}/"]
        if (root / name).is_relative_to(REPO):
            prefixes.append(f"{(root / name).relative_to(REPO)}/")
        for prefix in prefixes:
            text = text.replace(prefix, f"{folder.relative_to(REPO)}/")
    return text


def run(extra: list[str] | None = None, tree: Path | None = None) -> subprocess.CompletedProcess[str]:
    """mypy over the package; ``tree``: an already laid-out tree to check instead of a fresh one."""
    root = tree if tree is not None else lay_out_tree()
    env = dict(os.environ, MYPYPATH=str(root))
    argv = [sys.executable, "-m", "mypy", "--config-file", str(REPO / "pyproject.toml"),
            "--cache-dir", str(root / ".mypy_cache"), "-p", "rotorwatch", *(extra or [])]
    done = subprocess.run(argv, cwd=REPO, env=env, capture_output=True, text=True, timeout=900)
    return subprocess.CompletedProcess(done.args, done.returncode, to_checkout_paths(done.stdout, root),
                                       to_checkout_paths(done.stderr, root))


def main(argv: list[str]) -> int:
    done = run(argv)
    sys.stdout.write(done.stdout)
    sys.stderr.write(done.stderr)
    return done.returncode


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
