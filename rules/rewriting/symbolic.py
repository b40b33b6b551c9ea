"""Symbolic terms: object terms with opaque parts, for proofs about all terms.

An *opaque* node stands for an unknown term.  It is an ordinary interned
:class:`~calcscout.rules.core.terms.Node` whose constructor (``?12``) no user can spell,
registered in :data:`OPAQUES`; its arguments are the current values of its
*parameters* — the names the unknown term may contain that substitution must
track (the binders above it, a claim's names metavariables).  So ``M1``
under ``lam(x. ...)`` is ``?12(^0)``, and ``M1[x := V]`` is ``?12(V)``: the
operations of :mod:`calcscout.rules.core.terms` (substitution, closing and opening binders,
interning) work on symbolic terms unchanged, and two symbolic terms are equal
when they are the same object — a sound, incomplete equality.

Three kinds of opaque nodes:

- ``meta``: a metavariable of a proof case (``M1``), which a case split may
  replace by each shape of its sort;
- ``call``: a translation function applied to a term it cannot see into
  (``cps(M1)``); the call is canonical in its free names, so the same call
  met twice, under different binder names, is the same node;
- ``reduct``: a term reached from another in one step (``N1``), of the same
  sort when the calculus's steps keep sorts; never split.

Everything here answers only what holds for *every* instance of the opaque
parts: sort membership through the under-approximating states of
:class:`calcscout.rules.core.sorts.Grammar`, matching in three values (yes / no / unknown,
with the metavariable whose split would decide it), steps only where a rule
matches without looking inside an opaque part.
"""

from __future__ import annotations

import itertools
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass, field

from calcscout.rules.core.sorts import OPAQUE_SORTS, State, grammar
from calcscout.rules.core.spec import (
    AltCon,
    AltNames,
    AltSort,
    Calculus,
    PAbs,
    Pattern,
    PCon,
    PMeta,
    PName,
    PPlug,
    Rule,
    Spec,
    Translation,
)
from calcscout.rules.core.terms import (
    Bound,
    Name,
    Node,
    Term,
    bound,
    close,
    fresh_name,
    name,
    node,
    open_body,
    substitute,
)
from calcscout.rules.rewriting.instantiate import build
from calcscout.rules.rewriting.match import Context, decompositions, match
from calcscout.rules.rewriting.rewrite import _skeleton


class Stuck(Exception):
    """Symbolic evaluation cannot go on soundly (the reason is the message)."""


@dataclass(frozen=True)
class Opaque:
    con: str
    kind: str  # "meta" | "call" | "reduct"
    calc: str
    sort: str
    params: tuple[str, ...]  # parameter names, as they stand in ``template`` / at creation
    label: str  # "M1", "N1", or the function's name for a call
    translation: str = ""  # calls: the translation and function, and their arguments
    fn: str = ""
    template: tuple[Term, ...] = ()
    blocker: str | None = None  # calls: the metavariable whose split lets it go on
    origin: str | None = None  # metas: the metavariable this one was split from


OPAQUES: dict[str, Opaque] = {}
_CALLS: dict[tuple, str] = {}
LABELS: dict[str, str] = {}  # internal name -> the name it is shown as
_counter = itertools.count(1)


def info(t: Term) -> Opaque | None:
    return OPAQUES.get(t.con) if isinstance(t, Node) and t.con[:1] == "?" else None


def fresh(ns: str, label: str | None = None) -> Name:
    """A new name of names sort ``ns`` that occurs in no term made so far."""
    n = name(f"#{ns}:s{next(_counter)}")
    if label:
        LABELS[n.name] = label
    return n


def _register(o: Opaque, param_sorts: tuple[str, ...]) -> None:
    OPAQUES[o.con] = o
    OPAQUE_SORTS[o.con] = (o.calc, o.sort, param_sorts)


def _param_sorts(calc: Calculus, params: Sequence[str]) -> tuple[str, ...]:
    return tuple(calc.names_sort_of(p) or "" for p in params)


def new_meta(calc: Calculus, sort: str, params: Sequence[Name], label: str,
             kind: str = "meta", origin: str | None = None) -> Node:
    con = f"?{next(_counter)}"
    ps = tuple(p.name for p in params)
    _register(Opaque(con, kind, calc.name, sort, ps, label, origin=origin), _param_sorts(calc, ps))
    return node(con, tuple(params))


