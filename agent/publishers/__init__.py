"""Publishers: where every machine update goes (the contract: :mod:`.base`).

:data:`REGISTRY` names them and :data:`PUBLISHERS` holds their classes: the daemon builds each one from the configuration (a publisher
whose table is absent builds to nothing), starts them in this order before the source and closes
them in the reverse order after it. Adding a publisher is its own module plus one line here
(DEVELOPERS.md shows a worked example).
"""

from __future__ import annotations

import importlib

from .base import Publisher, SinkContext

#: Every publisher, in start order: ``"module:Class"`` in this package, one line each.
REGISTRY: tuple[str, ...] = (
    "evidence:Evidence",
    "prometheus:PrometheusSink",
    "mqtt:MqttSink",
    "status_page:StatusPage",
)


def load_entry(entry: str) -> type[Publisher]:
    """The publisher class a registry line names (``TypeError`` when it is not one)."""
    module_name, _, class_name = entry.partition(":")
    found = getattr(importlib.import_module(f".{module_name}", __name__), class_name, None)
    if not (isinstance(found, type) and issubclass(found, Publisher)):
        raise TypeError(f"publisher registry line {entry!r}: not a Publisher class")
    return found


#: The registry's classes, in start order.
PUBLISHERS: tuple[type[Publisher], ...] = tuple(load_entry(e) for e in REGISTRY)

__all__ = ["PUBLISHERS", "REGISTRY", "Publisher", "SinkContext", "load_entry"]
