"""Interned, locally nameless object terms.

Bound names are de Bruijn indices and free names are strings, so two
α-equivalent terms have the same structure; every term is interned, so they
are the same Python object.  Equality is identity and hashing is O(1), which
makes terms cheap keys for memo tables and cheap nodes for networkx graphs.

The intern table lets go of the terms nothing else holds (see :func:`sweep`):
a stream of enumerated terms does not accumulate in memory.

An abstraction argument binding ``k`` names (``x.y.M`` has ``k = 2``) is a
plain body with ``k`` more indices in scope: the last binder is index 0, so in
``x.y.M`` the name ``y`` is 0 and ``x`` is 1 inside ``M``.

>>> t = node("app", (node("lam", (bound(0),), (1,)), name("y")))
>>> t is node("app", (node("lam", (bound(0),), (1,)), name("y")))
True
>>> t.size, t.free
(4, ('y',))
"""

from __future__ import annotations

import itertools
import sys
from collections.abc import Iterable, Mapping, Sequence

sys.setrecursionlimit(max(sys.getrecursionlimit(), 20000))


class Term:
    """Base of the three kinds of terms. Never build one directly."""

    __slots__ = ("size", "free", "loose", "__weakref__")
    size: int
    free: tuple[str, ...]
    loose: int

    def __repr__(self) -> str:
        return f"<{type(self).__name__} {debug_str(self)}>"

    # Interned terms: identity is equality.  Keep the defaults, say so.
    __eq__ = object.__eq__
    __hash__ = object.__hash__

    def __reduce__(self):
        # Pickling (for --jobs) rebuilds through the constructors, so the
        # receiving process interns the term too.
        return (_rebuild, (to_data(self),))


class Name(Term):
    """A free name, spelt as the user wrote it (or an internal fresh name)."""

    __slots__ = ("name",)
    name: str


class Bound(Term):
    """A bound name: a de Bruijn index."""

    __slots__ = ("index",)
    index: int


class Node(Term):
    """A constructor applied to arguments; ``binders[i]`` names bound in arg i."""

    __slots__ = ("con", "args", "binders", "states")
    con: str
    args: tuple[Term, ...]
    binders: tuple[int, ...]
    # The sort automata's memo for this term (rules/core/sorts.py owns it):
    # stored on the term, a side table of weak keys cost a lookup per node.
    states: dict | None


# The intern table is a plain dictionary (a weak-value one cost about 70% of
# enumeration: a weak reference and its callback per term), swept of the terms
# nothing else holds.  Generational, because most terms die young (a stream
# of enumerated terms, the intermediate results of a case): every
# ``_YOUNG`` new entries only the entries made since the last sweep are
# visited; the whole table when it has doubled since the last full sweep.
# So the work per term stays constant, a stream keeps at most ``_YOUNG`` dead
# terms, and in all at most as many dead terms as live ones are kept.
_table: dict[tuple, Term] = {}
_YOUNG = 1 << 11
_FULL_FLOOR = 1 << 16
_old = 0  # entries at the end of the last sweep: the older ones
_young_at = _YOUNG  # the next young sweep
_full_at = _FULL_FLOOR  # the next full sweep
_sweeping = False


def sweep(young: bool = False) -> int:
    """Drop the interned terms that nothing outside the table holds; how many.

    With ``young``, only the entries made since the last sweep are visited.
    Keys are visited newest first: a term is always interned after its
    arguments, so when a dead parent goes, its arguments' counts have dropped
    by the time they are visited, and one pass frees whole dead trees.
    """
    global _sweeping, _old, _young_at, _full_at
    if _sweeping:
        return 0
    _sweeping = True
    try:
        table = _table
        if young:
            keys = list(itertools.islice(reversed(table), max(0, len(table) - _old)))
            keys.reverse()
        else:
            keys = list(table)
        count = sys.getrefcount
        dropped = 0
        while keys:
            key = keys.pop()
            t = table.get(key)
            if t is not None and count(t) <= _DEAD:
                del table[key]
                dropped += 1
            del t
        _old = len(table)
        _young_at = _old + _YOUNG
        if not young:
            _full_at = max(_FULL_FLOOR, 2 * _old)
        return dropped
    finally:
        _sweeping = False


