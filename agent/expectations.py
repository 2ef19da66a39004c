"""Replay expectations: short sentences about a replay's states, parsed and checked.

A small grammar of our own, one expectation per string::

    expectation := subject verb state [window]
                 | "no" state [window]                       (the machine never reaches the state)
                 | subject "reaches" state "before" subject "reaches" state
                 | "finding" NAME ["on" POINT] ("appears" | "never appears" | "is present") [window]
                 | "no finding" NAME ["on" POINT] [window]
    subject     := "machine" | "point" POINT | "zone on" POINT | VALUE "on" POINT
    verb        := "reaches" | "is" | "stays below" | "never" | "ends"
    window      := "before" TIME | "after" TIME | "between" TIME "and" TIME
                 | "at least" NUMBER ("h" | "d") "before the end"
    TIME        := ("day" | "hour") NUMBER      (days or hours from the start of the replay; the
                                                 second TIME of "between" may omit the unit)
                 | DATE [HH:MM[:SS]]            (a date and time, UTC: 2004-02-19 06:00 or 2004-02-19T06:00Z;
                                                 needs the replay's start, which parse() is given)

``VALUE`` is a band name, ``overall``, or ``finding:NAME`` for a finding named in the machine's
``alarms.findings`` (the state it raises on the point); states are the point states (``alarm``, ``warning``,
``sensor_fault``, ``no_data``, ``learning``, ``normal``, ``stopped``), ``suppressed`` for values, and
the ISO 20816 zone letters ``A`` to ``D`` (optionally written ``zone C``) for ``zone on POINT``.

``finding NAME`` is a finding the analysis reports on the point (or on any point without ``on POINT``),
whether or not it raises a state: ``appears`` is ``reaches present``, ``no finding`` is ``never present``.
NAME is one of the finding names (``BPFO`` ... ``unbalance``, ``looseness``, ``2xLF``, ``gear_mesh``).

Meaning, over the updates inside the window:

- ``reaches S``: the subject enters S inside the window (it was in another state at the update before,
  or S is its state at the first update); a state entered earlier and still held does not count;
- ``is S``: every update is in S;
- ``stays below S`` / ``never S``: no update is in S;   ``ends S``: the last update is in S;
- ``A reaches S before B reaches T``: A reaches S, and earlier than B reaches T (or B never does).

``warning`` and ``alarm`` are ordered (an alarm has also reached warning), as are zones (D has also
reached C); the other states match exactly. A window with no update fails: it usually means a typo in
the day numbers. Examples::

    de-outer-race on de-h reaches alarm between day 10 and day 20
    no warning before day 25
    overall on de-h stays below warning
    point de-h is sensor_fault between day 12.0 and day 12.1
    machine never alarm
    de-outer-race on de-h reaches warning before zone on de-h reaches C
    outer-race on de reaches alarm before 2004-02-19 06:00
    outer-race on de reaches warning at least 48 h before the end
    machine never warning before 2004-02-16
    finding looseness on de-h appears before day 28
    no finding unbalance
"""

from __future__ import annotations

import math
import re
from collections.abc import Callable
from datetime import UTC, datetime
from typing import NoReturn

from .alarms.records import STATES
from .errors import ConfigError
from .expectation_model import Expectation, Sample, Subject, Verdict, Window
from .settings.models import FINDING_NAMES, Machine

DAY_S = 86400.0
HOUR_S = 3600.0
ORDERED = {"warning": 1, "alarm": 2}
ZONES = ("A", "B", "C", "D")
VALUE_STATES = ("alarm", "warning", "learning", "normal", "suppressed")
VERBS = ("reaches", "is", "stays below", "never", "ends")
GRAMMAR_HINT = (
    "expected '<subject> reaches|is|stays below|never|ends <state> [before|after day N | between day N and day M]', "
    "'no <state> [window]' or '<subject> reaches <state> before <subject> reaches <state>'; "
    "a window may also be 'before|after DATE [HH:MM]' or 'at least N h before the end'; "
    "subject: machine | point P | zone on P | VALUE on P"
)