def call_node(tr: Translation, fn: str, args: Sequence[Term], calc: Calculus, sort: str,
              blocker: str | None) -> Node:
    """The opaque node of ``fn(args)``: canonical in the free names of ``args``."""
    free: list[str] = []
    for a in args:
        for n in a.free:
            if n not in free:
                free.append(n)
    # Canonical names: a metavariable argument's own parameters where it is renamed (so
    # that ``cps(M1)`` reads as such), numbered names for the rest.
    canon: dict[str, Name] = {}
    first = info(args[0]) if args else None
    if first is not None and first.kind == "meta" and _distinct_names(args[0]):
        for a, p in zip(args[0].args, first.params, strict=True):  # type: ignore[union-attr]
            canon[a.name] = name(p)  # type: ignore[union-attr]
    for i, n in enumerate(free):
        if n not in canon:
            canon[n] = name(f"#{calc.names_sort_of(n) or 'name'}:p{i}")
    template = tuple(substitute(a, canon) for a in args)
    key = (tr.name, fn, template, tuple(canon[n].name for n in free))
    con = _CALLS.get(key)
    if con is None:
        con = f"?{next(_counter)}"
        _CALLS[key] = con
        ps = tuple(canon[n].name for n in free)
        _register(Opaque(con, "call", calc.name, sort, ps, fn, tr.name, fn, template, blocker),
                  _param_sorts(calc, ps))
    return node(con, tuple(name(n) for n in free))


def _distinct_names(t: Term) -> bool:
    args = t.args if isinstance(t, Node) else ()
    return all(isinstance(a, Name) for a in args) and len(set(args)) == len(args)


def call_arguments(t: Node) -> tuple[Term, ...]:
    """The arguments of a call node as they stand at ``t`` (``t`` locally closed)."""
    o = OPAQUES[t.con]
    mapping = dict(zip(o.params, t.args, strict=True))
    return tuple(substitute(a, mapping) for a in o.template)


def has_opaque(t: Term) -> bool:
    return any(info(s) is not None for s in _walk(t))


def _walk(t: Term) -> Iterator[Term]:
    stack = [t]
    while stack:
        s = stack.pop()
        yield s
        if isinstance(s, Node):
            stack.extend(reversed(s.args))


def opaques_in(t: Term) -> list[Node]:
    """The opaque nodes of ``t``, outermost and leftmost first, each once."""
    out: list[Node] = []
    for s in _walk(t):
        if info(s) is not None and s not in out:
            out.append(s)  # type: ignore[arg-type]
    return out


def skeleton_free(t: Term) -> set[str]:
    """The free names of ``t`` that occur outside every opaque node's arguments:
    those occur in every instance."""
    out: set[str] = set()
    for s in _walk_skeleton(t):
        if isinstance(s, Name):
            out.add(s.name)
    return out


def _walk_skeleton(t: Term) -> Iterator[Term]:
    stack = [t]
    while stack:
        s = stack.pop()
        yield s
        if isinstance(s, Node) and info(s) is None:
            stack.extend(s.args)


# ---------------------------------------------------------------- sorts


def possible_states(calc: Calculus, t: Term, env: tuple[str, ...] = ()) -> frozenset[State]:
    """Every state an instance of ``t`` may have (an over-approximation)."""
    g = grammar(calc)
    memo: dict[tuple, frozenset[State]] = {}

    def go(t: Term, env: tuple[str, ...]) -> frozenset[State]:
        key = (t, env[: t.loose])
        got = memo.get(key)
        if got is not None:
            return got
        if isinstance(t, Name):
            out = frozenset({g.name_state(t.name)})
        elif isinstance(t, Bound):
            out = frozenset({g.names_state.get(env[t.index], frozenset())
                             if t.index < len(env) else frozenset()})
        else:
            assert isinstance(t, Node)
            o = info(t)
            if o is not None:
                sure = g.state(t, env)
                if o.calc == calc.name and sure:
                    out = frozenset(q for q in g.reachable if o.sort in q)
                else:  # nothing known: any state, or none (an ill-sorted instance)
                    out = frozenset(g.reachable) | {frozenset()}
            else:
                shape = calc.shapes.get(t.con)
                if shape is None or shape.binders != t.binders:
                    out = frozenset({frozenset()})
                else:
                    kids = []
                    for arg, bsorts in zip(t.args, shape.binder_sorts, strict=True):
                        inner = tuple(reversed(bsorts)) + env if bsorts else env
                        kids.append(go(arg, inner))
                    out = frozenset(g.delta(t.con, combo) for combo in itertools.product(*kids))
        memo[key] = out
        return out

    return go(t, env)


def membership(calc: Calculus, t: Term, sort: str, env: tuple[str, ...] = ()) -> bool | None:
    """Whether every instance of ``t`` is in ``sort`` (True), none is (False), or it depends
    (None).  ``sort`` may be a names sort."""
    if sort in calc.names_sorts:
        if isinstance(t, Name):
            return calc.names_sort_of(t.name) == sort
        if isinstance(t, Bound):
            return t.index < len(env) and env[t.index] == sort
        o = info(t)
        if o is None:
            return False
        g = grammar(calc)
        ns_state = g.names_state.get(sort, frozenset())
        return None if any(q == ns_state for q in possible_states(calc, t, env)) else False
    if sort in grammar(calc).state(t, env):
        return True
    states = possible_states(calc, t, env)
    if not any(sort in q for q in states):
        return False
    return None


