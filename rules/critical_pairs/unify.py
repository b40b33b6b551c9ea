"""Sorted unification of rule left-hand sides: higher-order patterns, locally nameless.

A left-hand side of our language is a higher-order pattern in Miller's sense
(Miller, "A logic programming language with lambda-abstraction, function
variables, and simple unification", 1991): a metavariable written under
``x.`` may mention ``x``, so an occurrence is the metavariable applied to
*distinct bound names*.  In locally nameless form an occurrence is
``UMeta(X, args)``: ``args`` are de Bruijn indices at the occurrence, one per
position of ``X``'s *scope* (outermost first).  A value of ``X`` is a body
with ``len(args)`` loose indices (the last scope position is index 0), and the
occurrence stands for the body with its loose indices renamed to ``args``.

Unification is then first-order unification plus two checks (Nipkow,
"Functional unification of higher-order patterns", LICS 1993):

- the *occurs check*: ``X =?= t`` fails when ``X`` occurs in ``t``;
- the *scope check*: ``X(args) =?= t`` fails when ``t`` mentions a bound name
  that is not among ``args`` (``X`` may not see it); a metavariable ``Y``
  inside ``t`` that could see such a name is *pruned* (``Y := Y'`` with the
  smaller scope) instead of failing.

Two occurrences of metavariables meet in the names both may see
(``X(a) =?= Y(b)``: ``X, Y := Z(a ∩ b)``).

Sorts restrict metavariables.  A metavariable carries the set of automaton
states (:mod:`calcscout.rules.core.sorts`) its value may have, so two metavariables of
overlapping sorts meet in the intersection of their state sets, which is the
intersection of the sorts.  After the syntactic unifier is found, the sort
constraints (``X := t`` needs ``state(t)`` among ``X``'s states) are solved
over the states of the remaining metavariables; a solution set that is not a
product of per-metavariable sets splits into several cases, each a unifier of
its own.  A names metavariable (``x`` in a variable position) stands for a
variable of its names sort: a free name or a bound name of that sort.
"""

from __future__ import annotations

import itertools
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass, field, replace

from calcscout.rules.core.sorts import EMPTY, Grammar, State, grammar
from calcscout.rules.core.spec import Calculus, PAbs, Pattern, PCon, PMeta, PName, Rule, base_meta
from calcscout.rules.rewriting.match import binder_sorts

# ---------------------------------------------------------------- terms with metavariables


@dataclass(frozen=True)
class UName:
    """A free name."""

    name: str


@dataclass(frozen=True)
class UBound:
    """A bound name: a de Bruijn index (0 is the innermost binder)."""

    index: int


@dataclass(frozen=True)
class UMeta:
    """An occurrence of metavariable ``name`` seeing the bound names ``args``."""

    name: str
    args: tuple[int, ...] = ()


@dataclass(frozen=True)
class UNode:
    con: str
    args: tuple[UTerm, ...] = ()
    binders: tuple[int, ...] = ()


UTerm = UName | UBound | UMeta | UNode


@dataclass(frozen=True)
class MetaInfo:
    """What a metavariable ranges over.

    ``kind`` is "term" (a value of one of ``states``) or "names" (a variable
    of names sort ``sort``).  ``scope`` gives the names sort of each scope
    position (outermost first) and ``scope_names`` the binder names as the
    rule wrote them (for printing ``M[x := N]``).
    """

    name: str
    sort: str
    kind: str = "term"
    scope: tuple[str, ...] = ()
    scope_names: tuple[str, ...] = ()
    states: frozenset[State] = frozenset()

    @property
    def arity(self) -> int:
        return len(self.scope)


@dataclass
class Unifier:
    """A most general unifier (for one case of the sort constraints).

    ``subst`` maps metavariables to bodies; ``metas`` describes every
    metavariable, the ones created by pruning and meeting included, with the
    states left to it by the sort constraints.
    """

    subst: dict[str, UTerm]
    metas: dict[str, MetaInfo]

    def apply(self, t: UTerm) -> UTerm:
        return resolve(t, self.subst, self.metas)

    def free_metas(self, *terms: UTerm) -> list[str]:
        out: dict[str, None] = {}
        for t in terms:
            for m in metas_in(self.apply(t)):
                out.setdefault(m, None)
        return list(out)


class _Fail(Exception):
    """No unifier: a clash, the occurs check or the scope check."""


# ---------------------------------------------------------------- basic operations