# -------------------------------------------------------------------------------------------- parsing
class _Tokens:
    def __init__(self, text: str, fail: Callable[[str], NoReturn]):
        self.words = text.split()
        self.i = 0
        self.fail = fail

    def peek(self, k: int = 0) -> str | None:
        j = self.i + k
        return self.words[j] if j < len(self.words) else None

    def low(self, k: int = 0) -> str | None:
        w = self.peek(k)
        return w.lower() if w is not None else None

    def take(self, what: str) -> str:
        w = self.peek()
        if w is None:
            self.fail(f"ends early, expected {what}")
        self.i += 1
        return w

    def expect(self, word: str) -> None:
        w = self.take(f"'{word}'")
        if w.lower() != word:
            self.fail(f"expected '{word}' but found {w!r}")

    def done(self) -> bool:
        return self.i >= len(self.words)


_DATE = re.compile(r"^\d{4}-\d{2}-\d{2}(?:[T ]\d{1,2}:\d{2}(?::\d{2})?)?Z?$", re.IGNORECASE)
_CLOCK = re.compile(r"^\d{1,2}:\d{2}(?::\d{2})?Z?$", re.IGNORECASE)
_SPAN = re.compile(r"^([0-9]*\.?[0-9]+)\s*(h|hours?|d|days?)?$", re.IGNORECASE)


def _is_time(word: str | None) -> bool:
    return word is not None and (word in ("day", "days", "hour", "hours") or bool(_DATE.match(word)))


def _date(tok: _Tokens, start_unix_s: float | None) -> float:
    """Parse 'DATE [HH:MM[:SS]]' (UTC) -> seconds from the replay's start."""
    text = tok.take("a date")
    if tok.peek() is not None and _CLOCK.match(tok.peek() or "") and "T" not in text.upper():
        text += "T" + tok.take("a time of day")
    try:
        dt = datetime.fromisoformat(text.upper().replace("Z", "+00:00"))
    except ValueError:
        tok.fail(f"{text!r} is not a date and time (e.g. 2004-02-19 06:00)")
    if dt.tzinfo is None:
        dt = dt.replace(tzinfo=UTC)
    if start_unix_s is None:
        tok.fail("a date needs the replay's start date, which this check does not know")
    return dt.timestamp() - start_unix_s


def _before_end(tok: _Tokens) -> Window:
    """'at least N h|d before the end' (N and its unit may be written together: 48h)."""
    tok.take("at")
    tok.expect("least")
    raw = tok.take("a duration, e.g. 48 h")
    m = _SPAN.match(raw)
    unit = m.group(2) if m else None
    if m and unit is None and tok.low() in ("h", "hour", "hours", "d", "day", "days"):
        unit = tok.take("a unit")
    if m is None or unit is None:
        tok.fail(f"{raw!r}: expected a duration in hours or days, e.g. 48 h or 2 d")
    span_s = float(m.group(1)) * (DAY_S if unit.lower().startswith("d") else HOUR_S)
    for word in ("before", "the", "end"):
        tok.expect(word)
    return Window(None, None, before_end_s=span_s)


def _number(tok: _Tokens, unit_s: float | None, start_unix_s: float | None = None) -> tuple[float, float]:
    """Parse '[day|hour] NUMBER' or 'DATE [HH:MM]' -> (seconds from the start, unit seconds)."""
    word = tok.low()
    if word is not None and _DATE.match(word):
        return _date(tok, start_unix_s), unit_s or DAY_S
    if word in ("day", "days"):
        unit_s = DAY_S
        tok.take("day")
    elif word in ("hour", "hours"):
        unit_s = HOUR_S
        tok.take("hour")
    elif unit_s is None:
        tok.fail(f"expected 'day N' or 'hour N' but found {tok.peek()!r}" if word else "ends early, expected 'day N'")
    raw = tok.take("a number")
    try:
        x = float(raw)
    except ValueError:
        tok.fail(f"{raw!r} is not a number")
    if not math.isfinite(x) or x < 0:
        tok.fail(f"{raw!r}: a time must be a finite number of days or hours from the start, 0 or more")
    return x * unit_s, unit_s