# ---------------------------------------------------------------- splits


def shapes(calc: Calculus, sort: str) -> tuple[list[tuple[str, tuple[tuple[tuple[str, ...], str], ...]]],
                                                list[str]]:
    """The constructor alternatives ``(con, ((binder names sorts, sort), ...))`` and the
    names sorts that make up ``sort``, through its subsorts."""
    cons: list = []
    names: list[str] = []
    seen: set[str] = set()
    todo = [sort]
    while todo:
        s = todo.pop(0)
        if s in seen or s not in calc.sorts:
            continue
        seen.add(s)
        for alt in calc.sorts[s].alts:
            if isinstance(alt, AltNames):
                if alt.names_sort not in names:
                    names.append(alt.names_sort)
            elif isinstance(alt, AltSort):
                todo.append(alt.sort)
            elif isinstance(alt, AltCon):
                entry = (alt.con, tuple((a.binder_sorts, a.sort) for a in alt.args))
                if entry not in cons:
                    cons.append(entry)
    return cons, names


@dataclass
class Split:
    """One case of a split of metavariable ``meta``: its replacement (with the
    metavariable's parameters as free names) and the new metavariables."""

    meta: str
    shape: Term
    kind: str  # "con", "name" (one of the parameters), "other" (a name unlike ``new``)
    new: list = field(default_factory=list)  # the new metavariables (for "other": the names)


def split(calc: Calculus, meta: Node, labels: Callable[[str], str]) -> list[Split]:
    """Every shape ``meta``'s sort allows: a constructor with new metavariables for its
    arguments (under new binder names), or a name — one of the parameters, or a name
    different from all of them."""
    o = OPAQUES[meta.con]
    params = [name(p) for p in o.params]
    cons, names_sorts = shapes(calc, o.sort)
    out: list[Split] = []
    for con, args in cons:
        new: list[Node] = []
        built: list[Term] = []
        binders: list[int] = []
        for bsorts, s in args:
            bnames = [fresh(ns) for ns in bsorts]
            m = new_meta(calc, s, params + bnames, labels(s), origin=meta.con)
            new.append(m)
            built.append(close(m, [b.name for b in bnames]) if bnames else m)
            binders.append(len(bnames))
        t = node(con, built, binders)
        out.append(Split(meta.con, t, "con", new))
    for ns in names_sorts:
        mine = [p for p in params if calc.names_sort_of(p.name) == ns]
        for p in mine:
            out.append(Split(meta.con, p, "name"))
        out.append(Split(meta.con, fresh(ns), "other", list(mine)))  # type: ignore[arg-type]
    return out


def replace_meta(t: Term, con: str, shape: Term, params: Sequence[str]) -> Term:
    """``t`` with every occurrence ``con(a1, ..., an)`` replaced by ``shape`` with the
    parameters replaced by the ``ai`` (which may have loose indices: they are shifted
    under the shape's own binders)."""

    def go(t: Term) -> Term:
        if not isinstance(t, Node):
            return t
        if t.con == con:
            return _instantiate(shape, dict(zip(params, (go(a) for a in t.args), strict=True)), 0)
        if not any(con in _cons(a) for a in t.args):
            return t
        return node(t.con, [go(a) for a in t.args], t.binders)

    return go(t)


def _cons(t: Term) -> set[str]:
    return {s.con for s in _walk(t) if isinstance(s, Node)}


def _instantiate(t: Term, mapping: dict[str, Term], depth: int) -> Term:
    if isinstance(t, Name):
        v = mapping.get(t.name)
        return t if v is None else _shift(v, depth)
    if isinstance(t, Bound):
        return t
    assert isinstance(t, Node)
    return node(t.con, [_instantiate(a, mapping, depth + k) for a, k in zip(t.args, t.binders,
                                                                            strict=True)],
                t.binders)


def _shift(t: Term, k: int, depth: int = 0) -> Term:
    if k == 0 or t.loose <= depth:
        return t
    if isinstance(t, Bound):
        return bound(t.index + k)
    assert isinstance(t, Node)
    return node(t.con, [_shift(a, k, depth + b) for a, b in zip(t.args, t.binders, strict=True)],
                t.binders)


# ---------------------------------------------------------------- matching in three values


YES, NO, UNKNOWN = "yes", "no", "unknown"


