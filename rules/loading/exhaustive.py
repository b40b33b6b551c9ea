"""Do a function's equations cover every term of its parameter sort?

The usefulness check of pattern matrices (Maranget, "Warnings for pattern
matching", JFP 2007), specialised to sorted terms: a column has a sort; its
heads are the names sorts and the constructor alternatives that its sort
derives; a metavariable of sort ``T`` in a column of sort ``S`` is a wildcard
when ``S ⊆ T``, is dropped when they are disjoint, and is otherwise expanded
into one row per alternative of ``T`` with that head (an or-pattern), which
keeps the check exact for refinement sorts.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

from calcscout.rules.core.sorts import Grammar
from calcscout.rules.core.spec import AltCon, AltNames, AltSort, PAbs, Pattern, PCon, PMeta, PName

WILD = None  # a wildcard row entry

MAX_DEPTH = 40


@dataclass(frozen=True)
class Witness:
    """An uncovered term shape: a constructor over sub-witnesses, a name, or any term of a sort."""

    head: str  # constructor, or '' for "any term of sort", or '#names' for a name
    sort: str
    args: tuple[Witness, ...] = ()
    binders: tuple[tuple[str, ...], ...] = ()


def missing_case(g: Grammar, sort: str, patterns: Sequence[Pattern]) -> Witness | None:
    """A term shape of ``sort`` that no pattern matches, or None when they cover the sort."""
    rows = [[p] for p in patterns]
    w = _useful(g, rows, [sort], 0)
    return w[0] if w is not None else None


def _heads(g: Grammar, sort: str) -> list[tuple[str, tuple[str, ...], tuple[tuple[str, ...], ...]]]:
    """The alternatives a term of ``sort`` can have at its root: (head, arg sorts, binder sorts)."""
    out: list = []
    seen_sorts: set[str] = set()
    todo = [sort]
    while todo:
        s = todo.pop(0)
        if s in seen_sorts:
            continue
        seen_sorts.add(s)
        decl = g.calc.sorts[s]
        for alt in decl.alts:
            if isinstance(alt, AltSort):
                todo.append(alt.sort)
            elif isinstance(alt, AltNames):
                key = ("#names:" + alt.names_sort, (), ())
                if key not in out:
                    out.append(key)
            elif isinstance(alt, AltCon):
                key = (alt.con, tuple(a.sort for a in alt.args),
                       tuple(a.binder_sorts for a in alt.args))
                if key not in out:
                    out.append(key)
    return out


def _useful(g: Grammar, rows: list[list], sorts: list[str], depth: int) -> list[Witness] | None:
    if not sorts:
        return None if rows else []
    if not rows:
        return [Witness("", s) for s in sorts]
    if depth > MAX_DEPTH:
        # Give up looking deeper: report the column as possibly uncovered.
        return [Witness("", s) for s in sorts]
    first, rest = sorts[0], sorts[1:]
    # A row that covers every column covers the whole vector (the base case of
    # usefulness); without it a refinement row that keeps expanding would recurse forever.
    if any(all(_covers_sort(g, e, s) for e, s in zip(r, sorts, strict=True)) for r in rows):
        return None
    # All first entries wildcards for this column sort: skip the column.
    if all(_covers_sort(g, r[0], first) for r in rows):
        w = _useful(g, [r[1:] for r in rows], rest, depth)
        return None if w is None else [Witness("", first), *w]
    for head, arg_sorts, binder_sorts in _heads(g, first):
        k = len(arg_sorts)
        specialised: list[list] = []
        for r in rows:
            p = r[0]
            for expansion in _specialise(g, p, head, arg_sorts, first):
                specialised.append(expansion + r[1:])
        w = _useful(g, specialised, list(arg_sorts) + rest, depth + 1)
        if w is not None:
            if head.startswith("#names:"):
                return [Witness("#names", first), *w]
            return [Witness(head, first, tuple(w[:k]), binder_sorts), *w[k:]]
    return None


def _covers_sort(g: Grammar, p, sort: str) -> bool:
    if p is WILD:
        return True
    if isinstance(p, PMeta):
        return g.included(sort, p.sort)
    return False


def _specialise(g: Grammar, p, head: str, arg_sorts: tuple[str, ...], column: str) -> list[list]:
    k = len(arg_sorts)
    if p is WILD:
        return [[WILD] * k]
    if isinstance(p, PAbs):
        p = p.body
    if isinstance(p, PName):
        return [[]] if head == "#names:" + p.names_sort else []
    if isinstance(p, PCon):
        if p.con != head:
            return []
        return [[a.body if isinstance(a, PAbs) else a for a in p.args]]
    if isinstance(p, PMeta):
        if head.startswith("#names:"):
            ns = head.split(":", 1)[1]
            return [[]] if p.sort in g.names_state.get(ns, frozenset()) else []
        expansions = []
        for h, sub_sorts, _ in _heads(g, p.sort):
            if h != head or len(sub_sorts) != k:
                continue
            if all(g.included(a, b) for a, b in zip(arg_sorts, sub_sorts, strict=True)):
                return [[WILD] * k]
            if all(g.overlap(a, b) for a, b in zip(arg_sorts, sub_sorts, strict=True)):
                expansions.append([PMeta("_", b) for b in sub_sorts])
        return expansions
    return []


def describe(witness: Witness, g: Grammar) -> str:
    """``app(M, N)``: sub-shapes named by their sorts' metavariables, in order."""
    counters: dict[str, int] = {}

    def meta(sort: str) -> str:
        decl = g.calc.sorts.get(sort)
        metas = decl.metas if decl else (sort,)
        i = counters.get(sort, 0)
        counters[sort] = i + 1
        if i < len(metas):
            return metas[i]
        return f"{metas[0]}{i - len(metas) + 1}"

    name_counters: dict[str, int] = {}

    def name_of(ns: str) -> str:
        decl = g.calc.names_sorts[ns]
        i = name_counters.get(ns, 0)
        name_counters[ns] = i + 1
        return decl.canonical_name(i)

    def go(w: Witness) -> str:
        if w.head == "":
            return meta(w.sort)
        if w.head == "#names":
            ns = next((n for n, q in g.names_state.items() if w.sort in q), None)
            return name_of(ns) if ns else "x"
        if not w.args:
            return w.head
        parts = []
        for a, bs in zip(w.args, w.binders, strict=True):
            prefix = "".join(name_of(ns) + "." for ns in bs)
            parts.append(prefix + go(a))
        return f"{w.head}({', '.join(parts)})"

    return go(witness)
