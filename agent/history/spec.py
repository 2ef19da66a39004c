"""How to read a history: from the command line or from a small TOML description.

A description file (``--history FILE.toml``) holds one ``[history]`` table::

    [history]
    path = "exports"                    # folder or archive, relative to this file
    time_pattern = "%Y.%m.%d.%H.%M.%S"  # time in each file's name (or: a JSON sidecar per file,
    # start = "2004-02-12T10:32:39Z"    #  or start + cadence, element k at start + k x cadence)
    # cadence = "10 min"
    delimiter = "\\t"                   # delimited text: the column separator (default: white space)
    header_lines = 0                    # lines to skip at the top of each text file
    sample_rate_hz = 20000              # text files carry no rate
    unit = "g"                          # g, m/s2 or volts, when the files do not say
    columns = { de-h = 0, nde-h = 1 }   # point id -> column (default: the point's sensor.channel)
    data_rate = false                   # true: analyze at the data's rate when it differs from the config's

Options given on the command line win over the description's.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from pydantic import BaseModel, ConfigDict, Field

from ..errors import InputError
from .timestamps import parse_date, parse_duration


class _Description(BaseModel):
    model_config = ConfigDict(extra="forbid")

    path: str
    time_pattern: str | None = None
    start: str | None = None
    cadence: str | float | None = None
    delimiter: str | None = None
    header_lines: int = Field(0, ge=0, le=10000)
    sample_rate_hz: float | None = Field(None, gt=0)
    unit: str | None = None
    columns: dict[str, int] = {}
    data_rate: bool = False


@dataclass
class HistorySpec:
    """Everything needed to list and decode a history's elements."""

    path: Path
    time_pattern: str | None = None
    start_unix_s: float | None = None
    cadence_s: float | None = None
    delimiter: str | None = None  # None: white space
    header_lines: int = 0
    sample_rate_hz: float | None = None
    unit: str | None = None
    columns: dict[str, int] = field(default_factory=dict)  # point id -> column / channel
    data_rate: bool = False


def _columns(text: str) -> dict[str, int]:
    out: dict[str, int] = {}
    for part in text.split(","):
        pid, sep, col = part.partition("=")
        try:
            out[pid.strip()] = int(col)
        except ValueError:
            sep = ""
        if not sep or not pid.strip() or out.get(pid.strip(), -1) < 0:
            raise InputError(f"--columns = {text!r}: expected POINT=COLUMN[,POINT=COLUMN...], columns from 0")
    return out


def _from_description(path: Path) -> HistorySpec:
    from ..settings.loading import read_toml, validate

    data = read_toml(path)
    if set(data) != {"history"} or not isinstance(data["history"], dict):
        raise InputError(f"{path}: a history description holds one [history] table (with path = the folder)")
    d = validate(_Description, data["history"], f"{path}: history")
    where = f"{path}: history"
    return HistorySpec(
        path=(path.parent / d.path).resolve(), time_pattern=d.time_pattern,
        start_unix_s=parse_date(d.start, f"{where}.start") if d.start else None,
        cadence_s=parse_duration(str(d.cadence), f"{where}.cadence") if d.cadence is not None else None,
        delimiter=d.delimiter, header_lines=d.header_lines, sample_rate_hz=d.sample_rate_hz, unit=d.unit,
        columns=dict(d.columns), data_rate=d.data_rate,
    )


def spec_from_args(args: Any) -> HistorySpec:
    """The history to read: ``--history`` (a folder, an archive or a ``.toml`` description) and options."""
    path = Path(args.history)
    spec = _from_description(path) if path.suffix.lower() == ".toml" else HistorySpec(path)
    if getattr(args, "time_pattern", None):
        spec.time_pattern = args.time_pattern
    if getattr(args, "cadence", None):
        spec.cadence_s = parse_duration(args.cadence, "--cadence")
    if getattr(args, "start_given", False) or (spec.start_unix_s is None and spec.cadence_s is not None):
        spec.start_unix_s = parse_date(args.start, "--start")
    if getattr(args, "delimiter", None) is not None:
        spec.delimiter = args.delimiter.encode().decode("unicode_escape")  # "\t" typed on a shell
    if getattr(args, "header_lines", None) is not None:
        spec.header_lines = args.header_lines
    if getattr(args, "sample_rate", None) is not None:
        spec.sample_rate_hz = args.sample_rate
    if getattr(args, "unit", None):
        spec.unit = args.unit
    if getattr(args, "columns", None):
        spec.columns = _columns(args.columns)
    if getattr(args, "data_rate", False):
        spec.data_rate = True
    return spec