def blocker_of(t: Term) -> str | None:
    """The metavariable whose split may decide a question about ``t``."""
    for s in opaques_in(t):
        o = OPAQUES[s.con]
        if o.kind == "meta":
            return s.con
        if o.kind == "call" and o.blocker is not None:
            return o.blocker
    return None


def match3(calc: Calculus, p: Pattern, t: Term, b: dict[str, Term]) -> tuple[str, str | None]:
    """Does source pattern ``p`` match ``t`` for every instance (YES, extending ``b``), for
    none (NO), or does it depend (UNKNOWN, with the metavariable to split, or None)?"""
    if isinstance(p, PMeta):
        old = b.get(p.name)
        if old is not None:
            if old is t:
                return YES, None
            if not has_opaque(old) and not has_opaque(t):
                return NO, None
            return UNKNOWN, None  # equality of two unknown terms: no split decides it
        m = membership(calc, t, p.sort)
        if m is True:
            b[p.name] = t
            return YES, None
        return (NO, None) if m is False else (UNKNOWN, blocker_of(t))
    if isinstance(p, PName):
        if isinstance(t, Name):
            if calc.names_sort_of(t.name) != p.names_sort:
                return NO, None
            old = b.get(p.name)
            if old is not None and old is not t:
                return NO, None
            b[p.name] = t
            return YES, None
        m = membership(calc, t, p.names_sort)
        return (NO, None) if m is False else (UNKNOWN, blocker_of(t))
    if isinstance(p, PCon):
        o = info(t)
        if o is not None:
            cons, _ = shapes(calc, o.sort) if o.calc == calc.name else ([], [])
            if o.calc == calc.name and o.sort in grammar(calc).state(t):
                can = any(c == p.con for c, _ in cons)
                return (UNKNOWN, blocker_of(t)) if can else (NO, None)
            return UNKNOWN, blocker_of(t)
        if not isinstance(t, Node) or t.con != p.con or len(t.args) != len(p.args):
            return NO, None
        verdict, why = YES, None
        for a, arg, k in zip(p.args, t.args, t.binders, strict=True):
            if isinstance(a, PAbs):
                if len(a.names) != k:
                    return NO, None
                shape = calc.shapes.get(p.con)
                i = p.args.index(a)
                bsorts = shape.binder_sorts[i] if shape else ("",) * k
                opened = []
                for n, ns in zip(a.names, bsorts, strict=True):
                    v = fresh(ns)
                    b[n] = v
                    opened.append(v)
                r, w = match3(calc, a.body, open_body(arg, opened), b)
            else:
                if k:
                    return NO, None
                r, w = match3(calc, a, arg, b)
            if r == NO:
                return NO, None
            if r == UNKNOWN and verdict == YES:
                verdict, why = UNKNOWN, w
        return verdict, why
    raise Stuck(f"pattern {type(p).__name__} is not a source pattern")


# ---------------------------------------------------------------- translations


class SymbolicTranslator:
    """Applies a translation's equations to symbolic terms, first match first; a call
    whose equation depends on an opaque part stays a call node."""

    def __init__(self, spec: Spec, tr: Translation):
        _CALCS.update(spec.calculi)
        self.spec = spec
        self.tr = tr
        self.source = spec.calculi[tr.source]
        self.target = spec.calculi[tr.target]
        self.used: list[str] = []  # "fn.i" for every equation applied, in order

    def apply(self, fn: str, term: Term, extra: Sequence[Term] = ()) -> Term:
        out = self._equations(fn, term, extra)
        if self.tr.normalize is not None:
            self._normalize(out)
        return out

    def _normalize(self, built: Term) -> None:
        """A translation followed by ``then normalize GROUP``: its steps are run where they
        fire for every instance, to show where the group still needs to see inside an opaque
        part.  A proof never rests on such a result: the group's normal form is unique only
        where it is confluent and terminating, which proofs do not assume."""
        group = self.tr.normalize
        t = built
        for _ in range(64):
            steps = symbolic_steps(self.target, t, group)
            if not steps:
                break
            t = steps[0][2]
        lhss = [r.lhs for r in self.target.rules_of(group)]
        for s in _walk(t):
            if isinstance(s, Node) and info(s) is None and any(_could_match(p, s) for p in lhss):
                raise Stuck(f"group {group} of {self.target.name} may still apply at "
                            f"{show(lambda n: _CALCS.get(n), s, self.target)}: its rules need "
                            "to see inside an opaque part")
        raise Stuck(f"translation {self.tr.name} ends with `then normalize {group}`; proofs "
                    "do not rest on normal forms (their uniqueness needs the group confluent "
                    f"and terminating); the normal form here is {show(_CALCS.get, t, self.target)}")

    def _equations(self, fn: str, term: Term, extra: Sequence[Term] = ()) -> Term:
        if term.loose or any(e.loose for e in extra):
            raise Stuck("a call on a term with loose bound names")
        sig = self.tr.signatures[fn]
        eqs = self.tr.equations_of(fn)
        for i, eq in enumerate(eqs, 1):
            b: dict[str, Term] = {}
            verdict, why = match3(self.source, eq.pattern, term, b)
            if verdict == NO:
                continue
            if verdict == UNKNOWN:
                return call_node(self.tr, fn, (term, *extra), self.target, sig.result, why)
            opened = {v.name for k, v in b.items() if isinstance(v, Name) and k not in ()}
            for p, v in zip(eq.extra, extra, strict=True):
                b[p.name] = v
            result = build(self.target, eq.rhs, b, self._call)
            self.used.append(f"{fn}.{i}")
            escaped = [n for n in result.free if n in opened and n not in term.free
                       and not any(n in e.free for e in extra)]
            if escaped:
                raise Stuck(f"equation {fn}.{i} may let a bound name escape into its result")
            return result
        raise Stuck(f"no equation of {fn} matches this case")

    def _call(self, fn: str, args: Sequence[Term]) -> Term:
        # inside the equations, calls build; a normalised translation normalises once
        return self._equations(fn, args[0], args[1:])


