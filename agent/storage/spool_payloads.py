"""What the spool stores: a record, its payload bytes on the wire, the checks, the spool's figures.

JSON objects get ``seq`` and ``ts`` first (``{"seq": 17, "ts": 1767225600.123, ...}``); a non-finite
number becomes null (JSON has no NaN); bytes payloads stay as given. Used by
:class:`~rotorwatch.storage.spool.Spool` at every append.
"""

from __future__ import annotations

import json
import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

KINDS = ("state", "metrics", "event")


def _json_default(obj: Any) -> Any:
    # numpy scalars and arrays without importing numpy here
    if hasattr(obj, "tolist"):
        return obj.tolist()
    if hasattr(obj, "item"):
        return obj.item()
    raise TypeError(f"{type(obj).__name__} is not JSON-serialisable")


def _finite_or_none(obj: Any) -> Any:
    """JSON has no NaN or infinity: a non-finite number becomes null (no value)."""
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    if isinstance(obj, Mapping):
        return {k: _finite_or_none(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_finite_or_none(v) for v in obj]
    return obj


def encode_payload(payload: Mapping[str, Any] | bytes, seq: int, ts_s: float, clock: str | None = None) -> bytes:
    """The bytes that go on the wire: JSON objects get ``seq`` and ``ts`` first (and ``clock`` when
    there is something to say about ``ts``: ``unsynchronized``, ``stepped``), bytes stay as given."""
    if isinstance(payload, (bytes, bytearray, memoryview)):
        return bytes(payload)
    if not isinstance(payload, Mapping):
        raise TypeError(f"payload must be a dict or bytes, not {type(payload).__name__}")
    clash = [k for k in ("seq", "ts", "clock") if k in payload]
    if clash:
        raise ValueError(f"payload keys {clash} are reserved: the spool adds seq, ts and clock")
    doc = {"seq": seq, "ts": round(ts_s, 3), **({"clock": clock} if clock else {}), **payload}
    try:
        text = json.dumps(doc, separators=(",", ":"), allow_nan=False, default=_json_default)
    except ValueError:
        text = json.dumps(_finite_or_none(json.loads(json.dumps(doc, default=_json_default))),
                          separators=(",", ":"), allow_nan=False)
    return text.encode("utf-8")


def check_topic(topic: str) -> None:
    """Raise ValueError unless ``topic`` is a valid MQTT topic name for publishing."""
    if not isinstance(topic, str) or not topic:
        raise ValueError(f"topic {topic!r}: must be a non-empty string")
    if "+" in topic or "#" in topic or "\0" in topic:
        raise ValueError(f"topic {topic!r}: wildcards and NUL are not allowed in a published topic")
    if len(topic.encode("utf-8")) > 65535:
        raise ValueError(f"topic of {len(topic)} characters: MQTT allows at most 65535 bytes")


def check_record(kind: str, topic: str, qos: int) -> None:
    if kind not in KINDS:
        raise ValueError(f"record kind {kind!r}: must be one of {', '.join(KINDS)}")
    check_topic(topic)
    if qos not in (0, 1, 2):
        raise ValueError(f"qos = {qos!r}: must be 0, 1 or 2")


@dataclass(frozen=True)
class Record:
    """One spooled record, as it will be published."""

    seq: int
    ts_s: float
    kind: str  # state | metrics | event
    topic: str
    payload: bytes
    qos: int
    retain: bool


@dataclass(frozen=True)
class SpoolStats:
    """A snapshot of the spool's health (for metrics and the status page)."""

    depth: int  # records stored (pending + in flight)
    stored_bytes: int  # topics + payloads + RECORD_OVERHEAD_BYTES per record
    in_flight: int
    last_seq: int  # the highest seq ever given out (0: none yet)
    oldest_seq: int | None
    oldest_ts_s: float | None
    max_bytes: int
    max_records: int
    dropped: dict[str, int] = field(default_factory=dict)  # by reason (DROP_REASONS), since creation

    @property
    def dropped_total(self) -> int:
        return sum(self.dropped.values())
