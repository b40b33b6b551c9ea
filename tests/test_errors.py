"""Rendering user errors (rules.errors): the line quoted, the caret under the place."""

from __future__ import annotations

import pytest

from calcscout.rules.core.errors import SHOWN_LINE, Problem
from calcscout.rules.core.spec import Pos


@pytest.mark.parametrize("column", [1, 30, 150, 250, 400, 498, 500])
def test_a_long_line_is_cut_around_the_caret(column: int) -> None:
    """Issue 9, item 17: messages repeated source lines of any length.  Family: what a
    message quotes; checked the caret at the start, middle and end of a 500-character
    line, and a caret wider than what is left (tests/data/bad/long-line.calc for a file,
    cr-line-endings.calc and crlf-line-endings.calc for the line numbers)."""
    line = "".join(chr(ord("a") + i % 26) for i in range(500))
    text = Problem("boom", Pos("f.calc", 1, column, column + 20), source_line=line).render()
    _, shown, caret = text.splitlines()
    assert len(shown) <= SHOWN_LINE + 2 + 6
    at = caret.index("^")
    assert shown[at] == line[column - 1]
    assert shown[at:at + caret.count("^")] == line[column - 1:column - 1 + caret.count("^")]
    assert (column > SHOWN_LINE // 2 + 1) == shown[2:].startswith("...")


def test_a_short_line_is_quoted_whole() -> None:
    text = Problem("boom", Pos("f.calc", 1, 5, 8), source_line="abcdefgh").render()
    assert text.splitlines()[1:] == ["  abcdefgh", "      ^^^"]