_CALCS: dict[str, Calculus] = {}


def _could_match(p: Pattern, t: Term) -> bool:
    """Could ``p`` match some instance of ``t`` (opaque parts matching anything)?"""
    if info(t) is not None or isinstance(p, PMeta | PPlug):
        return True
    if isinstance(p, PName):
        return isinstance(t, Name | Bound)
    if isinstance(p, PCon):
        if not isinstance(t, Node) or t.con != p.con or len(t.args) != len(p.args):
            return False
        return all(_could_match(a.body if isinstance(a, PAbs) else a, b)
                   for a, b in zip(p.args, t.args, strict=True))
    return True


# ---------------------------------------------------------------- steps


def _conditions_hold(calc: Calculus, rule: Rule, b: dict) -> bool:
    """A rule's side conditions, decided for every instance (else the rule does not fire)."""
    for cond in rule.conditions:
        v = b.get(cond.name.name)
        if not isinstance(v, Name):
            return False
        value = build(calc, cond.term, b)
        opaque = has_opaque(value)
        if cond.kind == "fresh":
            if v.name in value.free:
                return False
            # a name the matcher opened for a binder differs from every other name; any other
            # name might hide inside an opaque part
            if opaque and not _opened_by_matcher(v.name):
                return False
        else:
            if v.name not in skeleton_free(value):
                return False
    return True


def _opened_by_matcher(text: str) -> bool:
    return text.startswith("#") and ":" in text and text[text.index(":") + 1:].isdigit()


def root_steps(calc: Calculus, t: Term, group: str | None) -> list[tuple[str, Term]]:
    """The steps at the root of a locally closed symbolic term, for every instance."""
    out: list[tuple[str, Term]] = []
    if info(t) is not None:
        return out
    for rule in calc.rules_of(group):
        if isinstance(rule.lhs, PCon) and (not isinstance(t, Node) or rule.lhs.con != t.con):
            continue
        for b in match(calc, rule.lhs, t):
            if not _conditions_hold(calc, rule, b):
                continue
            result = build(calc, rule.rhs, b)
            if (rule.name, result) not in out:
                out.append((rule.name, result))
    return out


