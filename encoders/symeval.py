"""Translations and rules evaluated in Python over symbolic terms.

No recursive function goes to the solver (SMT-NOTES.md): a translation's
equations are tried in order on a symbolic term exactly as
:mod:`calcscout.rules.rewriting.translate` tries them on a concrete one.  Where a pattern needs
to see inside a choice, the call is split over the choice's branches; where a
match depends on a formula (a repeated metavariable), the first-match order
becomes a choice between this equation and the later ones.  Results are
memoised by the identity of the (hash-consed) arguments.
"""

from __future__ import annotations

from collections.abc import Sequence

from calcscout.encoders.symbolic import (
    SChoice,
    SLeaf,
    SNode,
    Store,
    Sym,
    _extend,
    f_and,
    f_not,
    f_or,
    is_false,
)
from calcscout.rules.core.errors import EncodingError
from calcscout.rules.core.spec import (
    Calculus,
    PAbs,
    Pattern,
    PCall,
    PCon,
    PMeta,
    PName,
    PPlug,
    PSubst,
    Rule,
    Spec,
    Translation,
)

_FAIL = ("fail",)


class _Split(Exception):
    def __init__(self, path: tuple[int, ...]):
        self.path = path


class Matcher:
    """Nominal matching of spec patterns against symbolic terms."""

    def __init__(self, store: Store, calc: Calculus):
        self.store = store
        self.calc = calc

    def match(self, p: Pattern, t: Sym) -> tuple | None:
        """``(binding, conditions)`` or None; raises :class:`_Split` with the path of a
        choice that must be split first."""
        b: dict[str, object] = {}
        conds: list = []
        if not self._match(p, t, b, conds, ()):
            return None
        return b, conds

    def _needs_split(self, t: Sym, path: tuple[int, ...]):
        if isinstance(t, SChoice):
            raise _Split(path)
        assert isinstance(t, SNode)
        for i, a in enumerate(t.args):
            if self.store.state(a, self.calc) is None:
                self._needs_split(a, (*path, i))
        raise AssertionError("a node of unknown state with no undecided argument")

    def _match(self, p: Pattern, t: Sym, b: dict, conds: list, path) -> bool:
        if isinstance(p, PMeta):
            sort = self.calc.sorts.get(p.sort)
            if sort is not None and sort.is_context:
                raise EncodingError(f"context metavariable {p.name} in a pattern: the SMT engine "
                                    "does not encode contexts", p.pos)
            old = b.get(p.name)
            if old is not None:
                conds.append(self.store.eq(old, t))  # type: ignore[arg-type]
                return True
            if p.sort in self.calc.names_sorts:
                return self._match(PName(p.name, p.sort, p.pos), t, b, conds, path)
            poss = self.store.possible(t, self.calc)
            inside = None if poss is None else {p.sort in q for q in poss}
            if inside is None or len(inside) != 1:
                self._needs_split(t, path)
            if inside == {False}:
                return False
            b[p.name] = t
            return True
        if isinstance(p, PName):
            if isinstance(t, SChoice):
                raise _Split(path)
            if not isinstance(t, SLeaf) or self.calc.names_sort_of(t.name) != p.names_sort:
                return False
            old = b.get(p.name)
            if old is not None:
                return old == t.name
            b[p.name] = t.name
            return True
        if isinstance(p, PCon):
            if isinstance(t, SChoice):
                raise _Split(path)
            if not isinstance(t, SNode) or t.con != p.con or len(t.args) != len(p.args):
                return False
            for i, (a, arg, bn) in enumerate(zip(p.args, t.args, t.bnames, strict=True)):
                if isinstance(a, PAbs):
                    if len(a.names) != len(bn):
                        return False
                    for n, real in zip(a.names, bn, strict=True):
                        if n in b:
                            raise EncodingError("a binder name used twice in one pattern: the "
                                                "SMT engine does not encode it", a.pos)
                        b[n] = real
                    body = a.body
                else:
                    if bn:
                        return False
                    body = a
                if not self._match(body, arg, b, conds, (*path, i)):
                    return False
            return True
        if isinstance(p, PPlug):
            raise EncodingError("a context in a pattern (E[...]): the SMT engine does not "
                                "encode contexts", p.pos)
        raise EncodingError(f"pattern {type(p).__name__} cannot be matched", getattr(p, "pos", None))


def _at(t: Sym, path: Sequence[int]) -> Sym:
    for i in path:
        assert isinstance(t, SNode)
        t = t.args[i]
    return t


