"""Matching spec patterns against interned terms: sorts, binders, contexts, conditions.

A :data:`Binding` maps metavariables as written (``M``, ``V1``, ``x``, ``E``)
to values: a :class:`~calcscout.rules.core.terms.Term` for a sort metavariable, a
:class:`~calcscout.rules.core.terms.Name` for a names metavariable, a :class:`Context` for a
context metavariable.

Binders are opened, never matched as indices: matching ``lam(x.M)`` opens the
abstraction with an internal fresh name (``#var:1``) that avoids every free
name of the matched term, of the initial binding and of every name opened so
far, and binds ``x`` to it.  So ``M`` sees the bound name as a free name, a
metavariable matched outside the binder cannot contain it (it is fresh), and
instantiating a right-hand side closes over it again.  In locally nameless
form this is the scope check of higher-order patterns (Miller 1991): a
metavariable may mention exactly the names bound above it.

>>> from calcscout.rules.core.spec import Calculus, NamesSort, Sort, Shape, AltNames, AltCon, Arg
>>> from calcscout.rules.core.spec import PCon, PAbs, PMeta
>>> from calcscout.rules.core.terms import node, bound, name
>>> calc = Calculus("c", {"var": NamesSort("var", ("x",))},
...     {"term": Sort("term", ("M", "N"), (AltNames("var"),
...         AltCon("lam", (Arg(("var",), "term"),)), AltCon("app", (Arg((), "term"),) * 2)))},
...     {"lam": Shape("lam", (("var",),)), "app": Shape("app", ((), ()))}, ())
>>> pat = PCon("app", (PCon("lam", (PAbs(("x",), PMeta("M", "term")),)), PMeta("N", "term")))
>>> [b["M"] for b in match(calc, pat, node("app", (node("lam", (bound(0),), (1,)), name("y"))))]
[<Name #var:1>]
"""

from __future__ import annotations

from collections.abc import Iterable, Iterator, Mapping
from dataclasses import dataclass
from functools import cached_property

from calcscout.rules.core.sorts import Grammar, grammar
from calcscout.rules.core.spec import (
    AltCon,
    AltHole,
    AltSort,
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
)
from calcscout.rules.core.terms import (
    Bound,
    Name,
    Node,
    Term,
    close,
    fresh_name,
    name,
    node,
    open_body,
    rename_free,
)

# ---------------------------------------------------------------- contexts


@dataclass(frozen=True)
class Frame:
    """One constructor on the path from a context's root to its hole.

    ``args`` are the constructor's arguments as they stand in the term, with
    ``None`` at the hole; ``fresh`` are the names that opened the hole
    argument's binders (outermost first), so that plugging closes over them.
    """

    con: str
    binders: tuple[int, ...]
    args: tuple[Term | None, ...]
    hole: int
    fresh: tuple[str, ...] = ()


_MARKER = node("#hole")  # an internal constructor no user can spell


@dataclass(frozen=True)
class Context:
    """A one-hole context, as the frames from the root to the hole."""

    frames: tuple[Frame, ...] = ()

    def plug(self, term: Term) -> Term:
        """``E[term]``: names bound above the hole capture, as on paper."""
        for f in reversed(self.frames):
            body = close(term, f.fresh) if f.fresh else term
            term = node(f.con, f.args[: f.hole] + (body,) + f.args[f.hole + 1 :], f.binders)
        return term

    @property
    def position(self) -> tuple[int, ...]:
        """The hole's position: argument indices from the root."""
        return tuple(f.hole for f in self.frames)

    @property
    def fresh_names(self) -> tuple[str, ...]:
        """Every name opened on the way to the hole (all of them are bound at the hole)."""
        return tuple(n for f in self.frames for n in f.fresh)

    @cached_property
    def shape(self) -> Term:
        """The context with a marker in its hole: α-canonical, so two contexts
        are the same context iff their shapes are the same term."""
        return self.plug(_MARKER)

    @property
    def free(self) -> frozenset[str]:
        """The free names of the context itself (its bound names excluded)."""
        return frozenset(self.shape.free)