def _collect() -> None:
    sweep(young=len(_table) < _full_at)


def _calibrate() -> int:
    """The reference count :func:`sweep` sees for a term only the table holds
    (measured, since interpreters differ in what a local variable counts)."""
    table = {("probe",): object()}
    keys = list(table)
    key = keys.pop()
    t = table.get(key)
    return sys.getrefcount(t)


_DEAD = _calibrate()


# No sweep from a garbage-collector callback: a signal handler that raises (Ctrl-C,
# SIGTERM stopping a run) while such a callback runs has its exception swallowed by
# the interpreter, and the stop would be lost.  The table is swept as it grows.


def name(text: str) -> Name:
    key = ("n", text)
    got = _table.get(key)
    if got is not None:
        return got
    t = Name.__new__(Name)
    t.name = text
    t.size = 1
    t.free = (text,)
    t.loose = 0
    _table[key] = t
    return t


def bound(index: int) -> Bound:
    key = ("b", index)
    got = _table.get(key)
    if got is not None:
        return got
    if index < 0:
        raise ValueError("a de Bruijn index is never negative")
    t = Bound.__new__(Bound)
    t.index = index
    t.size = 1
    t.free = ()
    t.loose = index + 1
    _table[key] = t
    return t


def node(con: str, args: Sequence[Term] = (), binders: Sequence[int] | None = None) -> Node:
    if type(args) is not tuple:
        args = tuple(args)
    if binders is None:
        binders = (0,) * len(args)
    elif type(binders) is not tuple:
        binders = tuple(binders)
    key = (con, binders, *args)
    got = _table.get(key)
    if got is not None:
        return got
    if len(binders) != len(args):
        raise ValueError(f"{con}: {len(args)} arguments but {len(binders)} binder counts")
    if len(_table) >= _young_at:
        _collect()
    t = _new(Node)
    t.con = con
    t.args = args  # type: ignore[assignment]
    t.binders = binders  # type: ignore[assignment]
    t.states = None
    size = 1
    loose = 0
    free: tuple[str, ...] = ()
    for a, k in zip(args, binders, strict=False):  # lengths checked above
        size += a.size
        if a.loose - k > loose:
            loose = a.loose - k
        if a.free:
            free = a.free if not free else _merge(free, a.free)
    t.size = size
    t.free = free
    t.loose = loose
    _table[key] = t
    return t


_new = object.__new__


def _merge(first: tuple[str, ...], then: tuple[str, ...]) -> tuple[str, ...]:
    seen = set(first)
    extra = tuple(n for n in then if n not in seen)
    return first + extra if extra else first


# ---------------------------------------------------------------- binders


def close(body: Term, names: Sequence[str], depth: int = 0) -> Term:
    """Abstract ``names`` in ``body``: the body of ``names[0]. ... names[-1]. body``.

    ``depth`` is how many binders already stand between the abstraction and
    ``body`` (callers use the default).
    """
    if not names or not any(n in body.free for n in names):
        return _shift(body, len(names), depth) if names else body
    k = len(names)
    index = {n: k - 1 - j for j, n in enumerate(names)}
    return _close(body, index, k, depth)


def _close(t: Term, index: Mapping[str, int], k: int, depth: int) -> Term:
    if isinstance(t, Name):
        j = index.get(t.name)
        return t if j is None else bound(depth + j)
    if isinstance(t, Bound):
        return bound(t.index + k) if t.index >= depth else t
    if not t.free or not any(n in index for n in t.free):
        return _shift(t, k, depth)
    assert isinstance(t, Node)
    return node(
        t.con,
        [_close(a, index, k, depth + b) for a, b in zip(t.args, t.binders, strict=True)],
        t.binders,
    )


def _shift(t: Term, k: int, depth: int) -> Term:
    """Add ``k`` to every index of ``t`` that is loose at ``depth``."""
    if t.loose <= depth or k == 0:
        return t
    if isinstance(t, Bound):
        return bound(t.index + k)
    assert isinstance(t, Node)
    return node(
        t.con,
        [_shift(a, k, depth + b) for a, b in zip(t.args, t.binders, strict=True)],
        t.binders,
    )


