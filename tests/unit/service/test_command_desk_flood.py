"""The command desk in a flood: a command that finds the queue full is never silently lost.

The desk serves the daemon's machines through a small target of our own here (the demo configuration,
no machines running): every command it carries out gets a reply, every one it drops is counted in one
``commands_dropped`` agent event per interval (and once more when forced at stop), and the commands
still waiting at stop are answered.
"""

from __future__ import annotations

import json
from pathlib import Path

from rotorwatch.selfstats import SelfStats
from rotorwatch.service import command_desk
from rotorwatch.service.command_desk import CommandDesk
from rotorwatch.settings.loading import load_config

DEMO = Path(__file__).resolve().parents[3] / "config" / "demo-fan.toml"


class Target:
    def __init__(self) -> None:
        self.config = load_config(DEMO)
        self.runtimes: dict = {}
        self.events: list[tuple[str, str, dict]] = []

    def reload(self, origin: str) -> tuple[bool, str]:
        return True, "reloaded"

    def save_snapshot(self, rt, origin):
        return None

    def deliver_events(self, rt, events) -> None:
        pass

    def agent_event(self, kind: str, message: str, **detail) -> None:
        self.events.append((kind, message, detail))


def test_every_command_is_answered_or_counted(monkeypatch):
    clock = [1000.0]
    monkeypatch.setattr(command_desk.time, "monotonic", lambda: clock[0])
    target = Target()
    desk = CommandDesk(target, SelfStats(), max_waiting=4)
    replies: list[dict] = []
    for i in range(10):  # 4 wait, 6 find the queue full
        desk.submit(json.dumps({"command": "reload", "id": f"r{i}"}).encode(), reply=lambda b, r: replies.append(b))
    assert desk.serve() == 4
    assert [r["id"] for r in replies] == ["r0", "r1", "r2", "r3"]
    assert target.events == [("commands_dropped", target.events[0][1], {"dropped": 6, "dropped_total": 6})]
    for i in range(10, 17):  # the queue is free again: 4 wait, 3 are dropped
        desk.submit(json.dumps({"command": "reload", "id": f"r{i}"}).encode(), reply=lambda b, r: replies.append(b))
    clock[0] += 1.0
    assert desk.report_dropped() == 0  # within the interval: no second event yet
    desk.answer_pending("the daemon is stopping")
    assert desk.report_dropped(force=True) == 3
    assert [r["id"] for r in replies[4:]] == ["r10", "r11", "r12", "r13"]
    assert all(not r["ok"] and r["message"] == "the daemon is stopping" and r["command"] == "reload"
               for r in replies[4:])
    answered, counted = len(replies), sum(d["dropped"] for _, _, d in target.events)
    assert answered + counted == 17 and [d["dropped_total"] for _, _, d in target.events] == [6, 9]