Value = Term | Context
Binding = Mapping[str, Value]


def value_names(value: Value) -> Iterable[str]:
    """Every name a value mentions freely or has opened (what fresh names must avoid)."""
    if isinstance(value, Context):
        yield from value.shape.free
        yield from value.fresh_names
    else:
        yield from value.free


def binding_names(binding: Binding) -> set[str]:
    out: set[str] = set()
    for v in binding.values():
        out.update(value_names(v))
    return out


# ---------------------------------------------------------------- membership


def is_member(calc: Calculus, g: Grammar, term: Term, sort: str, env: tuple[str, ...] = ()) -> bool:
    """``term : sort``, where ``sort`` may also be a names sort; ``env[i]`` is
    the names sort of index ``i``."""
    if sort in calc.names_sorts:
        if isinstance(term, Name):
            return calc.names_sort_of(term.name) == sort
        if isinstance(term, Bound):
            return term.index < len(env) and env[term.index] == sort
        return False
    return g.member(term, sort, env)


# ---------------------------------------------------------------- decompositions


@dataclass(frozen=True)
class _ContextAlts:
    has_hole: bool
    # (con, hole index, context sort of the hole, ((names sorts, sort) of every argument))
    cons: tuple[tuple[str, int, str, tuple[tuple[tuple[str, ...], str], ...]], ...]


_context_alts_memo: dict[tuple[int, str], tuple[Calculus, _ContextAlts]] = {}


def _context_alts(calc: Calculus, sort: str) -> _ContextAlts:
    """The alternatives of context sort ``sort`` and of the context sorts it
    includes (closed under subsorts, so cycles among them cannot loop)."""
    key = (id(calc), sort)
    got = _context_alts_memo.get(key)
    if got is not None and got[0] is calc:
        return got[1]
    if sort not in calc.sorts or not calc.sorts[sort].is_context:
        raise ValueError(f"{sort} is not a context sort of calculus {calc.name}")
    seen = [sort]
    has_hole = False
    cons: list = []
    i = 0
    while i < len(seen):
        for alt in calc.sorts[seen[i]].alts:
            if isinstance(alt, AltHole):
                has_hole = True
            elif isinstance(alt, AltSort):
                sub = calc.sorts.get(alt.sort)
                if sub is not None and sub.is_context and alt.sort not in seen:
                    seen.append(alt.sort)
            elif isinstance(alt, AltCon):
                holes = [
                    j
                    for j, a in enumerate(alt.args)
                    if a.sort in calc.sorts and calc.sorts[a.sort].is_context
                ]
                if len(holes) != 1:
                    raise ValueError(f"context alternative {alt.con} needs exactly one hole")
                args = tuple((a.binder_sorts, a.sort) for a in alt.args)
                entry = (alt.con, holes[0], alt.args[holes[0]].sort, args)
                if entry not in cons:
                    cons.append(entry)
        i += 1
    out = _ContextAlts(has_hole, tuple(cons))
    _context_alts_memo[key] = (calc, out)
    return out


def binder_sorts(calc: Calculus, con: str, i: int, k: int) -> tuple[str, ...]:
    """The names sorts bound by argument ``i`` of ``con`` (outermost first)."""
    shape = calc.shapes.get(con)
    if shape is not None and i < shape.arity and len(shape.binder_sorts[i]) == k:
        return shape.binder_sorts[i]
    first = next(iter(calc.names_sorts), "")
    return (first,) * k


def decompositions(
    calc: Calculus, sort: str, term: Term, avoid: Iterable[str] = ()
) -> Iterator[tuple[Context, Term]]:
    """Every way to write ``term`` as ``E[s]`` with ``E`` of context sort ``sort``.

    Yields ``(E, s)``, each decomposition once, from the root outwards
    (shallower holes first within one alternative, in declaration order).  A
    hole under a binder opens it with a fresh name avoiding ``avoid`` and the
    term's free names, so ``s`` is locally closed.
    """
    g = grammar(calc)
    taken = set(avoid) | set(term.free)
    seen: set[tuple[Frame, ...]] = set()
    for frames, s in _decompose(calc, g, sort, term, taken, ()):
        if frames not in seen:
            seen.add(frames)
            yield Context(frames), s