def metas_in(t: UTerm) -> Iterator[str]:
    if isinstance(t, UMeta):
        yield t.name
    elif isinstance(t, UNode):
        for a in t.args:
            yield from metas_in(a)


def loose(t: UTerm, depth: int = 0) -> set[int]:
    """The loose indices of ``t`` (relative to ``t``'s own position)."""
    if isinstance(t, UBound):
        return {t.index - depth} if t.index >= depth else set()
    if isinstance(t, UMeta):
        return {a - depth for a in t.args if a >= depth}
    if isinstance(t, UNode):
        out: set[int] = set()
        for a, k in zip(t.args, t.binders, strict=True):
            out |= loose(a, depth + k)
        return out
    return set()


def _rename(t: UTerm, f: Mapping[int, int], depth: int = 0) -> UTerm:
    """Rename the loose indices of ``t`` by ``f`` (an injective map)."""
    if isinstance(t, UBound):
        if t.index < depth:
            return t
        return UBound(f[t.index - depth] + depth)
    if isinstance(t, UMeta):
        return UMeta(t.name, tuple(a if a < depth else f[a - depth] + depth for a in t.args))
    if isinstance(t, UNode):
        return UNode(t.con, tuple(_rename(a, f, depth + k)
                                  for a, k in zip(t.args, t.binders, strict=True)), t.binders)
    return t


def instantiate(body: UTerm, args: Sequence[int]) -> UTerm:
    """A metavariable's body at an occurrence ``X(args)``."""
    k = len(args)
    return _rename(body, {k - 1 - j: a for j, a in enumerate(args)})


def resolve(t: UTerm, subst: Mapping[str, UTerm], metas: Mapping[str, MetaInfo] | None = None
            ) -> UTerm:
    """``t`` with every bound metavariable replaced, to the end."""
    if isinstance(t, UMeta):
        body = subst.get(t.name)
        if body is None:
            return t
        return resolve(instantiate(body, t.args), subst, metas)
    if isinstance(t, UNode):
        return UNode(t.con, tuple(resolve(a, subst, metas) for a in t.args), t.binders)
    return t


# ---------------------------------------------------------------- the unifier


