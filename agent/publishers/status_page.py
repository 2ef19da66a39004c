"""The status page publisher: the built-in page (:mod:`rotorwatch.web`) fed with every update.

The :class:`~rotorwatch.web.board.StatusBoard` keeps the latest state for the page and the
:class:`~rotorwatch.web.server.StatusServer` serves it (deploy/status-page.md). With a token file its
acknowledge and snapshot buttons go to the daemon's command desk. A change of ``[status_page]``
restarts it; any other reload is adopted by the board (machines that remain keep their data).
"""

from __future__ import annotations

from pathlib import Path

from ..alarms.records import MachineUpdate
from ..settings.models import Config, Machine
from .base import Blocks, Publisher, SinkContext, changed


class StatusPage(Publisher):
    name = "status_page"

    def __init__(self, config: Config, context: SinkContext):
        from ..web.board import StatusBoard
        from ..web.server import StatusServer

        sp = config.status_page
        assert sp is not None
        self.config = config
        self.context = context
        token = None
        if sp.token_file is not None:
            token = Path(sp.token_file) if Path(sp.token_file).is_absolute() else context.config_dir / sp.token_file
        self.board = StatusBoard(config)
        self.server = StatusServer(self.board, sp.bind, sp.port, token_file=token,
                                   on_acknowledge=self._acknowledge, on_snapshot=self._snapshot)

    @classmethod
    def from_config(cls, config: Config, context: SinkContext) -> StatusPage | None:
        return cls(config, context) if config.status_page is not None else None

    def start(self) -> None:
        self.server.start()

    def on_update(self, update: MachineUpdate, blocks_v: Blocks | None, machine: Machine) -> None:
        self.board.publish(update, blocks_v)

    def on_input(self, state: str, reason: str) -> None:
        self.board.set_input(state, reason)

    def reconfigure(self, config: Config) -> bool:
        if changed(self.config, config, "status_page"):
            return True
        self.config = config
        self.board.reconfigure(config)
        return False

    def close(self) -> None:
        self.server.stop()

    # -- the page's buttons (HTTP threads): queued to the analysis loop, bounded wait -----------------
    def _acknowledge(self, machine_id: str, point_id: str | None, value: str | None) -> str:
        assert self.context.commands is not None
        return self.context.commands.acknowledge(machine_id, point_id, value)

    def _snapshot(self, machine_id: str, point_id: str | None) -> str:
        assert self.context.commands is not None
        return self.context.commands.snapshot(machine_id)
