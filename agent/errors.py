"""The error types of rotorwatch.

Every failure a user can cause (a bad file, an unreadable recording, a missing device) is raised as a
:class:`RotorwatchError` whose message is one line, ordered where -> what -> value -> allowed. The CLI
prints it and exits non-zero; tracebacks appear only with ``--debug``.
"""

from __future__ import annotations


class RotorwatchError(Exception):
    """Base of every error rotorwatch reports to a user as one line."""

    exit_code = 2


class ConfigError(RotorwatchError):
    """A configuration or scenario file failed to load or validate.

    ``problems`` holds one line per problem, each already naming the file and the field path.
    """

    def __init__(self, problems: list[str]):
        self.problems = list(problems)
        super().__init__("\n".join(self.problems))


class InputError(RotorwatchError):
    """A recording or sample block cannot be analyzed (unreadable, empty, too short, rate too low)."""


class SourceUnavailable(RotorwatchError):
    """A capture source cannot be opened now; the daemon retries with backoff."""

    retry = True


class ExpectationFailed(RotorwatchError):
    """A replay expectation did not hold (exit code 1, so CI jobs fail)."""

    exit_code = 1