def open_body(body: Term, values: Sequence[Term], depth: int = 0) -> Term:
    """Instantiate the ``len(values)`` innermost loose indices of ``body``.

    ``values[j]`` replaces the j-th binder (so the last value is index 0).
    The values must be locally closed; substitution is then capture-free.
    """
    k = len(values)
    if k == 0 or body.loose <= depth:
        return body
    for v in values:
        if v.loose:
            raise ValueError("open_body: a value with loose indices")
    return _open(body, values, k, depth)


def _open(t: Term, values: Sequence[Term], k: int, depth: int) -> Term:
    if t.loose <= depth:
        return t
    if isinstance(t, Bound):
        i = t.index - depth
        if i < k:
            return values[k - 1 - i]
        return bound(t.index - k)
    assert isinstance(t, Node)
    return node(
        t.con,
        [_open(a, values, k, depth + b) for a, b in zip(t.args, t.binders, strict=True)],
        t.binders,
    )


def substitute(t: Term, mapping: Mapping[str, Term]) -> Term:
    """Simultaneous capture-avoiding substitution of free names.

    In locally nameless form bound names are indices, so replacing free names
    by locally closed terms can capture nothing.
    """
    if not mapping or not t.free:
        return t
    for v in mapping.values():
        if v.loose:
            raise ValueError("substitute: a value with loose indices")
    return _subst(t, mapping)


def _subst(t: Term, mapping: Mapping[str, Term]) -> Term:
    if not t.free:
        return t
    if isinstance(t, Name):
        return mapping.get(t.name, t)
    assert isinstance(t, Node)
    if not any(n in mapping for n in t.free):
        return t
    return node(t.con, [_subst(a, mapping) for a in t.args], t.binders)


def rename_free(t: Term, mapping: Mapping[str, str]) -> Term:
    return substitute(t, {old: name(new) for old, new in mapping.items() if old != new})


def fresh_name(avoid: Iterable[str], base: str = "") -> str:
    """An internal name (``#3``, ``#x3``) not in ``avoid``; no user can spell it."""
    taken = set(avoid)
    i = 1
    while True:
        candidate = f"#{base}{i}"
        if candidate not in taken:
            return candidate
        i += 1


def is_internal(text: str) -> bool:
    return text.startswith("#")


# ---------------------------------------------------------------- walking


def subterms(t: Term) -> Iterable[tuple[tuple[int, ...], Term]]:
    """Every subterm with its position (argument indices from the root), preorder.

    Subterms under binders keep their loose indices.
    """
    stack: list[tuple[tuple[int, ...], Term]] = [((), t)]
    while stack:
        pos, s = stack.pop()
        yield pos, s
        if isinstance(s, Node):
            for i in range(len(s.args) - 1, -1, -1):
                stack.append(((*pos, i), s.args[i]))


def debug_str(t: Term) -> str:
    """A calculus-free rendering for reprs and internal errors (indices as ``#i``)."""
    if isinstance(t, Name):
        return t.name
    if isinstance(t, Bound):
        return f"^{t.index}"
    assert isinstance(t, Node)
    if not t.args:
        return t.con
    parts = []
    for a, k in zip(t.args, t.binders, strict=True):
        parts.append("." * k + debug_str(a) if k else debug_str(a))
    return f"{t.con}({', '.join(parts)})"


# ---------------------------------------------------------------- data form


def to_data(t: Term):
    """A plain nested-tuple form (for pickling and JSON-free transport)."""
    if isinstance(t, Name):
        return ("n", t.name)
    if isinstance(t, Bound):
        return ("b", t.index)
    assert isinstance(t, Node)
    return ("c", t.con, t.binders, tuple(to_data(a) for a in t.args))


def from_data(data) -> Term:
    tag = data[0]
    if tag == "n":
        return name(data[1])
    if tag == "b":
        return bound(data[1])
    return node(data[1], [from_data(a) for a in data[3]], data[2])


def _rebuild(data) -> Term:
    return from_data(data)
