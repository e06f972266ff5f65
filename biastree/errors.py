"""biastree's own exception hierarchy.

Every error a user can cause is a ``BiasTreeError``; the CLI turns it into one
clean message per problem and exit status 2.  Anything else is a bug.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any


class BiasTreeError(Exception):
    """Base class of every error biastree raises on purpose."""


def format_path(path: tuple[Any, ...]) -> str:
    """('mirrors', 'm', 'branches', 1, 'ratio') → 'mirrors.m.branches[1].ratio'."""
    out = ""
    for key in path:
        if isinstance(key, int):
            out += f"[{key}]"
        else:
            out += f".{key}" if out else str(key)
    return out


def shown(text: object, limit: int = 40) -> str:
    """A value as it may appear in a one-line message: control characters and
    lone surrogates escaped, and only a short prefix of a long value.

    >>> shown("ab\\x01c")
    'ab\\\\x01c'
    >>> shown("x" * 100, 5)
    'xxxxx… (100 characters)'
    """
    raw = str(text)
    cut = raw[:limit]
    out = "".join(c if c.isprintable() else c.encode("unicode_escape", "backslashreplace").decode("ascii") for c in cut)
    return out if len(raw) <= limit else f"{out}… ({len(raw)} characters)"


MAX_MESSAGE = 400  # characters of one problem's message; the rest is cut


@dataclass(frozen=True)
class Problem:
    """One thing wrong with a plan, with the place it was found."""

    path: str  # key path such as "mirrors.m_top.branches[1].ratio"; "" = whole file
    message: str
    line: int | None = None

    def format(self, source: str | None = None) -> str:
        where = shown(source or "plan", 200)
        if self.line is not None:
            where = f"{where}:{self.line}"
        message = shown(" ".join(self.message.split("\n")), MAX_MESSAGE)
        path = shown(self.path, 120)
        return f"{where}: {path}: {message}" if self.path else f"{where}: {message}"


class PlanError(BiasTreeError):
    """A plan is invalid.  Holds every problem found, not just the first."""

    def __init__(self, problems: list[Problem], source: str | None = None) -> None:
        self.problems = list(problems)
        self.source = source
        super().__init__("\n".join(p.format(source) for p in self.problems))

    def lines(self) -> list[str]:
        return [p.format(self.source) for p in self.problems]


class SolveError(BiasTreeError):
    """The operating point could not be found (e.g. the iteration diverged), or
    the solved result is not physical.  ``path`` is the key path of the plan
    entry it concerns (e.g. ``("mirrors", "m2")``), so the CLI can print
    ``file:line: mirrors.m2: message``."""

    def __init__(self, message: str, path: tuple[Any, ...] = ()) -> None:
        super().__init__(message)
        self.path = tuple(path)


class SimulatorError(BiasTreeError):
    """The external circuit simulator is missing, failed, or returned nonsense."""


class RenderError(BiasTreeError):
    """A diagram could not be rendered (e.g. the Graphviz `dot` program is missing)."""
