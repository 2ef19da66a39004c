"""The command line speaks one vocabulary: the same --format words for the same ideas, one spelling."""

from __future__ import annotations

import argparse
import importlib
import re
from pathlib import Path

from rotorwatch.cli import COMMANDS

REPO = Path(__file__).resolve().parents[2]
FORMATS = {"text": "for people", "json": "one JSON document", "jsonl": "one JSON object per line", "csv": "CSV rows"}


def _parsers() -> dict[str, argparse.ArgumentParser]:
    """Every command's parser, and every sub-action's (snapshot list/show/plot)."""
    out = {}
    for name, (module, _) in COMMANDS.items():
        p = argparse.ArgumentParser(prog=f"rotorwatch {name}")
        importlib.import_module(f"rotorwatch.commands.{module}").add_parser(p)
        out[name] = p
        for action in p._actions:
            if isinstance(action, argparse._SubParsersAction):
                for sub, sp in action.choices.items():
                    out[f"{name} {sub}"] = sp
    return out


def test_one_format_vocabulary():
    seen = {}
    for name, p in _parsers().items():
        for action in p._actions:
            if "--format" in action.option_strings:
                seen[name] = (tuple(action.choices), action.default)
    assert {"analyze", "replay", "trend", "snapshot list", "snapshot show"} <= set(seen), seen
    for name, (choices, default) in seen.items():
        assert set(choices) <= set(FORMATS), (name, choices)
        assert default == "text", (name, default)  # the form for people is called the same everywhere


def test_analyze_is_spelled_one_way():
    texts = []
    for p in _parsers().values():
        texts += [p.description or ""] + [a.help or "" for a in p._actions]
    texts += [summary for _, summary in COMMANDS.values()]
    for doc in [REPO / "README.md", REPO / "DEVELOPERS.md", *(REPO / "deploy").glob("*.md")]:
        texts.append(doc.read_text())
    british = [t for t in texts if re.search(r"\banalys(e|ed|es|ing)\b", t, re.I)]
    assert not british, [re.search(r".{0,40}\banalys(e|ed|es|ing)\b.{0,40}", t, re.I).group(0) for t in british]
