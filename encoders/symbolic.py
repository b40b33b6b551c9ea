"""Symbolic object terms: terms whose parts are chosen by solver variables.

A symbolic term is a leaf (a name), a node (a constructor over symbolic
arguments) or a choice (one term per guard; the guards are z3 formulas of
which exactly one holds wherever the choice is used).  Everything is
hash-consed in a :class:`Store`, so a function evaluated over symbolic terms
and memoised by identity sees each shared part once, and a round trip that
rebuilds its input returns the very same object (SMT-NOTES.md).

Binders are *named* here, not de Bruijn indices: a binder of the encoded
terms is named after its slot, a fresh binder of a translation after the call
that made it.  Those names are unique along every path of a term, so moving a
subterm under other binders (what a translation does all the time) needs no
shifting, and substitution cannot capture.  α-equivalence is decided by
:meth:`Store.eq` with a renaming of the binder names that differ.

Formulas are z3 ``BoolRef`` or the Python constants ``True`` / ``False``,
which the helpers below fold away.
"""

from __future__ import annotations

import time
from collections.abc import Iterable, Sequence

import z3

from calcscout.rules.core.errors import EncodingError
from calcscout.rules.core.sorts import Grammar, State, grammar
from calcscout.rules.core.spec import Calculus

Formula = "z3.BoolRef | bool"


class Sym:
    __slots__ = ("__weakref__",)


class SLeaf(Sym):
    """A name: a user's free name, or an internal binder name ``#ns:...``."""

    __slots__ = ("name",)

    def __init__(self, name: str):
        self.name = name

    def __repr__(self) -> str:
        return self.name


class SNode(Sym):
    """``con(args)``; ``bnames[i]`` are the names argument ``i`` binds (outermost first)."""

    __slots__ = ("con", "args", "bnames")

    def __init__(self, con: str, args: tuple[Sym, ...], bnames: tuple[tuple[str, ...], ...]):
        self.con = con
        self.args = args
        self.bnames = bnames

    def __repr__(self) -> str:
        if not self.args:
            return self.con
        parts = [("".join(n + "." for n in b) + repr(a)) for a, b in zip(self.args, self.bnames,
                                                                         strict=True)]
        return f"{self.con}({', '.join(parts)})"


class SChoice(Sym):
    """One of ``branches``: the one whose guard holds."""

    __slots__ = ("guards", "branches")

    def __init__(self, guards: tuple, branches: tuple[Sym, ...]):
        self.guards = guards
        self.branches = branches

    def __repr__(self) -> str:
        return "{" + " | ".join(f"{g}: {b!r}" for g, b in zip(self.guards, self.branches,
                                                              strict=True)) + "}"


UNDEFINED_CON = "#undefined"
#: What a translation gives where an equation lets a bound name escape (the rewriting engine
#: stops there with an error, as where no equation matches, :data:`UNDEFINED_CON`).
FAULT_CON = "#fault"


# ---------------------------------------------------------------- formulas


# Constants are Python's True and False throughout (z3's own constants are never made
# here), so these tests are identity checks: asking z3 costs a call into the library.
def is_true(f) -> bool:
    return f is True


def is_false(f) -> bool:
    return f is False


def f_and(xs: Iterable) -> Formula:
    out = []
    for x in xs:
        if is_false(x):
            return False
        if not is_true(x):
            out.append(x)
    if not out:
        return True
    return out[0] if len(out) == 1 else _connect(z3.Z3_mk_and, out)


def f_or(xs: Iterable) -> Formula:
    out = []
    for x in xs:
        if is_true(x):
            return True
        if not is_false(x):
            out.append(x)
    if not out:
        return False
    return out[0] if len(out) == 1 else _connect(z3.Z3_mk_or, out)


def _connect(make, xs: list) -> z3.BoolRef:
    """``And``/``Or`` of formulas known to be Boolean and of one context, made by the C API
    directly: z3.And and z3.Or check and coerce every argument, which cost most of the time
    of building an encoding (tests/bench/bench_smt.py)."""
    ctx = xs[0].ctx
    arr = (z3.Ast * len(xs))(*[x.as_ast() for x in xs])
    return z3.BoolRef(make(ctx.ref(), len(xs), arr), ctx)


def f_not(x) -> Formula:
    if x is True:
        return False
    if x is False:
        return True
    return z3.Not(x)


