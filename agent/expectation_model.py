"""The records of the expectation language (agent/expectations.py parses and evaluates them): what an
expectation is about (Subject), when it applies (Window), the states of one update as expectations
see them (Sample), and the outcome (Verdict)."""

from __future__ import annotations

from dataclasses import dataclass, field, replace

__all__ = ["Expectation", "Sample", "Subject", "Verdict", "Window"]


@dataclass(frozen=True)
class Subject:
    kind: str  # machine | point | value | zone | finding (point None: any point)
    point: str | None = None
    value: str | None = None

    def __str__(self) -> str:
        if self.kind == "finding":
            return f"finding {self.value}" + (f" on {self.point}" if self.point else "")
        if self.kind == "machine":
            return "machine"
        if self.kind == "point":
            return f"point {self.point}"
        if self.kind == "zone":
            return f"zone on {self.point}"
        return f"{self.value} on {self.point}"


@dataclass(frozen=True)
class Window:
    start_s: float | None = None  # inclusive
    end_s: float | None = None  # inclusive for "between", exclusive for "before"
    end_inclusive: bool = True
    before_end_s: float | None = None  # "at least N h before the end": resolved against the last update

    def resolve(self, last_s: float) -> Window:
        """The window with an end relative to the replay's last update made absolute."""
        if self.before_end_s is None:
            return self
        return replace(self, end_s=last_s - self.before_end_s, end_inclusive=True, before_end_s=None)

    def contains(self, t_s: float) -> bool:
        if self.start_s is not None and t_s < self.start_s - 1e-9:
            return False
        if self.end_s is not None:
            return t_s <= self.end_s + 1e-9 if self.end_inclusive else t_s < self.end_s - 1e-9
        return True


@dataclass(frozen=True)
class Expectation:
    text: str
    subject: Subject
    verb: str
    state: str
    window: Window = Window()
    other: tuple[Subject, str] | None = None  # "... before <subject> reaches <state>"


@dataclass(frozen=True)
class Sample:
    """The states of one replay update, as expectations see them."""

    elapsed_s: float
    machine: str
    points: dict[str, str]
    values: dict[tuple[str, str], tuple[str, float, str]]  # (point, value) -> (state, value, unit)
    zones: dict[str, str | None] = field(default_factory=dict)
    findings: dict[str, frozenset[str]] = field(default_factory=dict)  # point -> names the analysis reported


@dataclass(frozen=True)
class Verdict:
    expectation: Expectation
    passed: bool
    detail: str
