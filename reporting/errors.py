"""Errors raised by segreport.

Every error a user can cause is a :class:`ReportingError`. Input problems are :class:`InputError`:
each carries a *location* (a file and a dotted path inside it, such as
``study.yaml: stages.peak.wall_motion``) and a *problem*, and formats them as one line. Loading a
study collects every problem it finds and raises them together as :class:`InputErrors`, so a reader
fixes a file in one pass instead of one error at a time.
"""

from __future__ import annotations

from collections.abc import Sequence


class ReportingError(Exception):
    """Base class of every error segreport raises on purpose."""


class InputError(ReportingError, ValueError):
    """One problem with user input, at one location."""

    def __init__(self, location: str, problem: str) -> None:
        self.location = location
        self.problem = problem
        super().__init__(f"{location}: {problem}" if location else problem)


class UsageError(InputError):
    """Arguments or options that do not go together, or a missing one: exit 2, as click's own
    usage errors, where every other input problem exits 1."""


class InputErrors(ReportingError, ValueError):
    """Several input problems found together; ``problems`` lists them in file order."""

    def __init__(self, problems: Sequence[InputError]) -> None:
        if not problems:
            raise ValueError("InputErrors needs at least one problem")
        self.problems: tuple[InputError, ...] = tuple(problems)
        super().__init__("\n".join(str(p) for p in self.problems))

    def prefixed(self, prefix: str) -> InputErrors:
        """The same problems with ``prefix`` (usually a file name) put before each location."""
        return InputErrors(
            [
                InputError(f"{prefix}: {p.location}" if p.location else prefix, p.problem)
                for p in self.problems
            ]
        )


class OutputError(ReportingError, OSError):
    """An output file or folder could not be written."""

    def __init__(self, location: str, problem: str) -> None:
        self.location = location
        self.problem = problem
        super().__init__(f"{location}: {problem}")


def problems_of(error: ReportingError) -> tuple[InputError, ...] | tuple[ReportingError, ...]:
    """The individual problems inside ``error`` (itself when it is a single problem)."""
    if isinstance(error, InputErrors):
        return error.problems
    return (error,)