def symbolic_steps(calc: Calculus, t: Term, group: str | None) -> list[tuple[str, str, Term]]:
    """Every step ``(rule, position, result)`` of ``t`` that exists for every instance: rules
    fire outside opaque parts only, at the places the calculus's ``reduce`` line allows.

    As in the rewriting engine, descending does not open binders: only a subterm whose
    constructors fit some left-hand side is opened, stepped and closed again."""
    out: list[tuple[str, str, Term]] = []
    if calc.reduce_in is not None:
        for ctx, hole in decompositions(calc, calc.reduce_in, t):
            for r, res in root_steps(calc, hole, group):
                out.append((r, _pos(ctx.position), ctx.plug(res)))
        return out
    rules = calc.rules_of(group)
    lhss = [r.lhs for r in rules]
    memo, steps_memo = _step_memos(calc, group)

    def may(s: Term) -> bool:
        got = memo.get(s)
        if got is None:
            got = isinstance(s, Node) and info(s) is None and (
                any(_skeleton(p, s) for p in lhss) or any(may(a) for a in s.args))
            memo[s] = got
        return got

    def go(s: Term, env: tuple[str, ...]) -> list[tuple[str, tuple[int, ...], Term]]:
        if not may(s):
            return []
        env = env[: s.loose]
        key = (s, env)
        got = steps_memo.get(key)
        if got is not None:
            return got
        assert isinstance(s, Node)
        found: list[tuple[str, tuple[int, ...], Term]] = []
        if any(_skeleton(p, s) for p in lhss):
            if s.loose:
                taken = set(s.free)
                names: list[str] = []
                for j in range(s.loose - 1, -1, -1):  # outermost first, as the engine does
                    n = fresh_name(taken, base=f"{env[j]}:")
                    taken.add(n)
                    names.append(n)
                opened = open_body(s, [name(n) for n in names])
                found.extend((r, (), close(res, names)) for r, res in
                             root_steps(calc, opened, group))
            else:
                found.extend((r, (), res) for r, res in root_steps(calc, s, group))
        for i, (a, k) in enumerate(zip(s.args, s.binders, strict=True)):
            inner = tuple(reversed(_binder_sorts(calc, s.con, i, k))) + env if k else env
            for r, p, res in go(a, inner):
                found.append((r, (i, *p), node(s.con, s.args[:i] + (res,) + s.args[i + 1:],
                                               s.binders)))
        if len(steps_memo) > 200_000:
            steps_memo.clear()
        steps_memo[key] = found
        return found

    for r, p, res in go(t, ()):
        out.append((r, _pos(p), res))
    return out


_MEMOS: dict[tuple[int, str | None], tuple[Calculus, dict, dict]] = {}


def _step_memos(calc: Calculus, group: str | None) -> tuple[dict, dict]:
    got = _MEMOS.get((id(calc), group))
    if got is None or got[0] is not calc:
        got = (calc, {}, {})
        _MEMOS[(id(calc), group)] = got
    return got[1], got[2]


def _binder_sorts(calc: Calculus, con: str, i: int, k: int) -> tuple[str, ...]:
    shape = calc.shapes.get(con)
    if shape is not None and len(shape.binder_sorts[i]) == k:
        return shape.binder_sorts[i]
    return (next(iter(calc.names_sorts), "name"),) * k


def _pos(p: Sequence[int]) -> str:
    return ".".join(map(str, p)) if p else "root"


def rewrite_positions(calc: Calculus, t: Term, anywhere: bool, f: Callable[[Term], Term | None]
                      ) -> Iterator[tuple[str, Term]]:
    """Every ``(position, result)`` of applying ``f`` (None: nothing) at one place of ``t``:
    every place (under binders too) when ``anywhere``, else the root only."""
    if not anywhere:
        got = f(t)
        if got is not None:
            yield "root", got
        return

    def go(s: Term, pos: tuple[int, ...]) -> Iterator[tuple[tuple[int, ...], Term]]:
        got = f(s)
        if got is not None:
            yield pos, got
        if isinstance(s, Node) and info(s) is None:
            for i, (a, k) in enumerate(zip(s.args, s.binders, strict=True)):
                if k:
                    names = [fresh(ns) for ns in _binder_sorts(calc, s.con, i, k)]
                    for p, res in go(open_body(a, names), (*pos, i)):
                        new = close(res, [n.name for n in names])
                        yield p, node(s.con, s.args[:i] + (new,) + s.args[i + 1:], s.binders)
                else:
                    for p, res in go(a, (*pos, i)):
                        yield p, node(s.con, s.args[:i] + (res,) + s.args[i + 1:], s.binders)

    for p, res in go(t, ()):
        yield _pos(p), res


def rewrite_everywhere(calc: Calculus, t: Term, f: Callable[[Term], Term | None],
                       relevant: Callable[[Node], bool] | None = None,
                       memo: dict[Term, bool] | None = None) -> Term:
    """``t`` with ``f`` applied once, bottom-up, at every place where it applies (the
    arguments of opaque nodes included: equal values substituted give equal terms).
    ``relevant`` says which opaque nodes ``f`` may apply at: subterms without one are
    left alone (and their binders unopened)."""
    if relevant is not None:
        memo = {} if memo is None else memo
        if not _contains(t, relevant, memo):
            return t
    if isinstance(t, Node) and info(t) is not None:
        t = node(t.con, [rewrite_everywhere(calc, a, f, relevant, memo) for a in t.args],
                 t.binders)
    elif isinstance(t, Node):
        args = []
        for i, (a, k) in enumerate(zip(t.args, t.binders, strict=True)):
            if k and (relevant is None or _contains(a, relevant, memo or {})):
                names = [fresh(ns) for ns in _binder_sorts(calc, t.con, i, k)]
                inner = rewrite_everywhere(calc, open_body(a, names), f, relevant, memo)
                args.append(close(inner, [n.name for n in names]))
            elif k:
                args.append(a)
            else:
                args.append(rewrite_everywhere(calc, a, f, relevant, memo))
        t = node(t.con, args, t.binders)
    got = f(t)
    return t if got is None else got


