"""Input kinds in a configuration are checked against the registry: the built-in kinds and any a plugin
registered with ``register_source`` are accepted; an unknown kind is one line naming the known ones."""

from __future__ import annotations

import pytest

from rotorwatch.errors import ConfigError
from rotorwatch.settings import source_kinds as kinds_mod
from rotorwatch.settings.loading import validate
from rotorwatch.settings.models import Acquisition
from rotorwatch.sources import base


def test_builtin_kinds_have_their_modules():
    assert set(kinds_mod.BUILTIN_SOURCE_KINDS) == set(base.BUILTIN_SOURCES)


def test_unknown_kind_is_one_line_naming_the_known_kinds():
    with pytest.raises(ConfigError) as e:
        validate(Acquisition, {"source": "microphone"}, "f.toml")
    assert e.value.problems == ["f.toml: source = 'microphone': unknown input kind "
                                "(known: recording, simulated, soundcard, stdin)"]


def test_a_registered_plugin_kind_is_accepted(monkeypatch):
    monkeypatch.setattr(kinds_mod, "_plugin_kinds", set())
    monkeypatch.setattr(base, "_registered", {})
    with pytest.raises(ConfigError):
        validate(Acquisition, {"source": "bench-daq"}, "f.toml")
    opened = []

    def factory(acquisition, config_dir, **options):
        opened.append(acquisition.source)
        return "a source"

    base.register_source("bench-daq", factory)
    acq = validate(Acquisition, {"source": "bench-daq"}, "f.toml")
    assert base.open_source(acq) == "a source" and opened == ["bench-daq"]
    assert "bench-daq" in kinds_mod.source_kinds() and "bench-daq" in base.source_kinds()