def _replace(store: Store, t: Sym, path: Sequence[int], new: Sym) -> Sym:
    if not path:
        return new
    assert isinstance(t, SNode)
    i = path[0]
    args = list(t.args)
    args[i] = _replace(store, args[i], path[1:], new)
    return store.node(t.con, args, t.bnames)


class Builder:
    """Instantiates right-hand sides in the named world: a binder the left-hand side
    bound keeps its name, a fresh one gets a new name made once per call."""

    def __init__(self, store: Store, calc: Calculus, tag: str):
        self.store = store
        self.calc = calc
        self.tag = tag
        self.counter = 0

    def fresh(self, ns: str) -> str:
        self.counter += 1
        return f"#{ns}:{self.tag}{self.counter}"

    def build(self, p: Pattern, b: dict, call=None) -> Sym:
        s = self.store
        if isinstance(p, PMeta):
            v = b.get(p.name)
            if v is None:
                raise EncodingError(f"metavariable {p.name} is not bound", p.pos)
            return s.leaf(v) if isinstance(v, str) else v  # type: ignore[return-value]
        if isinstance(p, PName):
            v = b.get(p.name)
            if not isinstance(v, str):
                raise EncodingError(f"name {p.name} is not bound", p.pos)
            return s.leaf(v)
        if isinstance(p, PCon):
            shape = self.calc.shapes.get(p.con)
            args: list[Sym] = []
            bnames: list[tuple[str, ...]] = []
            for i, a in enumerate(p.args):
                if isinstance(a, PAbs):
                    inner = dict(b)
                    names = []
                    sorts = shape.binder_sorts[i] if shape is not None else ("",) * len(a.names)
                    for n, ns in zip(a.names, sorts, strict=True):
                        v = b.get(n)
                        if not isinstance(v, str):
                            v = self.fresh(ns)
                            inner[n] = v
                        names.append(v)
                    args.append(self.build(a.body, inner, call))
                    bnames.append(tuple(names))
                else:
                    args.append(self.build(a, b, call))
                    bnames.append(())
            return s.node(p.con, args, bnames)
        if isinstance(p, PSubst):
            body = self.build(p.body, b, call)
            mapping = []
            for x, q in p.pairs:
                v = b.get(x.name)
                if not isinstance(v, str):
                    raise EncodingError(f"substitution for {x.name}, which is not a bound name",
                                        p.pos)
                mapping.append((v, self.build(q, b, call)))
            return s.subst(body, tuple(mapping))
        if isinstance(p, PCall):
            if call is None:
                raise EncodingError(f"call of {p.fn} where no function is available", p.pos)
            return call(p.fn, [self.build(a, b, call) for a in p.args])
        if isinstance(p, PPlug):
            raise EncodingError("plugging a context (E[...]) on a right-hand side: the SMT "
                                "engine does not encode contexts", p.pos)
        raise EncodingError(f"cannot build {type(p).__name__}", getattr(p, "pos", None))


class SymTranslator:
    """One translation's functions over symbolic terms."""

    def __init__(self, store: Store, spec: Spec, tr: Translation):
        if tr.normalize is not None:
            raise EncodingError(f"translation {tr.name} ends with `then normalize {tr.normalize}`"
                                ": the SMT engine leaves it to enumeration", tr.pos)
        self.store = store
        self.tr = tr
        self.source = spec.calculi[tr.source]
        self.target = spec.calculi[tr.target]
        self.matcher = Matcher(store, self.source)
        self.builder = Builder(store, self.target, f"{tr.name}.")
        self.by_fn = {fn: tr.equations_of(fn) for fn in tr.signatures}
        # per equation, the pattern's binder names its right-hand side may let escape
        self.drops = {id(eq): _dropped(eq.pattern, eq.rhs) for eqs in self.by_fn.values()
                      for eq in eqs}
        self.memo: dict[tuple, Sym] = {}

    def apply(self, fn: str, t: Sym, extra: Sequence[Sym] = ()) -> Sym:
        key = (fn, id(t), *map(id, extra))
        got = self.memo.get(key)
        if got is not None:
            return got
        if isinstance(t, SChoice):
            out = self.store.choice(t.guards, [self.apply(fn, x, extra) for x in t.branches])
        else:
            out = self._from(fn, t, tuple(extra), 0)
        self.memo[key] = out
        if len(self.memo) % 4096 == 0:
            self.store.check_budget()
        return out

    def _from(self, fn: str, t: Sym, extra: tuple, start: int) -> Sym:
        eqs = self.by_fn[fn]
        for j in range(start, len(eqs)):
            eq = eqs[j]
            try:
                got = self.matcher.match(eq.pattern, t)
            except _Split as sp:
                c = _at(t, sp.path)
                assert isinstance(c, SChoice)
                return self.store.choice(c.guards, [
                    self.apply(fn, _replace(self.store, t, sp.path, x), extra)
                    for x in c.branches])
            if got is None:
                continue
            b, conds = got
            for p, v in zip(eq.extra, extra, strict=True):
                b[p.name] = v
            rhs = self.builder.build(eq.rhs, b, self._call)
            drops = self.drops[id(eq)]
            if drops:  # where a bound name reaches the result, the translation stops
                esc = f_or(self.store.occurs(rhs, b[n]) for n in drops  # type: ignore[arg-type]
                           if isinstance(b.get(n), str))
                rhs = self.store.choice([esc, f_not(esc)], [self.store.fault, rhs])
            cond = f_and(conds)
            if is_false(cond):
                continue
            if cond is True:
                return rhs
            return self.store.choice([cond, f_not(cond)], [rhs, self._from(fn, t, extra, j + 1)])
        return self.store.undefined

    def _call(self, fn: str, args: Sequence[Sym]) -> Sym:
        return self.apply(fn, args[0], args[1:])