def _contains(t: Term, relevant: Callable[[Node], bool], memo: dict[Term, bool]) -> bool:
    got = memo.get(t)
    if got is None:
        got = isinstance(t, Node) and (
            (info(t) is not None and relevant(t)) or any(_contains(a, relevant, memo)
                                                         for a in t.args))
        memo[t] = got
    return got


# ---------------------------------------------------------------- rules as cases


@dataclass
class RuleInstance:
    """A rule's two sides with an opaque metavariable for each metavariable of its left."""

    rule: Rule
    lhs: Term
    rhs: Term
    metas: dict[str, Node]


def instantiate_rule(calc: Calculus, rule: Rule, outer: Sequence[Name],
                     labels: Callable[[str], str]) -> RuleInstance:
    """``outer``: names every metavariable may contain besides the binders above it."""
    if _has_context(rule.lhs):
        raise Stuck(f"rule {rule.name} has a context on its left")
    fresh_in: dict[str, set[str]] = {}
    for cond in rule.conditions:
        if cond.kind == "fresh" and isinstance(cond.term, PMeta):
            fresh_in.setdefault(cond.term.name, set()).add(cond.name.name)
    b: dict[str, Term] = {}
    metas: dict[str, Node] = {}

    def walk(p: Pattern, scope: list[tuple[str, Name]]) -> None:
        if isinstance(p, PMeta):
            if p.name in metas:
                return
            hidden = fresh_in.get(p.name, set())
            params = list(outer) + [v for n, v in scope if n not in hidden]
            m = new_meta(calc, p.sort, params, labels(p.sort))
            metas[p.name] = m
            b[p.name] = m
        elif isinstance(p, PName):
            if p.name not in b:
                b[p.name] = fresh(p.names_sort)
        elif isinstance(p, PCon):
            shape = calc.shapes.get(p.con)
            for i, a in enumerate(p.args):
                if isinstance(a, PAbs):
                    bsorts = shape.binder_sorts[i] if shape else ("",) * len(a.names)
                    inner = list(scope)
                    for n, ns in zip(a.names, bsorts, strict=True):
                        v = b.get(n)
                        if not isinstance(v, Name):
                            v = fresh(ns)
                            b[n] = v
                        inner.append((n, v))
                    walk(a.body, inner)
                else:
                    walk(a, scope)
        else:
            raise Stuck(f"rule {rule.name}: a left side with {type(p).__name__}")

    walk(rule.lhs, [])
    lhs = build(calc, rule.lhs, b)
    rhs = build(calc, rule.rhs, b)
    return RuleInstance(rule, lhs, rhs, metas)


def _has_context(p: Pattern) -> bool:
    if isinstance(p, PPlug):
        return True
    if isinstance(p, PCon):
        return any(_has_context(a.body if isinstance(a, PAbs) else a) for a in p.args)
    return False


def steps_keep_sorts(calc: Calculus, group: str | None = None, sort: str | None = None
                     ) -> tuple[bool, str]:
    """Whether a step keeps a term of ``sort`` in ``sort`` (every sort when None): for every
    rule, every sort that a derivation in ``sort`` may use and the left side may have is a
    sort the right side surely has.  A derivation of the term in ``sort`` then stays one
    after the step (a node's sorts grow with its children's), wherever the step is taken."""
    g = grammar(calc)
    within = g.depends.get(sort, frozenset()) if sort is not None else None
    for rule in calc.rules_of(group):
        try:
            inst = instantiate_rule(calc, rule, (), lambda s: "M")
        except Stuck as e:
            return False, str(e)
        sure = g.state(inst.rhs)
        for q in possible_states(calc, inst.lhs):
            need = q if within is None else q & within
            if not need <= sure:
                missing = ", ".join(sorted(need - sure))
                return False, f"rule {rule.name} may take a term of sort {missing} out of it"
    return True, ""


# ---------------------------------------------------------------- printing


def show(calc_of: Callable[[str], Calculus | None], t: Term, calc: Calculus) -> str:
    """``t`` in abstract form, as a claim writes terms: opaque parts by their labels, a
    pending substitution as ``M1[x := V]``, internal names by readable ones."""
    return _Printer(calc_of).term(t, calc, [])