class _Problem:
    def __init__(self, calc: Calculus, metas: Mapping[str, MetaInfo]):
        self.calc = calc
        self.g: Grammar = grammar(calc)
        self.metas: dict[str, MetaInfo] = dict(metas)
        self.subst: dict[str, UTerm] = {}
        self.bound_by: list[str] = []  # metavariables bound, in order (for the sort constraints)

    # -------------------------------------------------------- helpers

    def fresh(self, base: str) -> str:
        stem = base_meta(base)
        i = 1
        while f"{stem}{i}" in self.metas:
            i += 1
        return f"{stem}{i}"

    def bind(self, x: str, body: UTerm) -> None:
        self.subst[x] = body
        self.bound_by.append(x)

    def binder_sorts(self, con: str, i: int, k: int) -> tuple[str, ...]:
        return binder_sorts(self.calc, con, i, k)

    def restricted(self, y: str, keep: Sequence[int]) -> str:
        """A new metavariable seeing only positions ``keep`` of ``y``'s scope;
        ``y`` is bound to it."""
        info = self.metas[y]
        z = self.fresh(info.name)
        self.metas[z] = replace(info, name=z, scope=tuple(info.scope[j] for j in keep),
                                scope_names=tuple(info.scope_names[j] for j in keep))
        k = info.arity
        self.bind(y, UMeta(z, tuple(k - 1 - j for j in keep)))
        return z

    # -------------------------------------------------------- equations

    def unify(self, s: UTerm, t: UTerm, env: tuple[str, ...]) -> None:
        """``env[i]``: the names sort of bound index ``i`` at this place."""
        s = resolve(s, self.subst)
        t = resolve(t, self.subst)
        if isinstance(s, UMeta) and isinstance(t, UMeta):
            if s.name == t.name:
                self.flex_same(s, t)
            else:
                self.flex_flex(s, t)
            return
        if isinstance(s, UMeta):
            self.flex_rigid(s, t, env)
            return
        if isinstance(t, UMeta):
            self.flex_rigid(t, s, env)
            return
        if isinstance(s, UNode) and isinstance(t, UNode):
            if s.con != t.con or s.binders != t.binders or len(s.args) != len(t.args):
                raise _Fail
            for i, (a, b, k) in enumerate(zip(s.args, t.args, s.binders, strict=True)):
                inner = tuple(reversed(self.binder_sorts(s.con, i, k))) + env if k else env
                self.unify(a, b, inner)
            return
        if s != t:
            raise _Fail

    def flex_same(self, s: UMeta, t: UMeta) -> None:
        if s.args == t.args:
            return
        keep = [j for j, (a, b) in enumerate(zip(s.args, t.args, strict=True)) if a == b]
        self.restricted(s.name, keep)

    def flex_flex(self, s: UMeta, t: UMeta) -> None:
        xs, ys = self.metas[s.name], self.metas[t.name]
        if xs.kind == "names" and ys.kind == "names" and xs.sort != ys.sort:
            raise _Fail
        # One sees every name the other sees: bind the wider one to the
        # narrower, keeping a name of the problem's (the first side's first).
        for keep, other, ki, oi in ((s, t, xs, ys), (t, s, ys, xs)):
            if ki.kind == "term" and oi.kind == "names":
                continue
            if all(a in other.args for a in keep.args):
                if ki.kind == "term":
                    states = ki.states & oi.states
                    if not states:
                        raise _Fail
                    self.metas[keep.name] = replace(ki, states=states)
                elif oi.kind == "term" and not self._names_fit(ki.sort, oi):
                    raise _Fail
                k = len(other.args)
                self.bind(other.name, UMeta(keep.name, tuple(k - 1 - other.args.index(a)
                                                             for a in keep.args)))
                return
        common = [a for a in s.args if a in t.args]
        base = xs if xs.kind == "names" or ys.kind != "names" else ys
        other = ys if base is xs else xs
        z = self.fresh(base.name)
        pos_s = [s.args.index(a) for a in common]
        if base.kind == "names":
            states = base.states
            if other.kind == "term" and not self._names_fit(base.sort, other):
                raise _Fail
        else:
            states = xs.states & ys.states
            if not states:
                raise _Fail
        self.metas[z] = replace(base, name=z, scope=tuple(xs.scope[j] for j in pos_s),
                                scope_names=tuple(xs.scope_names[j] for j in pos_s),
                                states=states)
        for occ in (s, t):
            k = len(occ.args)
            # Position j of z is the common name common[j]; in occ's body it is
            # the index of that name's position in occ's scope.
            self.bind(occ.name, UMeta(z, tuple(k - 1 - occ.args.index(a) for a in common)))

    def _names_fit(self, names_sort: str, info: MetaInfo) -> bool:
        q = self.g.names_state.get(names_sort, EMPTY)
        return q in info.states

    def flex_rigid(self, s: UMeta, t: UTerm, env: tuple[str, ...]) -> None:
        info = self.metas[s.name]
        if s.name in set(metas_in(t)):
            raise _Fail  # the occurs check
        if info.kind == "names":
            if isinstance(t, UName):
                if self.calc.names_sort_of(t.name) != info.sort:
                    raise _Fail
            elif isinstance(t, UBound):
                if t.index >= len(env) or env[t.index] != info.sort:
                    raise _Fail
            else:
                raise _Fail
        k = len(s.args)
        where = {a: k - 1 - j for j, a in enumerate(s.args)}
        body = self.abstract(t, where, 0)
        self.bind(s.name, body)

    def abstract(self, t: UTerm, where: Mapping[int, int], depth: int) -> UTerm:
        """``t`` as a body over the names ``where`` lists (index at the
        occurrence -> index in the body); the scope check and pruning."""
        if isinstance(t, UBound):
            if t.index < depth:
                return t
            j = where.get(t.index - depth)
            if j is None:
                raise _Fail  # the scope check: a name the metavariable may not see
            return UBound(j + depth)
        if isinstance(t, UMeta):
            keep = [j for j, a in enumerate(t.args) if a < depth or (a - depth) in where]
            if len(keep) != len(t.args):
                z = self.restricted(t.name, keep)
                t = UMeta(z, tuple(t.args[j] for j in keep))
            return UMeta(t.name, tuple(a if a < depth else where[a - depth] + depth
                                       for a in t.args))
        if isinstance(t, UNode):
            return UNode(t.con, tuple(self.abstract(a, where, depth + k)
                                      for a, k in zip(t.args, t.binders, strict=True)),
                         t.binders)
        return t

    # -------------------------------------------------------- sorts

    def state_of(self, t: UTerm, env: tuple[str, ...], assign: Mapping[str, State]) -> State:
        g = self.g
        if isinstance(t, UName):
            return g.name_state(t.name)
        if isinstance(t, UBound):
            return g.names_state.get(env[t.index], EMPTY) if t.index < len(env) else EMPTY
        if isinstance(t, UMeta):
            info = self.metas[t.name]
            if info.kind == "names":
                return g.names_state.get(info.sort, EMPTY)
            return assign[t.name]
        children = []
        for i, (a, k) in enumerate(zip(t.args, t.binders, strict=True)):
            inner = tuple(reversed(self.binder_sorts(t.con, i, k))) + env if k else env
            children.append(self.state_of(a, inner, assign))
        return g.delta(t.con, tuple(children))

    def cases(self) -> list[Unifier]:
        """Solve the sort constraints of every bound metavariable."""
        constraints = []
        for x in dict.fromkeys(self.bound_by):
            info = self.metas[x]
            if info.kind != "term":
                continue
            body = resolve(self.subst[x], self.subst)
            constraints.append((info, body))
        free: list[str] = []
        for _, body in constraints:
            for m in metas_in(body):
                if self.metas[m].kind == "term" and m not in free:
                    free.append(m)
        solutions: list[tuple[State, ...]] = []
        choices = [sorted(self.metas[m].states, key=sorted) for m in free]
        for combo in itertools.product(*choices):
            assign = dict(zip(free, combo, strict=True))
            if all(self.state_of(body, tuple(reversed(info.scope)), assign) in info.states
                   for info, body in constraints):
                solutions.append(combo)
        if not solutions:
            return []
        subst = {x: resolve(b, self.subst) for x, b in self.subst.items()}
        projections = [frozenset(s[i] for s in solutions) for i in range(len(free))]
        product_size = 1
        for p in projections:
            product_size *= len(p)
        per_case = [projections] if product_size == len(solutions) else \
            [[frozenset((q,)) for q in s] for s in solutions]
        out = []
        for sets in per_case:
            metas = dict(self.metas)
            for m, states in zip(free, sets, strict=True):
                metas[m] = replace(metas[m], states=states)
            out.append(Unifier(dict(subst), metas))
        return out