def as_z3(f, ctx: z3.Context) -> z3.BoolRef:
    if f is True or f is False:
        return z3.BoolVal(f, ctx)
    return f


# ---------------------------------------------------------------- the store


class Budget(Exception):
    """The encoding grew past its budget of symbolic objects."""


class TimeBudget(Budget):
    """Building the encoding took longer than its time budget (``--timeout``)."""


class Store:
    """Interns symbolic terms and memoises the functions over them.

    ``budget`` bounds the number of objects and memo entries (the memory of
    an encoding); passing it raises :class:`Budget`.
    """

    def __init__(self, budget: int = 4_000_000):
        self._table: dict[tuple, Sym] = {}
        self._eq: dict[tuple, Formula] = {}
        self._mem: dict[tuple, Formula] = {}
        self._state: dict[tuple, State | None] = {}
        self._occ: dict[tuple, Formula] = {}
        self._subst: dict[tuple, Sym] = {}
        self.budget = budget
        #: when building must stop (``time.monotonic()``), None for no limit: set by the
        #: solver loop for each size, so that building is bounded as each query is
        self.deadline: float | None = None
        self._ticks = 0
        self._faulty: dict[int, Formula] = {}
        self.undefined = self.node(UNDEFINED_CON, ())
        self.fault = self.node(FAULT_CON, ())

    def size(self) -> int:
        return (len(self._table) + len(self._eq) + len(self._mem) + len(self._occ)
                + len(self._subst) + len(self._faulty))

    def check_budget(self) -> None:
        if self.size() > self.budget:
            raise Budget(self.size())
        if self.deadline is not None and time.monotonic() > self.deadline:
            raise TimeBudget(self.size())

    def tick(self) -> None:
        """A cheap check of both budgets every 1,024 memo entries, for the functions that
        fill memo tables without interning new terms (``eq`` between two choice-laden terms
        can make millions of entries)."""
        self._ticks += 1
        if not self._ticks & 0x3FF:
            self.check_budget()

    # ------------------------------------------------------------ building

    def leaf(self, name: str) -> SLeaf:
        key = ("l", name)
        got = self._table.get(key)
        if got is None:
            got = self._table[key] = SLeaf(name)
        return got  # type: ignore[return-value]

    def node(self, con: str, args: Sequence[Sym],
             bnames: Sequence[tuple[str, ...]] | None = None) -> SNode:
        args = tuple(args)
        bn = tuple(bnames) if bnames is not None else ((),) * len(args)
        key = ("n", con, bn, *map(id, args))
        got = self._table.get(key)
        if got is None:
            got = self._table[key] = SNode(con, args, bn)
            if not len(self._table) & 0xFFF:  # every 4,096 new nodes: cheap, and in time
                self.check_budget()
        return got  # type: ignore[return-value]

    def choice(self, guards: Sequence, branches: Sequence[Sym]) -> Sym:
        """The term that is ``branches[i]`` where ``guards[i]`` holds.

        A choice whose branches are all one term is that term; a choice among
        nodes of one constructor (and binder names) is that node over choices
        of its arguments, so that equal terms built by different routes are
        the same object.
        """
        gs: list = []
        bs: list[Sym] = []
        for g, b in zip(guards, branches, strict=True):
            if is_false(g) or b is None:
                continue
            if is_true(g):
                return b
            gs.append(g)
            bs.append(b)
        if not bs:
            return self.undefined
        first = bs[0]
        if len(bs) == 1 or all(b is first for b in bs):
            return first
        if isinstance(first, SNode) and all(
            isinstance(b, SNode) and b.con == first.con and b.bnames == first.bnames
            and len(b.args) == len(first.args) for b in bs
        ):
            args = [self.choice(gs, [b.args[i] for b in bs]) for i in range(len(first.args))]
            return self.node(first.con, args, first.bnames)
        key = ("c", *(g.get_id() for g in gs), *map(id, bs))
        got = self._table.get(key)
        if got is None:
            got = self._table[key] = SChoice(tuple(gs), tuple(bs))
        return got

    # ------------------------------------------------------------ sorts

    def state(self, t: Sym, calc: Calculus) -> State | None:
        """The sorts ``t`` belongs to in ``calc`` when the solver's choices cannot change
        them; None when they can."""
        key = (id(t), calc.name)
        if key in self._state:
            return self._state[key]
        g = grammar(calc)
        st: State | None
        if isinstance(t, SLeaf):
            st = g.name_state(t.name)
        elif isinstance(t, SNode):
            shape = calc.shapes.get(t.con)
            if shape is None or tuple(len(b) for b in t.bnames) != shape.binders:
                st = frozenset()
            else:
                kids = [self.state(a, calc) for a in t.args]
                st = None if any(k is None for k in kids) else g.delta(t.con, tuple(kids))
        else:
            assert isinstance(t, SChoice)
            kids = [self.state(b, calc) for b in t.branches]
            st = kids[0] if kids[0] is not None and all(k == kids[0] for k in kids) else None
        self._state[key] = st
        return st

    def possible(self, t: Sym, calc: Calculus) -> frozenset | None:
        """Every state ``t`` may have whatever the choices (None: too many to list)."""
        st = self.state(t, calc)
        if st is not None:
            return frozenset((st,))
        key = ("p", id(t), calc.name)
        if key in self._state:
            return self._state[key]  # type: ignore[return-value]
        out: frozenset | None
        if isinstance(t, SChoice):
            acc: set = set()
            out = None
            for b in t.branches:
                got = self.possible(b, calc)
                if got is None:
                    break
                acc |= got
            else:
                out = frozenset(acc)
        else:
            assert isinstance(t, SNode)
            kids = [self.possible(a, calc) for a in t.args]
            out = None
            if all(k is not None for k in kids) and _product_size(kids) <= 64:
                import itertools

                g = grammar(calc)
                out = frozenset(g.delta(t.con, combo) for combo in itertools.product(*kids))
        self._state[key] = out  # type: ignore[assignment]
        return out

    def member(self, t: Sym, sort: str, calc: Calculus) -> Formula:
        """``t : sort`` as a formula."""
        st = self.state(t, calc)
        if st is not None:
            return sort in st
        poss = self.possible(t, calc)
        if poss is not None and (all(sort in q for q in poss) or not any(sort in q for q in poss)):
            return all(sort in q for q in poss)
        key = (id(t), sort, calc.name)
        got = self._mem.get(key)
        if got is not None:
            return got
        if isinstance(t, SChoice):
            out = f_or(f_and([g, self.member(b, sort, calc)])
                       for g, b in zip(t.guards, t.branches, strict=True))
        else:
            assert isinstance(t, SNode)
            g: Grammar = grammar(calc)
            alts = [a for owner, a in g.alts.get(t.con, ()) if sort in g.supers[owner]
                    and len(a) == len(t.args)]
            out = f_or(f_and(self.member(arg, s, calc) for arg, s in zip(t.args, a, strict=True))
                       for a in alts)
        self.tick()
        self._mem[key] = out
        return out

    # ------------------------------------------------------------ equality

    def eq(self, a: Sym, b: Sym, rho: tuple = ()) -> Formula:
        """α-equality of ``a`` and ``b``; ``rho`` pairs binder names of ``a`` with the
        differently named binders of ``b`` that they correspond to."""
        if a is b and not rho:
            return True
        key = (id(a), id(b), rho)
        got = self._eq.get(key)
        if got is not None:
            return got
        out: Formula
        if isinstance(a, SChoice):
            if isinstance(b, SChoice) and len(a.guards) == len(b.guards) and all(
                    x.eq(y) for x, y in zip(a.guards, b.guards, strict=True)):
                out = f_or(f_and([g, self.eq(x, y, rho)])
                           for g, x, y in zip(a.guards, a.branches, b.branches, strict=True))
            else:
                out = f_or(f_and([g, self.eq(x, b, rho)])
                           for g, x in zip(a.guards, a.branches, strict=True))
        elif isinstance(b, SChoice):
            out = f_or(f_and([g, self.eq(a, y, rho)])
                       for g, y in zip(b.guards, b.branches, strict=True))
        elif isinstance(a, SLeaf):
            out = isinstance(b, SLeaf) and _leaf_eq(a.name, b.name, rho)
        elif isinstance(b, SLeaf):
            out = False
        else:
            assert isinstance(a, SNode) and isinstance(b, SNode)
            if a.con != b.con or len(a.args) != len(b.args) or any(
                    len(x) != len(y) for x, y in zip(a.bnames, b.bnames, strict=True)):
                out = False
            else:
                parts = []
                for x, y, nx, ny in zip(a.args, b.args, a.bnames, b.bnames, strict=True):
                    parts.append(self.eq(x, y, _extend(rho, nx, ny)))
                    if is_false(parts[-1]):
                        break
                out = f_and(parts)
        self.tick()
        self._eq[key] = out
        return out

    # ------------------------------------------------------------ names

    def occurs(self, t: Sym, name: str) -> Formula:
        """Whether ``name`` occurs free in ``t``."""
        key = (id(t), name)
        got = self._occ.get(key)
        if got is not None:
            return got
        if isinstance(t, SLeaf):
            out: Formula = t.name == name
        elif isinstance(t, SNode):
            out = f_or(self.occurs(a, name) for a, bn in zip(t.args, t.bnames, strict=True)
                       if name not in bn)
        else:
            assert isinstance(t, SChoice)
            out = f_or(f_and([g, self.occurs(b, name)])
                       for g, b in zip(t.guards, t.branches, strict=True))
        self.tick()
        self._occ[key] = out
        return out

    def faulty(self, t: Sym) -> Formula:
        """Whether ``t`` holds :attr:`undefined` or :attr:`fault` somewhere: a translation
        failed at run time on the way to it."""
        got = self._faulty.get(id(t))
        if got is not None:
            return got
        out: Formula
        if isinstance(t, SLeaf):
            out = False
        elif isinstance(t, SNode):
            out = t is self.undefined or t is self.fault or f_or(self.faulty(a) for a in t.args)
        else:
            assert isinstance(t, SChoice)
            out = f_or(f_and([g, self.faulty(b)]) for g, b in zip(t.guards, t.branches,
                                                                  strict=True))
        self._faulty[id(t)] = out
        return out

    def subst(self, t: Sym, mapping: tuple[tuple[str, Sym], ...]) -> Sym:
        """Simultaneous substitution of names.  Binder names are unique along every
        path, so nothing is captured (see the module docstring)."""
        if not mapping:
            return t
        key = (id(t), tuple((n, id(v)) for n, v in mapping))
        got = self._subst.get(key)
        if got is not None:
            return got
        if isinstance(t, SLeaf):
            out: Sym = next((v for n, v in mapping if n == t.name), t)
        elif isinstance(t, SNode):
            args = []
            for a, bn in zip(t.args, t.bnames, strict=True):
                inner = tuple((n, v) for n, v in mapping if n not in bn) if bn else mapping
                args.append(self.subst(a, inner))
            out = self.node(t.con, args, t.bnames)
        else:
            assert isinstance(t, SChoice)
            out = self.choice(t.guards, [self.subst(b, mapping) for b in t.branches])
        self._subst[key] = out
        return out


