"""No module over 500 lines and no function over 80 lines in the package (agent/ and simulators/): a file
or a function that long holds more than one job. The check reads the source with ``ast``; a function's
length runs from its ``def`` (decorators included) to its last line.
"""

from __future__ import annotations

import ast
import pathlib

REPO = pathlib.Path(__file__).resolve().parents[2]
FOLDERS = ("agent", "simulators")
MAX_MODULE_LINES = 500
MAX_FUNCTION_LINES = 80

SERVICE_AREA_ALLOWANCE: set[str] = set()  # none left: every module and function in agent/ is within the limits


def offenders(root: pathlib.Path = REPO) -> list[str]:
    """``path (N lines)`` for long modules and ``path:function (N lines)`` for long functions."""
    out = []
    for folder in FOLDERS:
        for path in sorted((root / folder).rglob("*.py")):
            rel = path.relative_to(root).as_posix()
            source = path.read_text(encoding="utf-8")
            n = len(source.splitlines())
            if n > MAX_MODULE_LINES:
                out.append((rel, f"{rel} ({n} lines)"))
            for node in ast.walk(ast.parse(source)):
                if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)):
                    first = min([node.lineno] + [d.lineno for d in node.decorator_list])
                    length = node.end_lineno - first + 1  # type: ignore[operator]
                    if length > MAX_FUNCTION_LINES:
                        out.append((f"{rel}:{node.name}", f"{rel}:{node.name} ({length} lines)"))
    return [text for key, text in out if key not in SERVICE_AREA_ALLOWANCE]


def test_no_module_or_function_too_long():
    found = offenders()
    assert not found, "too long (modules > 500 lines, functions > 80): " + "; ".join(found)


def test_the_check_sees_a_long_function(tmp_path):
    (tmp_path / "agent").mkdir()
    (tmp_path / "simulators").mkdir()
    body = "\n".join(f"    x{i} = {i}" for i in range(80))
    (tmp_path / "agent" / "long.py").write_text(f"def f():\n{body}\n")
    (tmp_path / "simulators" / "big.py").write_text("\n" * 501)
    assert offenders(tmp_path) == ["agent/long.py:f (81 lines)", "simulators/big.py (501 lines)"]