def _window(tok: _Tokens, start_unix_s: float | None = None) -> Window:
    if tok.done():
        return Window()
    word = tok.low()
    if word == "at" and tok.low(1) == "least":
        return _before_end(tok)
    if word == "before":
        tok.take("before")
        end, _ = _number(tok, None, start_unix_s)
        return Window(None, end, end_inclusive=False)
    if word == "after":
        tok.take("after")
        start, _ = _number(tok, None, start_unix_s)
        return Window(start, None)
    if word == "between":
        tok.take("between")
        start, unit = _number(tok, None, start_unix_s)
        tok.expect("and")
        end, _ = _number(tok, unit, start_unix_s)
        if end < start:
            tok.fail("the window ends before it starts")
        return Window(start, end)
    tok.fail(f"expected a window (before|after|between ...) but found {tok.peek()!r}")
    raise AssertionError  # unreachable


def _subject(tok: _Tokens) -> Subject:
    word = tok.low()
    if word == "machine":
        tok.take("machine")
        return Subject("machine")
    if word == "point":
        tok.take("point")
        return Subject("point", point=tok.take("a point id"))
    if word == "zone" and tok.low(1) == "on":
        tok.take("zone")
        tok.take("on")
        return Subject("zone", point=tok.take("a point id"))
    value = tok.take("a subject (machine, point P, zone on P or VALUE on P)")
    tok.expect("on")
    return Subject("value", point=tok.take("a point id"), value=value)


def _verb(tok: _Tokens) -> str:
    word = tok.low()
    if word == "stays":
        tok.take("stays")
        tok.expect("below")
        return "stays below"
    if word == "never":
        tok.take("never")
        if tok.low() == "reaches":
            tok.take("reaches")
        return "never"
    if word == "ends":
        tok.take("ends")
        if tok.low() == "in":
            tok.take("in")
        return "ends"
    if word in ("reaches", "is"):
        tok.take(word)
        return word
    tok.fail(f"expected a verb ({', '.join(VERBS)}) but found {tok.peek()!r}" if word else "ends early, expected a verb")
    raise AssertionError  # unreachable


def _state(tok: _Tokens, subject: Subject) -> str:
    if subject.kind == "zone":
        if tok.low() == "zone":
            tok.take("zone")
        raw = tok.take("a zone letter A-D")
        if raw.upper() not in ZONES:
            tok.fail(f"zone {raw!r}: expected one of {', '.join(ZONES)}")
        return raw.upper()
    raw = tok.take("a state")
    state = raw.lower()
    allowed = VALUE_STATES if subject.kind == "value" else STATES
    if state not in allowed:
        tok.fail(f"state {raw!r} for {subject}: expected one of {', '.join(allowed)}")
    return state


def _check_names(subject: Subject, machine: Machine | None, fail) -> None:
    if machine is None or subject.point is None:
        return
    points = [p.id for p in machine.points]
    if subject.point not in points:
        fail(f"unknown point {subject.point!r} (machine {machine.id!r} has {', '.join(points)})")
    if subject.kind == "value":
        values = ["overall"] + [b.name for b in machine.bands_for(subject.point)]
        values += [f"finding:{name}" for name in machine.alarms.finding_rules]
        if subject.value not in values:
            fail(f"unknown value {subject.value!r} on point {subject.point!r} (known: {', '.join(values)})")


def parse(text: str, machine: Machine | None = None, where: str = "expectation",
          start_unix_s: float | None = None) -> Expectation:
    """Parse one expectation; names are checked against ``machine`` when given; dates are read as
    seconds from ``start_unix_s`` (the replay's first update), which a date needs.

    Raises :class:`ConfigError` with one line ``where = 'text': problem`` on any mistake.
    """

    def fail(problem: str) -> NoReturn:
        raise ConfigError([f"{where} = {text!r}: {problem}; {GRAMMAR_HINT}"])

    tok = _Tokens(text, fail)
    if tok.done():
        fail("empty expectation")
    if tok.low() == "finding" or (tok.low() == "no" and tok.low(1) == "finding"):
        return _finding_expectation(text, tok, machine, fail)
    if tok.low() == "no":
        tok.take("no")
        subject = Subject("machine")
        state = _state(tok, subject)
        window = _window(tok, start_unix_s)
        verb = "never"
        other = None
    else:
        subject = _subject(tok)
        _check_names(subject, machine, fail)
        verb = _verb(tok)
        state = _state(tok, subject)
        other = None
        if verb == "reaches" and tok.low() == "before" and not _is_time(tok.low(1)):
            tok.take("before")
            second = _subject(tok)
            _check_names(second, machine, fail)
            tok.expect("reaches")
            other = (second, _state(tok, second))
            window = Window()
        else:
            window = _window(tok, start_unix_s)
    if not tok.done():
        fail(f"unexpected {' '.join(tok.words[tok.i:])!r} at the end")
    if verb in ("stays below",) and state not in ORDERED and subject.kind != "zone":
        fail(f"'stays below' needs warning, alarm or a zone, not {state!r}")
    return Expectation(" ".join(text.split()), subject, verb, state, window, other)