def _decompose(calc, g, sort, term, taken, frames):
    alts = _context_alts(calc, sort)
    if alts.has_hole:
        yield frames, term
    if not isinstance(term, Node):
        return
    for con, hole, sub, args in alts.cons:
        if con != term.con or len(args) != len(term.args):
            continue
        if tuple(len(b) for b, _ in args) != term.binders:
            continue
        ok = True
        for j, (bsorts, asort) in enumerate(args):
            if j != hole and not is_member(calc, g, term.args[j], asort, tuple(reversed(bsorts))):
                ok = False
                break
        if not ok:
            continue
        body = term.args[hole]
        k = term.binders[hole]
        fresh: tuple[str, ...] = ()
        if k:
            names = []
            inner = set(taken)
            for ns in binder_sorts(calc, con, hole, k):
                n = fresh_name(inner, base=f"{ns}:")
                inner.add(n)
                names.append(n)
            fresh = tuple(names)
            body = open_body(body, [name(n) for n in fresh])
        else:
            inner = taken
        frame = Frame(con, term.binders, term.args[:hole] + (None,) + term.args[hole + 1 :],
                      hole, fresh)
        yield from _decompose(calc, g, sub, body, inner, (*frames, frame))


# ---------------------------------------------------------------- matching


def match(
    calc: Calculus,
    pattern: Pattern,
    term: Term,
    binding: Binding | None = None,
    avoid: Iterable[str] = (),
) -> Iterator[dict[str, Value]]:
    """Every binding, extending ``binding``, under which ``pattern`` is ``term``.

    ``term`` must be locally closed.  Fresh names opened for binders avoid the
    free names of ``term``, of the values of ``binding`` and ``avoid``: pass
    there any name the caller will put next to the result (an extra
    parameter of a translation function, say), or it may be captured.
    Several bindings come only from contexts (``E[P]``) and ambiguous sorts
    never add any; each is yielded once.
    """
    if type(pattern) is PCon and (type(term) is not Node or term.con != pattern.con):
        return  # the usual miss (equations tried in order), before any set is built
    b = dict(binding) if binding else {}
    taken = frozenset(term.free) | binding_names(b) | frozenset(avoid)
    m = _Matcher(calc)
    if _is_plain(pattern):
        if m.one(pattern, term, b, taken) is not None:
            yield b
        return
    for out, _ in m.match(pattern, term, b, taken):
        yield out


_plain_memo: dict[int, tuple[Pattern, bool]] = {}


def _is_plain(p: Pattern) -> bool:
    """Whether ``p`` has no context hole: then it matches in at most one way,
    and :meth:`_Matcher.one` finds that way without generators."""
    got = _plain_memo.get(id(p))
    if got is not None and got[0] is p:
        return got[1]
    out = _plain(p, top=True)
    if len(_plain_memo) > 4096:
        _plain_memo.clear()
    _plain_memo[id(p)] = (p, out)
    return out


def _plain(p: Pattern, top: bool = False) -> bool:
    if isinstance(p, (PMeta, PName)):
        return True
    if isinstance(p, PCon):
        return all(
            _plain(a.body) if isinstance(a, PAbs) else _plain(a) for a in p.args
        )
    return False  # contexts, and what the general matcher reports as misuse


