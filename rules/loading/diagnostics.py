"""What the resolvers of a rule file need from the loader: a place to report
problems, "did you mean" hints, and reading a ``bounds`` line.

The loader (:mod:`calcscout.rules.loading.load`) is a :class:`Diagnostics`, and
hands itself as one to the resolvers of patterns, translations and claims, so
that none of them imports the loader that imports them.  Problems are
collected, not raised one by one: a file with several mistakes gets them all
in one run.
"""

from __future__ import annotations

import difflib

from calcscout.rules.core.errors import FileError, Problem
from calcscout.rules.core.spec import Bounds, Pos

BOUND_KEYS = ("size", "steps", "names", "nodes")


class Diagnostics:
    def __init__(self) -> None:
        self.problems: list[Problem] = []

    def error(self, message: str, pos: Pos | None, hint: str | None = None) -> None:
        self.problems.append(Problem(message, pos, hint))

    def fail_if_problems(self) -> None:
        if self.problems:
            raise FileError(self.problems)

    @staticmethod
    def suggest(word: str, options) -> str | None:
        close = difflib.get_close_matches(word, list(options), n=1)
        return f"did you mean {close[0]}?" if close else None

    def bounds(self, items: list[tuple[str, int, Pos]]) -> Bounds:
        """The bounds of a ``bounds`` or ``within`` line; a bad entry is a problem."""
        values: dict[str, int] = {}
        for key, value, pos in items:
            if key not in BOUND_KEYS:
                self.error(f"unknown bound {key!r}", pos,
                           hint="the bounds are size, steps, names and nodes")
                continue
            least = 0 if key == "names" else 1
            if value < least:
                self.error(f"the bound {key} must be at least {least}, not {value}", pos)
                continue
            values[key] = value
        return Bounds(**values)
