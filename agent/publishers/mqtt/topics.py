"""Our topic tree under ``<prefix>/<agent>`` (deploy/mqtt-topics.md is the contract)."""

from __future__ import annotations


class Topics:
    def __init__(self, prefix: str, agent_id: str):
        self.root = f"{prefix}/{agent_id}"

    @property
    def availability(self) -> str:
        return f"{self.root}/availability"

    @property
    def info(self) -> str:
        return f"{self.root}/info"

    @property
    def events(self) -> str:
        return f"{self.root}/events"

    @property
    def command(self) -> str:
        return f"{self.root}/command"

    @property
    def command_result(self) -> str:
        return f"{self.root}/command/result"

    def machine_prefix(self, machine_id: str) -> str:
        return f"{self.root}/machine/{machine_id}/"

    def machine_state(self, machine_id: str) -> str:
        return f"{self.root}/machine/{machine_id}/state"

    def point_state(self, machine_id: str, point_id: str) -> str:
        return f"{self.root}/machine/{machine_id}/point/{point_id}/state"

    def point_metrics(self, machine_id: str, point_id: str) -> str:
        return f"{self.root}/machine/{machine_id}/point/{point_id}/metrics"
