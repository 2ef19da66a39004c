"""The package folder is agent/ but installs as rotorwatch: inside it, modules import their siblings
relatively, so a reader (or a tool) that has not installed the package can follow every import on disk.
The simulator folder (installed as rotorwatch.simulators) imports its own siblings relatively too."""

import ast
import pathlib

REPO = pathlib.Path(__file__).resolve().parents[2]


def _absolute_imports(folder: str) -> list[str]:
    """Every `import rotorwatch...` / `from rotorwatch... import` in the folder, as 'file:line: module'."""
    found = []
    for path in sorted((REPO / folder).rglob("*.py")):
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for node in ast.walk(tree):
            names = []
            if isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
                names = [node.module]
            elif isinstance(node, ast.Import):
                names = [a.name for a in node.names]
            for name in names:
                if name == "rotorwatch" or name.startswith("rotorwatch."):
                    found.append(f"{path.relative_to(REPO)}:{node.lineno}: {name}")
    return found


def test_agent_imports_its_own_modules_relatively():
    # only the simulator, which lives in another folder on disk, is imported by its installed name
    found = _absolute_imports("agent")
    assert [line for line in found if not line.endswith(": rotorwatch.simulators") and ": rotorwatch.simulators." not in line] == []


def test_simulators_import_their_siblings_relatively():
    bad = [line for line in _absolute_imports("simulators") if ": rotorwatch.simulators" in line]
    assert bad == []