def _finding_expectation(text: str, tok: _Tokens, machine: Machine | None, fail) -> Expectation:
    negated = tok.low() == "no"
    if negated:
        tok.take("no")
    tok.take("finding")
    name = tok.take("a finding name")
    if name not in FINDING_NAMES:
        fail(f"unknown finding {name!r} (known: {', '.join(FINDING_NAMES)})")
    point = None
    if tok.low() == "on":
        tok.take("on")
        point = tok.take("a point id")
    subject = Subject("finding", point=point, value=name)
    _check_names(subject, machine, fail)
    if negated:
        verb = "never"
    elif tok.low() == "appears":
        tok.take("appears")
        verb = "reaches"
    elif tok.low() == "never" and tok.low(1) == "appears":
        tok.take("never")
        tok.take("appears")
        verb = "never"
    elif tok.low() == "is" and tok.low(1) == "present":
        tok.take("is")
        tok.take("present")
        verb = "is"
    else:
        fail(f"expected 'appears', 'never appears' or 'is present' after {subject} but found {tok.peek()!r}")
    window = _window(tok)
    if not tok.done():
        fail(f"unexpected {' '.join(tok.words[tok.i:])!r} at the end")
    return Expectation(" ".join(text.split()), subject, verb, "present", window)


# ----------------------------------------------------------------------------------------- evaluation
def _state_of(sample: Sample, subject: Subject) -> str | None:
    if subject.kind == "finding":
        names = ([sample.findings.get(subject.point, frozenset())] if subject.point is not None
                 else list(sample.findings.values()))
        return "present" if any(subject.value in n for n in names) else "absent"
    if subject.kind == "machine":
        return sample.machine
    if subject.kind == "point":
        return sample.points.get(subject.point)  # type: ignore[arg-type]
    if subject.kind == "zone":
        return sample.zones.get(subject.point)  # type: ignore[arg-type]
    v = sample.values.get((subject.point, subject.value))  # type: ignore[arg-type]
    return v[0] if v else None


def matches(state: str | None, wanted: str, subject: Subject) -> bool:
    """Is ``state`` in ``wanted``? Warning/alarm and zones count 'at least'; the rest exactly."""
    if state is None:
        return False
    if subject.kind == "zone":
        return state in ZONES and ZONES.index(state) >= ZONES.index(wanted)
    if wanted in ORDERED:
        return ORDERED.get(state, 0) >= ORDERED[wanted]
    return state == wanted


def day(t_s: float) -> str:
    return f"day {t_s / DAY_S:.2f}"


def _at(sample: Sample, subject: Subject) -> str:
    text = f"{day(sample.elapsed_s)}"
    if subject.kind == "value":
        v = sample.values.get((subject.point, subject.value))  # type: ignore[arg-type]
        if v and math.isfinite(v[1]):
            text += f" ({v[1]:.3g} {v[2]})"
    return text


def first_reaching(samples: list[Sample], subject: Subject, state: str) -> Sample | None:
    return next((s for s in samples if matches(_state_of(s, subject), state, subject)), None)


def entering(samples: list[Sample], subject: Subject, state: str) -> list[Sample]:
    """The updates at which the subject enters ``state`` (or is in it at the first update)."""
    out = []
    before = False
    for s in samples:
        now = matches(_state_of(s, subject), state, subject)
        if now and not before:
            out.append(s)
        before = now
    return out