class _Matcher:
    __slots__ = ("calc", "g")

    def __init__(self, calc: Calculus):
        self.calc = calc
        self.g = grammar(calc)

    def match(self, p: Pattern, t: Term, b: dict, taken: frozenset[str]):
        """Yield ``(binding, taken)``; ``taken`` grows with every name opened."""
        if isinstance(p, PMeta):
            if self.calc.sorts.get(p.sort) is not None and self.calc.sorts[p.sort].is_context:
                raise ValueError(f"context metavariable {p.name} used without a hole")
            old = b.get(p.name)
            if old is not None:
                if old is t:
                    yield b, taken
                return
            if is_member(self.calc, self.g, t, p.sort):
                b = dict(b)
                b[p.name] = t
                yield b, taken
            return
        if isinstance(p, PName):
            if not isinstance(t, Name) or self.calc.names_sort_of(t.name) != p.names_sort:
                return
            old = b.get(p.name)
            if old is not None:
                if old is t:
                    yield b, taken
                return
            b = dict(b)
            b[p.name] = t
            yield b, taken
            return
        if isinstance(p, PCon):
            if not isinstance(t, Node) or t.con != p.con or len(t.args) != len(p.args):
                return
            shape = self.calc.shapes.get(p.con)
            if shape is not None and shape.binders != t.binders:
                return
            yield from self._args(p, t, 0, b, taken)
            return
        if isinstance(p, PPlug):
            yield from self._plug(p, t, b, taken)
            return
        if isinstance(p, PAbs):
            raise ValueError("an abstraction pattern stands only as a constructor argument")
        if isinstance(p, (PSubst, PCall)):
            raise ValueError("substitutions and calls are not patterns (right-hand sides only)")
        raise TypeError(f"not a pattern: {p!r}")

    def one(self, p: Pattern, t: Term, b: dict,
            taken: frozenset[str]) -> frozenset[str] | None:
        """:meth:`match` for a pattern without contexts: None if it does not
        match, else the names taken after it, ``b`` extended in place (the
        same binding, fresh names included, as the only one :meth:`match`
        yields)."""
        if isinstance(p, PMeta):
            sort = self.calc.sorts.get(p.sort)
            if sort is not None and sort.is_context:
                raise ValueError(f"context metavariable {p.name} used without a hole")
            old = b.get(p.name)
            if old is not None:
                return taken if old is t else None
            if is_member(self.calc, self.g, t, p.sort):
                b[p.name] = t
                return taken
            return None
        if isinstance(p, PName):
            if not isinstance(t, Name) or self.calc.names_sort_of(t.name) != p.names_sort:
                return None
            old = b.get(p.name)
            if old is not None:
                return taken if old is t else None
            b[p.name] = t
            return taken
        assert isinstance(p, PCon)
        if not isinstance(t, Node) or t.con != p.con or len(t.args) != len(p.args):
            return None
        shape = self.calc.shapes.get(p.con)
        if shape is not None and shape.binders != t.binders:
            return None
        for i, a in enumerate(p.args):
            k = t.binders[i]
            body = t.args[i]
            if not isinstance(a, PAbs):
                got = self.one(a, body, b, taken) if k == 0 else None
                if got is None:
                    return None
                taken = got
                continue
            if len(a.names) != k:
                return None
            sorts = binder_sorts(self.calc, t.con, i, k)
            names: list[Name] = []
            for n, ns in zip(a.names, sorts, strict=True):
                old = b.get(n)
                if old is not None:
                    if not isinstance(old, Name) or old.name in body.free:
                        return None
                    names.append(old)
                    continue
                fresh = fresh_name(taken, base=f"{ns}:")
                taken = taken | {fresh}
                v = name(fresh)
                b[n] = v
                names.append(v)
            got = self.one(a.body, open_body(body, names), b, taken)
            if got is None:
                return None
            taken = got
        return taken

    def _args(self, p: PCon, t: Node, i: int, b: dict, taken):
        if i == len(p.args):
            yield b, taken
            return
        for b2, taken2 in self._arg(p, t, i, b, taken):
            yield from self._args(p, t, i + 1, b2, taken2)

    def _arg(self, p: PCon, t: Node, i: int, b: dict, taken):
        a = p.args[i]
        k = t.binders[i]
        body = t.args[i]
        if not isinstance(a, PAbs):
            if k == 0:
                yield from self.match(a, body, b, taken)
            return
        if len(a.names) != k:
            return
        sorts = binder_sorts(self.calc, t.con, i, k)
        names: list[Name] = []
        copied = False
        for n, ns in zip(a.names, sorts, strict=True):
            old = b.get(n)
            if old is not None:
                # The same binder name again (``pair(lam(x.M), lam(x.N))``): open
                # with the same name, which is possible only where it is not
                # already free there (otherwise the binder would capture it).
                if not isinstance(old, Name) or old.name in body.free:
                    return
                names.append(old)
                continue
            fresh = fresh_name(taken, base=f"{ns}:")
            taken = taken | {fresh}
            v = name(fresh)
            if not copied:
                b = dict(b)
                copied = True
            b[n] = v
            names.append(v)
        yield from self.match(a.body, open_body(body, names), b, taken)

    def _plug(self, p: PPlug, t: Term, b: dict, taken):
        e = p.context.name
        old = b.get(e)
        for ctx, s in decompositions(self.calc, p.context.sort, t, taken):
            ctaken = taken | set(ctx.fresh_names)
            if old is None:
                b2 = dict(b)
                b2[e] = ctx
                yield from self.match(p.arg, s, b2, ctaken)
                continue
            if not isinstance(old, Context) or old.shape is not ctx.shape:
                continue
            # A repeated context: rename this decomposition's opened names to the
            # first one's, so that one plugging closes over both.
            new, was = ctx.fresh_names, old.fresh_names
            if any(n in s.free for n in was):
                continue
            yield from self.match(p.arg, rename_free(s, dict(zip(new, was, strict=True))), b,
                                  ctaken)