class StepBudget(Exception):
    """:meth:`SymRules.step` expanded more pairs of terms than its limit."""


class SymRules:
    """One calculus's rules (or one group of them) over symbolic terms."""

    def __init__(self, store: Store, calc: Calculus, group: str | None):
        if calc.reduce_in is not None:
            raise EncodingError(f"calculus {calc.name} reduces in context {calc.reduce_in}: the "
                                "SMT engine encodes only `reduce anywhere`", calc.pos)
        self.store = store
        self.calc = calc
        self.rules = calc.rules_of(group)
        self.matcher = Matcher(store, calc)
        self.builder = Builder(store, calc, f"r.{calc.name}.")
        self._root: dict[tuple, tuple] = {}
        self._red: dict[tuple, object] = {}
        # pairs (a, b) :meth:`step` has expanded, and how many it may before it gives up
        # (:class:`StepBudget`): between two choice-laden terms their number grows with the
        # product of the branches, tenfold a size (tests/bench/bench_smt.py)
        self.work = 0
        self.limit: int | None = None
        for r in self.rules:
            _check_rule(r)

    def root_step(self, rule: Rule, t: Sym) -> tuple:
        """``(applies, result)``: whether ``rule`` applies at the root of ``t``, and its
        contractum where it does."""
        key = (rule.name, id(t))
        got = self._root.get(key)
        if got is not None:
            return got
        s = self.store
        if isinstance(t, SChoice):
            parts = [self.root_step(rule, x) for x in t.branches]
            out = (f_or(f_and([g, v]) for g, (v, _) in zip(t.guards, parts, strict=True)),
                   s.choice(t.guards, [r for _, r in parts]))
        else:
            try:
                got2 = self.matcher.match(rule.lhs, t)
            except _Split as sp:
                c = _at(t, sp.path)
                assert isinstance(c, SChoice)
                parts = [self.root_step(rule, _replace(s, t, sp.path, x)) for x in c.branches]
                out = (f_or(f_and([g, v]) for g, (v, _) in zip(c.guards, parts, strict=True)),
                       s.choice(c.guards, [r for _, r in parts]))
                self._root[key] = out
                return out
            if got2 is None:
                out = (False, s.undefined)
            else:
                b, conds = got2
                for cond in rule.conditions:
                    name = b.get(cond.name.name)
                    if not isinstance(name, str):
                        raise EncodingError(f"rule {rule.name}: {cond.name.name} is not bound "
                                            "on the left", cond.pos)
                    occ = self._free_in(cond.term, b, name)
                    conds.append(f_not(occ) if cond.kind == "fresh" else occ)
                out = (f_and(conds), self.builder.build(rule.rhs, b))
        self._root[key] = out
        return out

    def _free_in(self, p: Pattern, b: dict, name: str):
        s = self.store
        if isinstance(p, PMeta | PName):
            v = b[p.name]
            return (v == name) if isinstance(v, str) else s.occurs(v, name)  # type: ignore[arg-type]
        if isinstance(p, PCon):
            return f_or(self._free_in(a, b, name) for a in p.args)
        if isinstance(p, PAbs):
            if any(b.get(n) == name for n in p.names):
                return False
            return self._free_in(p.body, b, name)
        raise EncodingError("a condition on a context or substitution: the SMT engine does not "
                            "encode it", getattr(p, "pos", None))

    def step(self, a: Sym, b: Sym, rho: tuple = ()):
        """``a -> b`` (one step anywhere) as a formula; ``rho`` pairs the binder names of
        ``a`` with the differently named binders of ``b`` that enclose this point, as in
        :meth:`~calcscout.encoders.symbolic.Store.eq`.  (Renaming ``b``'s binders to ``a``'s by
        substitution would capture where the two terms nest the same names in different
        orders, as a translation that swaps binders makes them.)"""
        key = (id(a), id(b), rho)
        got = self._red.get(key)
        if got is not None:
            return got
        self.work += 1
        self.store.tick()
        if self.limit is not None and self.work > self.limit:
            raise StepBudget(self.work)
        s = self.store
        if isinstance(a, SChoice) and isinstance(b, SChoice) and _same_guards(a, b):
            # one decision picks both branches: only the pairs it picks together are cases
            out = f_or(f_and([g, self.step(x, y, rho)])
                       for g, x, y in zip(a.guards, a.branches, b.branches, strict=True))
        elif isinstance(a, SChoice):
            out = f_or(f_and([g, self.step(x, b, rho)]) for g, x in zip(a.guards, a.branches,
                                                                        strict=True))
        elif isinstance(b, SChoice):
            out = f_or(f_and([g, self.step(a, y, rho)]) for g, y in zip(b.guards, b.branches,
                                                                        strict=True))
        else:
            parts = []
            for r in self.rules:
                v, res = self.root_step(r, a)
                if not is_false(v):
                    parts.append(f_and([v, s.eq(res, b, rho)]))
            if (isinstance(a, SNode) and isinstance(b, SNode) and a.con == b.con
                    and len(a.args) == len(b.args)
                    and all(len(x) == len(y) for x, y in zip(a.bnames, b.bnames, strict=True))):
                inner = [_extend(rho, nx, ny) for nx, ny in zip(a.bnames, b.bnames, strict=True)]
                same = [s.eq(x, y, r) for x, y, r in zip(a.args, b.args, inner, strict=True)]
                for i, (x, y) in enumerate(zip(a.args, b.args, strict=True)):
                    others = [e for j, e in enumerate(same) if j != i]
                    if any(is_false(e) for e in others):
                        continue
                    parts.append(f_and([*others, self.step(x, y, inner[i])]))
            out = f_or(parts)
        self._red[key] = out
        return out


