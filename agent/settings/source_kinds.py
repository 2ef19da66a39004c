"""The input kinds a configuration's ``acquisition.source`` may name: the built-in ones and those that
plugins register (:func:`rotorwatch.sources.base.register_source` adds its kind here).

Settings sit below the sources in the package (they import nothing of them), so the names live here and
the factories that open them in :mod:`rotorwatch.sources.base`.
"""

from __future__ import annotations

#: The kinds shipped with the package (their modules: ``rotorwatch.sources.base.BUILTIN_SOURCES``).
BUILTIN_SOURCE_KINDS = ("soundcard", "simulated", "recording", "stdin")

_plugin_kinds: set[str] = set()


def add_source_kind(kind: str) -> None:
    """Accept ``kind`` in configurations from now on (called when a plugin registers its factory)."""
    _plugin_kinds.add(kind)


def source_kinds() -> list[str]:
    """Every input kind a configuration may name, sorted."""
    return sorted(set(BUILTIN_SOURCE_KINDS) | _plugin_kinds)