# ---------------------------------------------------------------- conditions


def free_names(pattern: Pattern, binding: Binding) -> frozenset[str]:
    """The free names of ``pattern`` instantiated by ``binding``, without building it."""
    if isinstance(pattern, PMeta):
        v = binding[pattern.name]
        return v.free if isinstance(v, Context) else frozenset(v.free)
    if isinstance(pattern, PName):
        v = binding.get(pattern.name)
        return frozenset((v.name,)) if isinstance(v, Name) else frozenset()
    if isinstance(pattern, PAbs):
        inner = free_names(pattern.body, binding)
        bound_here = {v.name for n in pattern.names if isinstance(v := binding.get(n), Name)}
        return inner - bound_here
    if isinstance(pattern, (PCon, PCall)):
        out: frozenset[str] = frozenset()
        for a in pattern.args:
            out |= free_names(a, binding)
        return out
    if isinstance(pattern, PPlug):
        ctx = binding[pattern.context.name]
        assert isinstance(ctx, Context)
        return ctx.free | (free_names(pattern.arg, binding) - set(ctx.fresh_names))
    if isinstance(pattern, PSubst):
        body = free_names(pattern.body, binding)
        out = set(body)
        for x, q in pattern.pairs:
            v = binding.get(x.name)
            if isinstance(v, Name) and v.name in body:
                out.discard(v.name)
                out |= free_names(q, binding)
        return frozenset(out)
    raise TypeError(f"not a pattern: {pattern!r}")


def check_conditions(rule: Rule, binding: Binding) -> bool:
    """Whether ``x fresh in T`` / ``x free in T`` all hold under ``binding``."""
    for cond in rule.conditions:
        v = binding.get(cond.name.name)
        if not isinstance(v, Name):
            raise ValueError(f"rule {rule.name}: {cond.name.name} is not bound on the left")
        occurs = v.name in free_names(cond.term, binding)
        if cond.kind == "fresh" and occurs:
            return False
        if cond.kind == "free" and not occurs:
            return False
    return True


def rule_matches(calc: Calculus, rule: Rule, term: Term) -> Iterator[dict[str, Value]]:
    """The bindings under which ``rule`` applies at the root of ``term``."""
    for b in match(calc, rule.lhs, term):
        if check_conditions(rule, b):
            yield b