#: States that judge the machine's condition, most severe first. The others say why there is no
#: judgement (learning the baseline, a sensor fault, no data, stopped, a suppressed value) and are not
#: ranked against them: "learning" is not worse than "normal", only not yet judged.
CONDITION_ORDER = ("alarm", "warning", "normal")


def _worst_seen(samples: list[Sample], subject: Subject) -> str:
    """What the subject went through, ranked by meaning: the most severe condition (or zone) seen, then
    the states without a judgement and how many updates each held, e.g. ``normal (also learning: 18)``."""
    seen = [st for st in (_state_of(s, subject) for s in samples) if st is not None]
    if not seen:
        return "none"
    if subject.kind == "zone":
        return "zone " + max(seen, key=lambda z: ZONES.index(z) if z in ZONES else -1)
    judged = [st for st in seen if st in CONDITION_ORDER]
    others: dict[str, int] = {}
    for st in seen:
        if st not in CONDITION_ORDER:
            others[st] = others.get(st, 0) + 1
    also = ", ".join(f"{st}: {n}" for st, n in sorted(others.items(), key=lambda kv: STATES.index(kv[0])
                                                         if kv[0] in STATES else 99))
    if not judged:
        return f"no judgement ({also})"
    worst = min(judged, key=CONDITION_ORDER.index)
    return worst + (f" (also {also})" if also else "")


def evaluate(exp: Expectation, samples: list[Sample]) -> Verdict:
    """Check one expectation against the updates of a replay (in time order)."""
    if exp.other is not None:
        a = first_reaching(samples, exp.subject, exp.state)
        other, other_state = exp.other
        b = first_reaching(samples, other, other_state)
        if a is None:
            return Verdict(exp, False, f"{exp.subject} never reached {exp.state}")
        if b is None:
            return Verdict(exp, True, f"{exp.subject} reached {exp.state} at {_at(a, exp.subject)}; {other} never reached {other_state}")
        lead = (b.elapsed_s - a.elapsed_s) / DAY_S
        detail = f"{exp.subject} reached {exp.state} at {_at(a, exp.subject)}, {other} reached {other_state} at {_at(b, other)}"
        return Verdict(exp, a.elapsed_s < b.elapsed_s, f"{detail} ({lead:+.2f} days)")

    window = exp.window.resolve(samples[-1].elapsed_s if samples else 0.0)
    inside = [s for s in samples if window.contains(s.elapsed_s)]
    if not inside:
        span = f"{day(samples[0].elapsed_s)} to {day(samples[-1].elapsed_s)}" if samples else "no updates at all"
        return Verdict(exp, False, f"no updates inside the window (the replay covers {span})")
    subj, want = exp.subject, exp.state
    hits = [s for s in inside if matches(_state_of(s, subj), want, subj)]
    if exp.verb == "reaches":
        entries = entering(samples, subj, want)
        inside_entries = [s for s in entries if window.contains(s.elapsed_s)]
        if inside_entries:
            return Verdict(exp, True, f"entered {want} at {_at(inside_entries[0], subj)}")
        if entries:
            return Verdict(exp, False, f"entered {want} at {_at(entries[0], subj)}, outside the window")
        return Verdict(exp, False, f"never {want} (worst: {_worst_seen(samples, subj)})")
    if exp.verb == "is":
        misses = [s for s in inside if s not in hits]
        if not misses:
            return Verdict(exp, True, f"{want} at all {len(inside)} updates in the window")
        first = misses[0]
        return Verdict(
            exp, False,
            f"{_state_of(first, subj)} at {_at(first, subj)} ({len(misses)} of {len(inside)} updates not {want})",
        )
    if exp.verb in ("stays below", "never"):
        if not hits and subj.kind == "finding":
            return Verdict(exp, True, f"not reported in any of {len(inside)} updates")
        if not hits:
            return Verdict(exp, True, f"worst: {_worst_seen(inside, subj)} over {len(inside)} updates")
        return Verdict(exp, False, f"{_state_of(hits[0], subj)} at {_at(hits[0], subj)}")
    # ends
    last = inside[-1]
    ok = matches(_state_of(last, subj), want, subj)
    return Verdict(exp, ok, f"{_state_of(last, subj)} at the last update, {_at(last, subj)}")
