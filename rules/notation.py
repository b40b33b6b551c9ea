"""User notations: splitting a notation string into tokens, printing, parsing."""

from __future__ import annotations

import re

_TOKEN = re.compile(r"\s*(?:([A-Za-z_][A-Za-z0-9_]*'*)|([0-9]+)|([()\[\]{},])|([^\sA-Za-z0-9_()\[\]{},]+))")


def notation_tokens(text: str) -> tuple[str, ...]:
    """Split a notation string as LANGUAGE.md §3 says: identifiers, numbers,
    runs of symbol characters, and single brackets, parentheses and commas.

    >>> notation_tokens("\\\\x. M")
    ('\\\\', 'x', '.', 'M')
    >>> notation_tokens("let x = M in N")
    ('let', 'x', '=', 'M', 'in', 'N')
    """
    out: list[str] = []
    pos = 0
    text = text.strip()
    while pos < len(text):
        m = _TOKEN.match(text, pos)
        if m is None or m.end() == pos:
            raise ValueError(f"cannot split notation {text!r} at {pos}")
        out.append(next(g for g in m.groups() if g is not None))
        pos = m.end()
        while pos < len(text) and text[pos].isspace():
            pos += 1
    return tuple(out)