def unify(
    calc: Calculus,
    s: UTerm,
    t: UTerm,
    metas: Mapping[str, MetaInfo],
    env: tuple[str, ...] = (),
) -> list[Unifier]:
    """The most general unifiers of ``s`` and ``t``, one per case of the sort
    constraints (none: they do not unify).  ``env[i]`` is the names sort of
    bound index ``i`` at the place where ``s`` and ``t`` stand.

    >>> from calcscout.rules.loading.load import load_text
    >>> calc = load_text("calculus c { sort t M N ::= a | b | f(M, N) }").calculi["c"]
    >>> from calcscout.rules.core.sorts import grammar
    >>> every = frozenset(grammar(calc).states_with("t"))
    >>> metas = {m: MetaInfo(m, "t", states=every) for m in ("X", "Y")}
    >>> [u] = unify(calc, UNode("f", (UMeta("X"), UNode("b")), (0, 0)),
    ...             UNode("f", (UNode("a"), UMeta("Y")), (0, 0)), metas)
    >>> first_order(u.apply(UMeta("X"))), first_order(u.apply(UMeta("Y")))
    (('a',), ('b',))
    >>> unify(calc, UMeta("X"), UNode("f", (UMeta("X"), UNode("a")), (0, 0)), metas)
    []
    """
    p = _Problem(calc, metas)
    try:
        p.unify(s, t, env)
    except _Fail:
        return []
    return p.cases()


# ---------------------------------------------------------------- from patterns


@dataclass
class Converted:
    """A left-hand side as a term with metavariables."""

    term: UTerm
    metas: dict[str, MetaInfo] = field(default_factory=dict)
    # Whether every condition of the rule is a pattern condition (``x fresh in
    # T`` for a name ``x`` bound by the left-hand side).
    pattern_conditions: bool = True


