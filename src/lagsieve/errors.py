"""User-facing problems: one clear line each, never a traceback.

A problem names where it is (file, row, series or config key), what is wrong and how to
fix it. The command line prints one line per problem and exits with status 2.
"""
from __future__ import annotations

from dataclasses import dataclass, field


@dataclass(frozen=True)
class InputProblem:
    """One problem in a user's config or data file."""

    what: str
    fix: str
    file: str | None = None
    row: int | None = None
    series: str | None = None
    key: str | None = None

    def line(self) -> str:
        """The problem as one line: ``file:row: series 'x': what is wrong; how to fix it``."""
        where = []
        if self.file is not None:
            where.append(self.file if self.row is None else f"{self.file}:{self.row}")
        if self.key is not None:
            where.append(f"key '{self.key}'")
        if self.series is not None:
            where.append(f"series '{self.series}'")
        prefix = ": ".join(where)
        text = f"{self.what}; {self.fix}"
        return f"{prefix}: {text}" if prefix else text

    def __str__(self) -> str:
        return self.line()


@dataclass
class InputErrors(Exception):
    """A collection of problems found while checking a study; raised together."""

    problems: list[InputProblem] = field(default_factory=list)

    def __post_init__(self) -> None:
        super().__init__(self.__str__())

    def __str__(self) -> str:
        return "\n".join(p.line() for p in self.problems)


def report_problems(exc: "InputErrors", stream=None) -> int:
    """Print one line per problem (to stderr by default); return the user-error exit status 2."""
    import sys

    stream = sys.stderr if stream is None else stream
    for p in exc.problems:
        print(p.line(), file=stream)
    return 2


def fail(what: str, fix: str, **where) -> None:
    """Raise a single problem as :class:`InputErrors`."""
    raise InputErrors([InputProblem(what=what, fix=fix, **where)])


@dataclass(frozen=True)
class InputWarning:
    """A condition worth telling the user about that does not stop the run."""

    what: str
    file: str | None = None
    series: str | None = None

    def line(self) -> str:
        where = []
        if self.file:
            where.append(self.file)
        if self.series:
            where.append(f"series '{self.series}'")
        prefix = ": ".join(where)
        return f"warning: {prefix}: {self.what}" if prefix else f"warning: {self.what}"
