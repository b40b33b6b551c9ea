"""The errors a user can cause, with where they happened.

One root, :class:`CalcError`; the command line catches it, prints
:meth:`CalcError.render` and exits 2.  Anything else that escapes is a bug in
calcscout and is reported as one.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

from calcscout.rules.core.spec import Pos


@dataclass
class Problem:
    """One message tied to a place in a file (or to no place: ``pos`` None)."""

    message: str
    pos: Pos | None = None
    hint: str | None = None
    source_line: str | None = None

    def render(self) -> str:
        if self.pos is None or self.pos.line <= 0:
            head = f"error: {self.message}"
            where = f"{self.pos.file}: " if self.pos is not None and self.pos.file else ""
            head = f"{where}{head}"
            return head + (f"\n  hint: {self.hint}" if self.hint else "")
        out = [f"{self.pos}: error: {self.message}"]
        line = self.source_line
        if line is None:
            line = source_line(self.pos.file, self.pos.line)
        if line is not None:
            shown = line.rstrip("\n").replace("\t", " ")
            out.append(f"  {shown}")
            width = 1
            if self.pos.end_column and self.pos.end_column > self.pos.column:
                width = self.pos.end_column - self.pos.column
            out.append("  " + " " * max(self.pos.column - 1, 0) + "^" * min(width, 60))
        if self.hint:
            out.append(f"  hint: {self.hint}")
        return "\n".join(out)


_sources: dict[str, list[str]] = {}


def remember_source(file: str, text: str) -> None:
    """Keep a file's lines so that messages can quote them."""
    _sources[file] = text.splitlines()


def source_line(file: str, line: int) -> str | None:
    lines = _sources.get(file)
    if lines is None or not 1 <= line <= len(lines):
        return None
    return lines[line - 1]


class CalcError(Exception):
    """A mistake in the user's input: exit status 2, never a traceback."""

    exit_code = 2

    def __init__(self, problems: Sequence[Problem] | str, pos: Pos | None = None,
                 hint: str | None = None):
        if isinstance(problems, str):
            problems = [Problem(problems, pos, hint)]
        self.problems = list(problems)
        super().__init__(self.problems[0].message if self.problems else "error")

    def render(self) -> str:
        return "\n".join(p.render() for p in self.problems)


class FileError(CalcError):
    """A rule file cannot be read or does not parse or check."""


class TermError(CalcError):
    """An object term (on the command line) does not parse or does not fit."""


class ClaimError(CalcError):
    """A claim is ill-formed."""


class EncodingError(CalcError):
    """A claim cannot be given to the solver (too large, or of a form it cannot take)."""


class UsageError(CalcError):
    """The command line is wrong."""