def _same_guards(a: SChoice, b: SChoice) -> bool:
    return len(a.guards) == len(b.guards) and all(
        x.eq(y) for x, y in zip(a.guards, b.guards, strict=True))


def _dropped(pattern: Pattern, rhs: Pattern) -> tuple[str, ...]:
    """The binder names of ``pattern`` over a metavariable that ``rhs`` uses outside
    any binder for that name (``t(app(lam(x.M), N)) = t(M)`` drops ``x``)."""
    under: dict[str, set[str]] = {}

    def left(p, above: frozenset[str]) -> None:
        if isinstance(p, PMeta):
            under.setdefault(p.name, set()).update(above)
        elif isinstance(p, PAbs):
            left(p.body, above | set(p.names))
        elif isinstance(p, PCon):
            for a in p.args:
                left(a, above)

    out: set[str] = set()

    def right(p, above: frozenset[str]) -> None:
        if isinstance(p, PMeta):
            out.update(under.get(p.name, set()) - above)
        elif isinstance(p, PAbs):
            right(p.body, above | set(p.names))
        elif isinstance(p, PCon | PCall):
            for a in p.args:
                right(a, above)
        elif isinstance(p, PSubst):
            right(p.body, above)
            for _, q in p.pairs:
                right(q, above)

    left(pattern, frozenset())
    right(rhs, frozenset())
    return tuple(sorted(out))


def _check_rule(r: Rule) -> None:
    def walk(p):
        if isinstance(p, PPlug):
            raise EncodingError(f"rule {r.name} uses a context (E[...]): the SMT engine does not "
                                "encode contexts", r.pos)
        for attr in ("args",):
            for a in getattr(p, attr, ()):
                walk(a)
        if isinstance(p, PAbs):
            walk(p.body)
        if isinstance(p, PSubst):
            walk(p.body)
            for _, q in p.pairs:
                walk(q)

    walk(r.lhs)
    walk(r.rhs)


__all__ = ["Matcher", "Builder", "SymTranslator", "SymRules", "SLeaf", "SNode"]
