"""The daemon's pieces without a daemon: the publishers' set (order, restart on reload), the reload
(rejected and applied, what changed found structurally), the scheduler's clock and DEVELOPERS.md's
worked example of a publisher, run as written there."""

from __future__ import annotations

import ast
import logging
import re
import sys
import types
from pathlib import Path

import pytest

from rotorwatch.errors import RotorwatchError
from rotorwatch.publishers import load_entry
from rotorwatch.publishers.base import Publisher, SinkContext
from rotorwatch.selfstats import SelfStats
from rotorwatch.service.reload import Reloader, changed_sections
from rotorwatch.service.runtimes import build_runtimes, default_pipeline_factory
from rotorwatch.service.scheduler import UpdateScheduler
from rotorwatch.service.sinks import SinkSet
from rotorwatch.settings.loading import load_config
from rotorwatch.settings.service import MetricsSettings

from .helpers import machine_update

REPO = Path(__file__).resolve().parents[3]
CONFIG = load_config(REPO / "config" / "demo-fan.toml")


def context(tmp_path) -> SinkContext:
    return SinkContext(config_dir=REPO / "config", state_dir=tmp_path, stats=SelfStats())


class Diary(Publisher):
    """A publisher that writes down what is done to it (in a list shared by all of them)."""

    journal: list[str] = []
    restart_on = ""  # a section whose change makes it ask for a restart

    def __init__(self, config):
        self.config = config

    @classmethod
    def from_config(cls, config, context):
        return cls(config)

    def start(self):
        self.journal.append(f"start {self.name}")

    def on_update(self, update, blocks_v, machine):
        self.journal.append(f"update {self.name} {update.machine_id}")

    def reconfigure(self, config):
        restart = bool(self.restart_on) and changed_sections(self.config, config).count(self.restart_on) > 0
        self.config = config
        self.journal.append(f"reconfigure {self.name}")
        return restart

    def close(self):
        self.journal.append(f"close {self.name}")


def diary(name: str, restart_on: str = "") -> type[Diary]:
    return type(name.title(), (Diary,), {"name": name, "restart_on": restart_on})


@pytest.fixture(autouse=True)
def fresh_journal():
    Diary.journal = []


def test_publishers_start_in_registry_order_and_close_in_reverse(tmp_path):
    sinks = SinkSet([diary("first"), diary("second")], context(tmp_path))
    sinks.start(CONFIG)
    sinks.on_update(machine_update(), None, CONFIG.machines[0])
    sinks.close()
    assert Diary.journal == ["start first", "start second", "update first ef3", "update second ef3",
                             "close second", "close first"]


def test_a_publisher_that_asks_for_a_restart_is_closed_and_built_again(tmp_path):
    sinks = SinkSet([diary("keeps"), diary("restarts", restart_on="site")], context(tmp_path))
    sinks.start(CONFIG)
    Diary.journal.clear()
    renamed = CONFIG.model_copy(update={"site": CONFIG.site.model_copy(update={"name": "Hall 2"})})
    assert sinks.reconfigure(renamed) == ["restarts"]
    assert Diary.journal == ["reconfigure keeps", "reconfigure restarts", "close restarts", "start restarts"]


def test_changed_sections_are_read_off_the_models():
    assert changed_sections(CONFIG, CONFIG.model_copy(deep=True)) == []
    other = CONFIG.model_copy(update={"acquisition": CONFIG.acquisition.model_copy(update={"speedup": 7.0}),
                                      "metrics": MetricsSettings(port=0)})
    assert CONFIG.metrics is None and changed_sections(CONFIG, other) == ["acquisition", "metrics"]


class Target:
    """What a reload changes, held as plain attributes (the daemon's part of the bargain)."""

    def __init__(self, tmp_path):
        self.config = CONFIG
        self.state_dir = tmp_path
        self.runtimes = build_runtimes(CONFIG, tmp_path, default_pipeline_factory)
        self.adopted = []

    def build_runtimes(self, config, keep):
        return build_runtimes(config, self.state_dir, default_pipeline_factory, keep,
                              kept_rate_hz=self.config.acquisition.sample_rate_hz)

    def adopt(self, config, runtimes, restart_capture):
        self.config, self.runtimes = config, runtimes
        self.adopted.append(restart_capture)

    def status_line(self):
        return "status"


class Notes:
    def __init__(self):
        self.seen = []

    def reloading(self):
        self.seen.append("reloading")

    def reloaded(self, status):
        self.seen.append(f"reloaded: {status}")


