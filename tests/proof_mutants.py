"""Mutants of translation equations, for the soundness tests of the proof engine.

Each mutant changes one equation's right-hand side in the rule file's text, one way at a
time: swap two arguments of a constructor, drop a constructor (keep one of its arguments),
replace a subterm by a name the equation's pattern binds, translate another metavariable of
the pattern, copy an argument over a sibling, change a binder (bind the body under another
binder name of the pattern, or none).  A mutant the loader refuses is
dropped: it is not a rule file a user could check.
"""

from __future__ import annotations

import re
from collections.abc import Iterator
from dataclasses import dataclass

EQUATION = re.compile(r"^(\s*)([A-Za-z_][\w']*)\((.*)\)\s*=\s*(.+?)\s*(#.*)?$")
TOKEN = re.compile(r"[A-Za-z_][\w']*|[().,]")


@dataclass
class Node:
    head: str
    args: list[Arg] | None  # None: a bare identifier


@dataclass
class Arg:
    binders: list[str]
    body: Node


def parse(text: str) -> Node:
    toks = TOKEN.findall(text)
    pos = 0

    def term() -> Node:
        nonlocal pos
        head = toks[pos]
        pos += 1
        if pos < len(toks) and toks[pos] == "(":
            pos += 1
            args = []
            if toks[pos] != ")":
                while True:
                    args.append(arg())
                    if toks[pos] == ",":
                        pos += 1
                        continue
                    break
            assert toks[pos] == ")"
            pos += 1
            return Node(head, args)
        return Node(head, None)

    def arg() -> Arg:
        nonlocal pos
        binders = []
        while pos + 1 < len(toks) and toks[pos + 1] == ".":
            binders.append(toks[pos])
            pos += 2
        return Arg(binders, term())

    out = term()
    assert pos == len(toks), text
    return out


def show(n: Node) -> str:
    if n.args is None:
        return n.head
    return f"{n.head}({', '.join(''.join(b + '.' for b in a.binders) + show(a.body) for a in n.args)})"


def _places(n: Node, path: tuple[int, ...] = ()) -> Iterator[tuple[tuple[int, ...], Node]]:
    yield path, n
    for i, a in enumerate(n.args or ()):
        yield from _places(a.body, (*path, i))


def _replace(n: Node, path: tuple[int, ...], new: Node | Arg) -> Node:
    if not path:
        assert isinstance(new, Node)
        return new
    args = list(n.args or [])
    i = path[0]
    if len(path) == 1 and isinstance(new, Arg):
        args[i] = new
    else:
        args[i] = Arg(args[i].binders, _replace(args[i].body, path[1:], new))
    return Node(n.head, args)


def _get(n: Node, path: tuple[int, ...]) -> Arg:
    for i in path[:-1]:
        n = (n.args or [])[i].body
    return (n.args or [])[path[-1]]


def mutate_rhs(rhs: str, names: list[str], metas: list[str] = ()) -> Iterator[tuple[str, str]]:
    """(kind, mutated right-hand side) for every mutation of ``rhs``."""
    tree = parse(rhs)
    seen = {rhs}
    for path, n in list(_places(tree)):
        args = n.args or []
        plain = [i for i, a in enumerate(args) if not a.binders]
        for i in plain:
            for j in plain:
                if i < j and show(args[i].body) != show(args[j].body):
                    swapped = list(args)
                    swapped[i], swapped[j] = args[j], args[i]
                    yield from _once("swap", show(_replace(tree, path, Node(n.head, swapped))),
                                     seen)
        for a in args:
            if not a.binders and (path or a.body.args is not None):
                yield from _once("drop", show(_replace(tree, path, a.body)), seen)
        if n.args is None and n.head in metas:  # a call's argument: another metavariable
            for m in metas:
                if m != n.head:
                    yield from _once("argument", show(_replace(tree, path, Node(m, None))),
                                     seen)
        for i in plain:  # an argument replaced by a copy of a sibling
            for j in plain:
                if i != j and show(args[i].body) != show(args[j].body):
                    copied = list(args)
                    copied[i] = args[j]
                    yield from _once("copy", show(_replace(tree, path, Node(n.head, copied))),
                                     seen)
        if path and n.args is not None:
            for x in names:
                yield from _once("name", show(_replace(tree, path, Node(x, None))), seen)
        for i, a in enumerate(args):
            if a.binders:
                yield from _once("binder", show(_replace(tree, (*path, i),
                                                         Arg([], a.body))), seen)
                for x in names:
                    if x not in a.binders:
                        yield from _once("binder", show(_replace(
                            tree, (*path, i), Arg([x] + a.binders[1:], a.body))), seen)


def _once(kind: str, text: str, seen: set[str]) -> Iterator[tuple[str, str]]:
    if text not in seen:
        seen.add(text)
        yield kind, text


def mutants(source: str) -> Iterator[tuple[str, str, str]]:
    """(description, kind, mutated file text) for every mutant of every equation."""
    lines = source.split("\n")
    for k, line in enumerate(lines):
        m = EQUATION.match(line)
        if m is None or "->" in line or ":" in m.group(3):
            continue
        indent, fn, pattern, rhs, comment = m.groups()
        try:
            parse(rhs)
        except (AssertionError, IndexError):
            continue
        names = sorted(set(re.findall(r"\b([a-z][\w']*)\b(?!\s*\()", pattern)))
        metas = sorted(set(re.findall(r"\b([A-Z][\w']*)\b(?!\s*\()", pattern)))
        for kind, new in mutate_rhs(rhs, names, metas):
            text = "\n".join(lines[:k] + [f"{indent}{fn}({pattern}) = {new}"] + lines[k + 1:])
            yield f"line {k + 1}: {fn}({pattern}) = {new}", kind, text
