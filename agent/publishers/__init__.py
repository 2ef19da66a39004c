"""Publishers: where every machine update goes (the contract: :mod:`.base`).

:data:`PUBLISHERS` is the registry: the daemon builds each one from the configuration (a publisher
whose table is absent builds to nothing), starts them in this order before the source and closes
them in the reverse order after it. Adding a publisher is its own module plus one line here
(DEVELOPERS.md shows a worked example).
"""

from __future__ import annotations

from .base import Publisher, SinkContext
from .evidence import Evidence
from .mqtt import MqttSink
from .prometheus import PrometheusSink
from .status_page import StatusPage

#: Every publisher, in start order.
PUBLISHERS: tuple[type[Publisher], ...] = (
    Evidence,
    PrometheusSink,
    MqttSink,
    StatusPage,
)

__all__ = ["PUBLISHERS", "Publisher", "SinkContext"]