def test_a_bad_file_is_rejected_and_changes_nothing(tmp_path):
    from rotorwatch.errors import ConfigError

    target, stats, notes = Target(tmp_path), SelfStats(), Notes()
    sinks = SinkSet([diary("only")], context(tmp_path))
    sinks.start(CONFIG)

    def bad():
        raise ConfigError(["machines.0.id = '': must not be empty"])

    ok, message = Reloader(target, bad, sinks, stats, notes).reload("test")
    assert not ok and message == "machines.0.id = '': must not be empty"
    assert target.adopted == [] and stats.counter("config_reloads", result="rejected") == 1
    assert notes.seen == ["reloading", "reloaded: status"]


def test_an_applied_reload_keeps_unchanged_machines_and_names_what_changed(tmp_path):
    target, stats = Target(tmp_path), SelfStats()
    before = dict(target.runtimes)
    sinks = SinkSet([diary("only")], context(tmp_path))
    sinks.start(CONFIG)
    renamed = CONFIG.model_copy(update={"site": CONFIG.site.model_copy(update={"name": "Hall 2"})})
    ok, message = Reloader(target, lambda: renamed, sinks, stats, Notes()).reload("test")
    assert ok and message == "configuration reloaded (changed: site)"
    assert all(target.runtimes[m] is before[m] for m in before)  # baselines kept
    assert target.adopted == [False]  # same acquisition and rings: the capture goes on
    assert stats.counter("config_reloads", result="applied") == 1 and "reconfigure only" in Diary.journal


def test_the_scheduler_counts_rounds_missed_on_the_source_clock():
    s = UpdateScheduler(SelfStats(), deliver=lambda *a: None)
    assert s.due(10.0, run_id=1, interval_s=1.0) == 0  # first samples: a round now
    assert s.due(10.5, 1, 1.0) is None
    assert s.due(13.2, 1, 1.0) == 2  # due at 11, 12 and 13: two skipped
    assert s.due(13.9, 1, 1.0) is None
    assert s.due(0.3, run_id=2, interval_s=1.0) == 0  # a new run starts the schedule again


def developers_example() -> str:
    text = (REPO / "DEVELOPERS.md").read_text(encoding="utf-8")
    section = text[text.index("## Adding a publisher"):text.index("## Tests")]
    return re.findall(r"```python\n(.*?)```", section, re.S)[0]


def developers_registration_line() -> str:
    """The one registry line the recipe adds (its second code block), as a string literal's value."""
    text = (REPO / "DEVELOPERS.md").read_text(encoding="utf-8")
    section = text[text.index("## Adding a publisher"):text.index("## Tests")]
    block = re.findall(r"```python\n(.*?)```", section, re.S)[1]
    lines = [ln for ln in block.splitlines() if ln.strip()]
    assert len(lines) == 1, block  # one line, nothing else to edit
    return ast.literal_eval(lines[0].split("#")[0].strip().rstrip(","))


def test_the_worked_example_in_developers_md_runs_as_written(tmp_path, caplog):
    module = types.ModuleType("rotorwatch.publishers.state_journal")
    module.__package__ = "rotorwatch.publishers"
    sys.modules[module.__name__] = module
    try:
        exec(compile(developers_example(), "DEVELOPERS.md", "exec"), module.__dict__)
        journal = load_entry(developers_registration_line())  # the registry line finds the class
        assert journal is module.StateJournal
        sinks = SinkSet([journal], context(tmp_path))
        sinks.start(CONFIG)
        with caplog.at_level(logging.INFO, logger=module.__name__):
            sinks.on_update(machine_update(state="warning"), None, CONFIG.machines[0])
            sinks.on_update(machine_update(state="warning"), None, CONFIG.machines[0])
            sinks.on_update(machine_update(state="alarm"), None, CONFIG.machines[0])
        assert sinks.reconfigure(CONFIG) == []
        sinks.close()
    finally:
        del sys.modules[module.__name__]
    lines = [r.getMessage() for r in caplog.records if r.name == module.__name__]
    assert lines == ["ef3: warning: de-h: shaft-1x above warning", "ef3: alarm: de-h: shaft-1x above warning"]


def test_a_publisher_that_cannot_start_stops_the_start(tmp_path):
    class Refuses(Diary):
        name = "refuses"

        def start(self):
            raise RotorwatchError("metrics.bind/port: in use")

    sinks = SinkSet([diary("before"), Refuses], context(tmp_path))
    with pytest.raises(RotorwatchError):
        sinks.start(CONFIG)
    sinks.close()  # what the daemon does in its finally
    assert Diary.journal == ["start before", "close refuses", "close before"]


def test_a_registry_line_must_name_a_publisher_class():
    assert load_entry("evidence:Evidence").name == "evidence"
    with pytest.raises(TypeError, match="not a Publisher class"):
        load_entry("base:SinkContext")  # a class, but not a publisher
    with pytest.raises(TypeError, match="not a Publisher class"):
        load_entry("evidence:NoSuchClass")