def _product_size(kids) -> int:
    n = 1
    for k in kids:
        n *= len(k)
    return n


def _leaf_eq(x: str, y: str, rho: tuple) -> bool:
    for p, q in rho:
        if p == x or q == y:
            return p == x and q == y
    return x == y


def _extend(rho: tuple, nx: tuple[str, ...], ny: tuple[str, ...]) -> tuple:
    if not nx:
        return rho
    out = [(p, q) for p, q in rho if p not in nx and q not in ny]
    out.extend((p, q) for p, q in zip(nx, ny, strict=True) if p != q)
    return tuple(sorted(out))


# ---------------------------------------------------------------- models


def evaluate(t: Sym, model: z3.ModelRef, memo: dict | None = None):
    """The concrete named term ``t`` is in ``model``: nested ``(con, args, bnames)``
    tuples with names as strings."""
    memo = {} if memo is None else memo
    got = memo.get(id(t))
    if got is not None:
        return got
    if isinstance(t, SLeaf):
        out = t.name
    elif isinstance(t, SNode):
        out = (t.con, tuple(evaluate(a, model, memo) for a in t.args), t.bnames)
    else:
        assert isinstance(t, SChoice)
        out = None
        for g, b in zip(t.guards, t.branches, strict=True):
            if z3.is_true(model.eval(g, model_completion=True)):
                out = evaluate(b, model, memo)
                break
        if out is None:
            raise EncodingError("internal error: no branch of a symbolic choice holds in the "
                                "model (a bug in calcscout's encoding)")
    memo[id(t)] = out
    return out


def to_term(value):
    """A value of :func:`evaluate` as an interned locally nameless term."""
    from calcscout.rules.core.terms import close, name, node

    if isinstance(value, str):
        return name(value)
    con, args, bnames = value
    return node(con, [close(to_term(a), list(bn)) if bn else to_term(a)
                      for a, bn in zip(args, bnames, strict=True)],
                [len(bn) for bn in bnames])