class _Printer:
    def __init__(self, calc_of: Callable[[str], Calculus | None]):
        self.calc_of = calc_of
        self.names: dict[str, str] = {}
        self.used: set[str] = set()

    def free_name(self, text: str, calc: Calculus) -> str:
        got = self.names.get(text)
        if got is not None:
            return got
        if not text.startswith("#"):
            self.names[text] = text
            self.used.add(text)
            return text
        label = LABELS.get(text)
        if label and label not in self.used:
            shown = label
        else:
            ns_name = calc.names_sort_of(text)
            ns = calc.names_sorts.get(ns_name) if ns_name else None
            labelled = set(LABELS.values())
            i = 0
            while True:
                shown = ns.canonical_name(i) if ns else f"n{i}"
                if shown not in self.used and shown not in calc.shapes and shown not in labelled:
                    break
                i += 1
        self.names[text] = shown
        self.used.add(shown)
        return shown

    def term(self, t: Term, calc: Calculus, env: list[str]) -> str:
        if isinstance(t, Name):
            return self.free_name(t.name, calc)
        if isinstance(t, Bound):
            return env[-1 - t.index] if t.index < len(env) else f"^{t.index}"
        assert isinstance(t, Node)
        o = info(t)
        if o is not None:
            return self.opaque(t, o, calc, env)
        if not t.args:
            return t.con
        parts = []
        for i, (a, k) in enumerate(zip(t.args, t.binders, strict=True)):
            if not k:
                parts.append(self.term(a, calc, env))
                continue
            bsorts = _binder_sorts(calc, t.con, i, k)
            hints = _binder_hints(a, k)
            names = []
            for j, ns in enumerate(bsorts):
                hint = hints.get(j)
                shown = self.free_name(hint, calc) if hint else None
                if shown is None or shown in env or shown in names:
                    shown = self.binder_name(calc, ns, env + names)
                names.append(shown)
            parts.append("".join(n + "." for n in names) + self.term(a, calc, env + names))
        return f"{t.con}({', '.join(parts)})"

    def binder_name(self, calc: Calculus, ns_name: str, env: list[str]) -> str:
        ns = calc.names_sorts.get(ns_name)
        i = 0
        while True:
            cand = ns.canonical_name(i) if ns else f"n{i}"
            if cand not in env and cand not in self.used and cand not in calc.shapes:
                return cand
            i += 1

    def opaque(self, t: Node, o: Opaque, calc: Calculus, env: list[str]) -> str:
        own = self.calc_of(o.calc) or calc
        if o.kind == "call":
            # names (and bound names) renaming the call's parameters rename its argument;
            # any other value is a substitution pending on the call's result
            renaming = {p: a for p, a in zip(o.params, t.args, strict=True)
                        if isinstance(a, Name | Bound)}
            args = tuple(_instantiate(a, renaming, 0) for a in o.template)
            arg_calc = self.calc_of(_source_of(o)) or own
            shown = [self.term(a, arg_calc if i == 0 else own, env) for i, a in enumerate(args)]
            text = f"{o.fn}({', '.join(shown)})"
            pending = [f"{self.free_name(p, own)} := {self.term(a, own, env)}"
                       for p, a in zip(o.params, t.args, strict=True) if p not in renaming]
            return text + (f"[{', '.join(pending)}]" if pending else "")
        pairs = []
        for p, a in zip(o.params, t.args, strict=True):
            if isinstance(a, Name) and a.name == p:
                continue
            pn = self.free_name(p, own)
            av = self.term(a, own, env)
            if av != pn:
                pairs.append(f"{pn} := {av}")
        return o.label + (f"[{', '.join(pairs)}]" if pairs else "")


def _binder_hints(body: Term, k: int) -> dict[int, str]:
    """For the ``k`` binders over ``body``: the parameter of an opaque node that the j-th
    binder (outermost first) instantiates, so the binder is shown with that name."""
    out: dict[int, str] = {}

    def go(t: Term, depth: int) -> None:
        if not isinstance(t, Node):
            return
        o = info(t)
        if o is not None:
            for p, a in zip(o.params, t.args, strict=True):
                if isinstance(a, Bound) and depth <= a.index < depth + k:
                    out.setdefault(k - 1 - (a.index - depth), p)
            return
        for a, b in zip(t.args, t.binders, strict=True):
            go(a, depth + b)

    go(body, 0)
    return out


def call_arguments_raw(t: Node) -> tuple[Term, ...]:
    """A call node's arguments with its parameters replaced by its (possibly loose) args."""
    o = OPAQUES[t.con]
    mapping = dict(zip(o.params, t.args, strict=True))
    return tuple(_instantiate(a, mapping, 0) for a in o.template)


_SOURCES: dict[str, str] = {}


def _source_of(o: Opaque) -> str:
    return _SOURCES.get(o.translation, o.calc)


def note_translation(tr: Translation) -> None:
    _SOURCES[tr.name] = tr.source


def is_context(v: object) -> bool:
    return isinstance(v, Context)