def from_pattern(
    calc: Calculus,
    lhs: Pattern,
    rule: Rule | None = None,
    outer: Sequence[tuple[str, str]] = (),
    rename: Mapping[str, str] | None = None,
) -> Converted:
    """``lhs`` (no plugging: unfold contexts first) as a :data:`UTerm`.

    ``outer`` are the binders above the place the pattern is put (outermost
    first), each as (names sort, name to show): every metavariable may see them.  ``rename`` maps
    the pattern's metavariables to the names they get (to rename apart).
    Conditions ``x fresh in T`` of ``rule`` take ``x`` out of the scope of
    every metavariable in ``T``.
    """
    g = grammar(calc)
    rename = dict(rename or {})
    outer_names = tuple(f"#o{j}" for j in range(len(outer)))
    # Pass 1: the binder names visible at every occurrence of each metavariable.
    seen: dict[str, list[tuple[str, ...]]] = {}
    sorts: dict[str, tuple[str, str]] = {}  # meta -> (kind, sort)
    binder_sort: dict[str, str] = {n: ns for n, (ns, _) in zip(outer_names, outer, strict=True)}
    shown: dict[str, str] = {n: text for n, (_, text) in zip(outer_names, outer, strict=True)}

    def walk(p: Pattern, env: tuple[str, ...]) -> None:
        if isinstance(p, PMeta):
            seen.setdefault(p.name, []).append(env)
            sorts[p.name] = ("term", p.sort)
        elif isinstance(p, PName):
            if p.name not in env:
                seen.setdefault(p.name, []).append(env)
                sorts[p.name] = ("names", p.names_sort)
        elif isinstance(p, PCon):
            for i, a in enumerate(p.args):
                if isinstance(a, PAbs):
                    bs = binder_sorts(calc, p.con, i, len(a.names))
                    for n, ns in zip(a.names, bs, strict=True):
                        binder_sort.setdefault(n, ns)
                    walk(a.body, env + a.names)
                else:
                    walk(a, env)
        else:
            raise ValueError(f"not a left-hand side pattern here: {p!r}")

    walk(lhs, outer_names)
    excluded: dict[str, set[str]] = {}
    pattern_conditions = True
    bound_names = set(binder_sort) - set(outer_names)
    for cond in rule.conditions if rule is not None else ():
        if cond.kind != "fresh" or cond.name.name not in bound_names:
            pattern_conditions = False
            continue
        for m in _metas_of(cond.term):
            excluded.setdefault(m, set()).add(cond.name.name)
    metas: dict[str, MetaInfo] = {}
    scope_of: dict[str, tuple[str, ...]] = {}
    for m, envs in seen.items():
        visible = [n for n in dict.fromkeys(envs[0]) if all(n in e for e in envs)]
        # With shadowing (x.x.M) only the innermost x is visible: keep its last place.
        visible = sorted(set(visible), key=lambda n, e=envs[0]: _last(e, n))
        visible = [n for n in visible if n not in excluded.get(m, ())]
        scope_of[m] = tuple(visible)
        kind, sort = sorts[m]
        new = rename.get(m, m)
        states = frozenset(g.states_with(sort)) if kind == "term" else frozenset()
        metas[new] = MetaInfo(new, sort, kind, tuple(binder_sort[n] for n in visible),
                              tuple(shown.get(n, _shown(n)) for n in visible), states)

    def build(p: Pattern, env: tuple[str, ...]) -> UTerm:
        if isinstance(p, PMeta) or (isinstance(p, PName) and p.name not in env):
            args = tuple(len(env) - 1 - _last(env, n) for n in scope_of[p.name])
            return UMeta(rename.get(p.name, p.name), args)
        if isinstance(p, PName):
            return UBound(len(env) - 1 - _last(env, p.name))
        assert isinstance(p, PCon)
        args = []
        binders = []
        for a in p.args:
            if isinstance(a, PAbs):
                args.append(build(a.body, env + a.names))
                binders.append(len(a.names))
            else:
                args.append(build(a, env))
                binders.append(0)
        return UNode(p.con, tuple(args), tuple(binders))

    return Converted(build(lhs, outer_names), metas, pattern_conditions)


def _shown(n: str) -> str:
    """A binder name to show: internal names ``#x:3`` (unfolded contexts) show as ``x``."""
    if n.startswith("#"):
        return n[1:].split(":", 1)[0]
    return n


def _last(env: tuple[str, ...], n: str) -> int:
    return len(env) - 1 - env[::-1].index(n)


def _metas_of(p: Pattern) -> list[str]:
    if isinstance(p, PMeta | PName):
        return [p.name]
    if isinstance(p, PAbs):
        return _metas_of(p.body)
    if isinstance(p, PCon):
        return [m for a in p.args for m in _metas_of(a)]
    return []


# ---------------------------------------------------------------- first-order view


def first_order(t: UTerm) -> object:
    """A first-order term as nested tuples ``(con, arg, ...)``, metavariables
    as ``("?", name)`` (for comparisons with other unifiers)."""
    if isinstance(t, UMeta):
        return ("?", t.name)
    if isinstance(t, UNode):
        return (t.con, *(first_order(a) for a in t.args))
    if isinstance(t, UName):
        return ("'", t.name)
    return ("^", t.index)
