"""User-facing problems: one clear line each, never a traceback.

A problem names where it is (file, row, series or config key), what is wrong and how to
fix it. The command line prints one line per problem and exits with status 2.
"""
from __future__ import annotations

import difflib
import sys
from dataclasses import dataclass, field
from typing import Any, Iterable

#: How to mend a damaged installation (a file of the package or a library it needs missing)
REINSTALL = "python -m pip install --force-reinstall lagsieve"


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
            # a position in a list reads `drivers[2] (id 'x').category`, itself quoting the id
            where.append(self.key if "[" in self.key else f"key '{self.key}'")
        if self.series is not None and f"(id '{self.series}')" not in (self.key or ""):
            where.append(f"series '{self.series}'")
        prefix = ": ".join(where)
        text = f"{self.what}; {self.fix}"
        return f"{prefix}: {text}" if prefix else text

    def __str__(self) -> str:
        return self.line()


def item_key(role: str, index: int, sid: str | None = None, *rest: str) -> str:
    """Where an entry of a config list is: one-based and named by its id where it has one,
    ``item_key("drivers", 8, "seabirds", "category")`` -> ``drivers[9] (id 'seabirds').category``."""
    text = f"{role}[{index + 1}]" + (f" (id '{sid}')" if sid is not None else "")
    return text + "".join(f".{r}" for r in rest)


@dataclass
class InputErrors(Exception):
    """A collection of problems found while checking a study; raised together."""

    problems: list[InputProblem] = field(default_factory=list)

    def __post_init__(self) -> None:
        super().__init__(self.__str__())

    def __str__(self) -> str:
        return "\n".join(p.line() for p in self.problems)


def raise_any(problems: list[InputProblem]) -> None:
    """Raise :class:`InputErrors` when there is any problem."""
    if problems:
        raise InputErrors(problems)


def report_problems(exc: "InputErrors", stream=None) -> int:
    """Print one line per problem (to stderr by default); return the user-error exit status 2."""
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


# ----------------------------------------------------------------------------- message parts

def show(value: Any, limit: int = 40) -> str:
    """A user's cell or setting as a short, single-line, printable text for messages."""
    text = value if isinstance(value, str) else str(value)
    if len(text) > limit:
        text = text[: limit - 3] + "..."
    if text.isprintable():
        return text
    return "".join(c if c.isprintable() else repr(c)[1:-1] for c in text)


def nearest(word: str, choices: Iterable[str], n: int = 3) -> list[str]:
    """The ``n`` choices most like ``word`` (difflib's similarity ratio), best first.

    Choices above difflib's usual cutoff (0.6) come first; when none is that close the
    best-scoring ones are returned anyway, so a message can always show the user something
    to pick from. Empty only when there are no choices.
    """
    pool = sorted(set(choices))
    close = difflib.get_close_matches(word, pool, n=n)
    if close:
        return close

    def distance(choice: str) -> tuple[float, str]:  # ties in alphabetical order
        return -difflib.SequenceMatcher(None, word, choice).ratio(), choice

    return sorted(pool, key=distance)[:n]


def closest(word: str, choices: Iterable[str]) -> str | None:
    """The choice most like ``word`` if one is close (difflib's ratio of at least 0.6)."""
    close = difflib.get_close_matches(word, sorted(set(choices)), n=1)
    return close[0] if close else None


def suggest(word: str, choices: Iterable[str], what: str = "ids", n: int = 3) -> str:
    """A hint naming the nearest of ``choices``: "did you mean 'x'?" when one is close,
    else "<what> found: a, b, c..." (the most similar first)."""
    pool = sorted(set(choices))
    close = closest(word, pool)
    if close is not None:
        return f"did you mean '{close}'?"
    best = nearest(word, pool, n)
    more = "..." if len(pool) > len(best) else ""
    return f"{what} found: {', '.join(best)}{more}" if best else f"no {what} found"
