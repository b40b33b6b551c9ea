"""Resolving the patterns of rules: identifiers to metavariables, names and
constructors, with the checks LANGUAGE.md §3 asks of rules."""

from __future__ import annotations

from collections.abc import Iterable
from typing import TYPE_CHECKING

from calcscout.rules.core.sorts import grammar
from calcscout.rules.core.spec import (
    AltCon,
    Calculus,
    Condition,
    PAbs,
    Pattern,
    PCall,
    PCon,
    PMeta,
    PName,
    Pos,
    PPlug,
    PSubst,
    Rule,
    Shape,
    base_meta,
)
from calcscout.rules.loading.syntax import RawArg, RawPattern, RawRule

if TYPE_CHECKING:
    from calcscout.rules.loading.diagnostics import Diagnostics


def shape_problem(raw: RawPattern, shape: Shape) -> tuple[str, Pos, str | None] | None:
    """Why ``c(args)`` as written does not fit the constructor's shape (message, place, hint)."""
    n = shape.arity
    if len(raw.args) != n:
        return (f"constructor {raw.name} takes {n} argument{'s' if n != 1 else ''}, here "
                f"{len(raw.args)}", raw.pos, None)
    for i, (a, bsorts) in enumerate(zip(raw.args, shape.binder_sorts, strict=True)):
        if len(a.binders) != len(bsorts):
            k = len(bsorts)
            hint = f"write it as {'.'.join(['x'] * k)}.M" if k else "write it without a binder"
            return (f"argument {i + 1} of {raw.name} binds {k} name{'s' if k != 1 else ''}, "
                    f"here {len(a.binders)}",
                    a.binders[0][1] if a.binders else a.pattern.pos, hint)
    return None


class PatternResolver:
    """Resolves raw patterns against one calculus."""

    def __init__(self, calc: Calculus, loader: Diagnostics):
        self.calc = calc
        self.loader = loader
        self.ok = True
        # metavariables not declared by the calculus but inferred from their use
        # (an equation's pattern variable passed to a function): name -> sort
        self.inferred: dict[str, str] = {}

    def error(self, message: str, pos: Pos | None, hint: str | None = None) -> None:
        self.ok = False
        self.loader.error(message, pos, hint)

    def owner(self, text: str) -> str | None:
        return (self.calc.metas.get(text) or self.calc.metas.get(base_meta(text))
                or self.inferred.get(text))

    def is_context(self, sort: str | None) -> bool:
        s = self.calc.sorts.get(sort or "")
        return bool(s and s.is_context)

    # ------------------------------------------------------------ generic

    def resolve(self, raw: RawPattern, side: str) -> Pattern | None:
        """``side`` is 'lhs' or 'rhs' (substitution only on the right)."""
        if raw.kind == "ident":
            owner = self.owner(raw.name)
            if owner is not None:
                if owner in self.calc.names_sorts:
                    return PName(raw.name, owner, raw.pos)
                return PMeta(raw.name, owner, raw.pos)
            shape = self.calc.shapes.get(raw.name)
            if shape is not None:
                if shape.arity:
                    self.error(f"constructor {raw.name} takes {shape.arity} argument"
                               f"{'s' if shape.arity != 1 else ''}", raw.pos)
                    return None
                return PCon(raw.name, (), raw.pos)
            self.error(f"unknown identifier {raw.name}: not a metavariable or constructor of "
                       f"calculus {self.calc.name}", raw.pos,
                       hint=self.suggest(raw.name))
            return None
        if raw.kind == "app":
            return self.constructor(raw, side)
        if raw.kind == "plug":
            assert raw.base is not None
            ctx = raw.base
            owner = self.owner(ctx.name) if ctx.kind == "ident" else None
            if owner is None or not self.is_context(owner):
                self.error(f"{ctx.text()}[...] plugs into something that is not a context "
                           "metavariable", ctx.pos,
                           hint="only a context metavariable (declared with `context`) has a hole")
                return None
            arg = self.resolve(raw.args[0].pattern, side)
            if arg is None:
                return None
            return PPlug(PMeta(ctx.name, owner, ctx.pos), arg, raw.pos)
        assert raw.base is not None
        if side == "lhs":
            self.error("a substitution P[x := Q] cannot stand in a left-hand side", raw.pos,
                       hint="substitutions belong on the right of ->")
            return None
        body = self.resolve(raw.base, side)
        pairs = []
        for n, npos, val in raw.pairs:
            owner = self.owner(n)
            if owner not in self.calc.names_sorts:
                self.error(f"{n} := ... substitutes for {n}, which is not a names metavariable",
                           npos)
                return None
            v = self.resolve(val, side)
            if v is None:
                return None
            pairs.append((PName(n, owner, npos), v))
        if body is None:
            return None
        return PSubst(body, tuple(pairs), raw.pos)

    def constructor(self, raw: RawPattern, side: str) -> Pattern | None:
        shape = self.calc.shapes.get(raw.name)
        if shape is None:
            self.error(f"unknown constructor {raw.name} in calculus {self.calc.name}", raw.pos,
                       hint=self.suggest(raw.name))
            return None
        problem = shape_problem(raw, shape)
        if problem is not None:
            self.error(*problem)
            return None
        args: list[Pattern] = []
        for a, bsorts in zip(raw.args, shape.binder_sorts, strict=True):
            got = self.abstraction(a, bsorts, side)
            if got is None:
                return None
            args.append(got)
        return PCon(raw.name, tuple(args), raw.pos)

    def abstraction(self, a: RawArg, bsorts: Iterable[str], side: str) -> Pattern | None:
        names = []
        for (b, bpos), want in zip(a.binders, bsorts, strict=True):
            owner = self.owner(b)
            if owner is not None and owner != want:
                self.error(f"{b} ranges over {owner}, but this binder binds names of {want}",
                           bpos)
                return None
            if owner is None and side == "lhs":
                self.error(f"{b} is not a names metavariable of calculus {self.calc.name}",
                           bpos)
                return None
            names.append(b)
        body = self.resolve(a.pattern, side)
        if body is None:
            return None
        if not names:
            return body
        return PAbs(tuple(names), body, a.pattern.pos)

    def suggest(self, word: str) -> str | None:
        return self.loader.suggest(word, [*self.calc.metas, *self.calc.shapes])

    # ------------------------------------------------------------ rules

    def rule(self, raw: RawRule) -> Rule | None:
        self.ok = True
        lhs = self.resolve(raw.lhs, "lhs")
        if lhs is None:
            return None
        if isinstance(lhs, PMeta | PName):
            self.error("a rule's left-hand side cannot be a bare metavariable", lhs.pos,
                       hint="a bare metavariable would rewrite every term")
            return None
        if isinstance(lhs, PPlug) and isinstance(lhs.arg, PMeta | PName):
            self.error("a left-hand side E[M] with a bare metavariable would rewrite every "
                       "term", lhs.pos)
            return None
        bound_metas, scopes = lhs_bindings(lhs)
        rhs = self.resolve(raw.rhs, "rhs")
        if rhs is None:
            return None
        conditions = []
        for kind, n, npos, term in raw.conditions:
            owner = self.owner(n)
            if owner not in self.calc.names_sorts:
                self.error(f"the condition names {n}, which is not a names metavariable", npos)
                continue
            if n not in bound_metas:
                self.error(f"the condition names {n}, which the left-hand side does not bind",
                           npos)
                continue
            t = self.resolve(term, "rhs")
            if t is None:
                continue
            for m in metas_of(t):
                if m.name not in bound_metas:
                    self.error(f"the condition mentions {m.name}, which the left-hand side does "
                               "not bind", m.pos)
            conditions.append(Condition(kind, PName(n, owner, npos), t, npos))
        self.check_rhs(rhs, bound_metas, scopes, conditions, frozenset())
        if not self.ok:
            return None
        return Rule(raw.name, lhs, rhs, tuple(dict.fromkeys(raw.groups)), tuple(conditions),
                    raw.pos)

    def check_rhs(self, p: Pattern, bound: dict[str, Pattern], scopes: dict[str, frozenset[str]],
                  conditions: list[Condition], allowed: frozenset[str]) -> None:
        """Every metavariable bound by the left; names under a binder stay under it."""
        if isinstance(p, PMeta):
            if p.name not in bound:
                self.error(f"a metavariable on the right ({p.name}) that the left does not bind",
                           p.pos, hint="every metavariable of the right-hand side must occur "
                           "on the left")
                return
            if self.is_context(p.sort):
                self.error(f"the context {p.name} must be plugged: write {p.name}[...]", p.pos)
                return
            fresh = {c.name.name for c in conditions if c.kind == "fresh" and
                     p.name in {m.name for m in metas_of(c.term)} and isinstance(c.term, PMeta)}
            escaping = scopes.get(p.name, frozenset()) - allowed - fresh
            if escaping:
                x = sorted(escaping)[0]
                self.error(f"{p.name} is matched under the binder {x}. but used here outside it",
                           p.pos, hint=f"substitute for it ({p.name}[{x} := ...]), put it under "
                           f"a binder {x}. again, or add the condition `{x} fresh in {p.name}`")
            return
        if isinstance(p, PName):
            if p.name not in bound and p.name not in allowed:
                self.error(f"the name {p.name} on the right is bound neither by the left nor "
                           "by a binder around it", p.pos)
            elif escaping := scopes.get(p.name, frozenset()) - allowed:
                x = sorted(escaping)[0]
                self.error(f"the name {p.name} may be bound by the binder {x}. on the left but "
                           "is used here outside it", p.pos,
                           hint=f"use {p.name} only under a binder {x}. on the right, or match "
                           "it outside every binder on the left too")
            return
        if isinstance(p, PAbs):
            self.check_rhs(p.body, bound, scopes, conditions, allowed | set(p.names))
            return
        if isinstance(p, PCon | PCall):
            for a in p.args:
                self.check_rhs(a, bound, scopes, conditions, allowed)
            return
        if isinstance(p, PPlug):
            if p.context.name not in bound:
                self.error(f"the context {p.context.name} plugged on the right is not bound by "
                           "the left", p.context.pos)
            inner = allowed | scopes.get(p.context.name + "[]", frozenset())
            self.check_rhs(p.arg, bound, scopes, conditions, inner)
            return
        if isinstance(p, PSubst):
            names = frozenset(n.name for n, _ in p.pairs)
            for n, v in p.pairs:
                if n.name not in bound and n.name not in allowed:
                    self.error(f"{n.name} := ... substitutes for a name the left does not bind",
                               n.pos)
                self.check_rhs(v, bound, scopes, conditions, allowed)
            self.check_rhs(p.body, bound, scopes, conditions, allowed | names)

    # ------------------------------------------------------------ sorts

    def check_sorts_of_rules(self, calc: Calculus) -> None:
        for r in calc.rules:
            self.check_arg_sorts(r.lhs, calc, "lhs")
            self.check_arg_sorts(r.rhs, calc, "rhs")

    def check_arg_sorts(self, p: Pattern, calc: Calculus, side: str) -> None:
        """A metavariable directly under a constructor must be able to stand there."""
        g = grammar(calc)
        if isinstance(p, PCon):
            alts = [a for s in calc.sorts.values() for a in s.alts
                    if isinstance(a, AltCon) and a.con == p.con]
            for i, arg in enumerate(p.args):
                inner = arg.body if isinstance(arg, PAbs) else arg
                if isinstance(inner, PMeta) and not self.is_context(inner.sort):
                    want = {a.args[i].sort for a in alts if not self.is_context(a.args[i].sort)}
                    if want and not any(w == inner.sort or g.overlap(inner.sort, w) for w in want):
                        self.loader.error(
                            f"{inner.name} ranges over sort {inner.sort}, but argument {i + 1} "
                            f"of {p.con} takes {' or '.join(sorted(want))}", inner.pos)
                self.check_arg_sorts(arg, calc, side)
        elif isinstance(p, PAbs):
            self.check_arg_sorts(p.body, calc, side)
        elif isinstance(p, PPlug):
            self.check_arg_sorts(p.arg, calc, side)
        elif isinstance(p, PSubst):
            self.check_arg_sorts(p.body, calc, side)
            for _, v in p.pairs:
                self.check_arg_sorts(v, calc, side)


def lhs_bindings(lhs: Pattern) -> tuple[dict[str, Pattern], dict[str, frozenset[str]]]:
    """What a left-hand side binds, and for each metavariable the binder names above it.

    For a name, its entry holds the binder names above every one of its occurrences
    (a binder's own name is under itself): a name used on the right outside them
    could carry a bound name out of its binder.

    The key ``E[]`` records the names bound above the hole's position... of a
    plugged context: none that the pattern can name, so it stays empty.
    """
    bound: dict[str, Pattern] = {}
    scopes: dict[str, frozenset[str]] = {}

    def name_at(n: str, above: frozenset[str]) -> None:
        # A name is outside a binder only if one occurrence is: matching does not
        # keep name metavariables apart, so one seen only under binders may be bound.
        scopes[n] = scopes[n] & above if n in scopes else above

    def walk(p: Pattern, above: frozenset[str]) -> None:
        if isinstance(p, PMeta | PName):
            bound.setdefault(p.name, p)
            if isinstance(p, PMeta):
                scopes[p.name] = scopes.get(p.name, frozenset()) | above
            else:
                name_at(p.name, above)
        elif isinstance(p, PAbs):
            inside = above | set(p.names)
            for n in p.names:
                bound.setdefault(n, PName(n, "", p.pos))
                name_at(n, inside)
            walk(p.body, inside)
        elif isinstance(p, PCon):
            for a in p.args:
                walk(a, above)
        elif isinstance(p, PPlug):
            bound.setdefault(p.context.name, p.context)
            walk(p.arg, above)

    walk(lhs, frozenset())
    return bound, scopes


def metas_of(p: Pattern) -> list[PMeta]:
    out: list[PMeta] = []

    def walk(q: Pattern) -> None:
        if isinstance(q, PMeta):
            out.append(q)
        elif isinstance(q, PAbs):
            walk(q.body)
        elif isinstance(q, PCon | PCall):
            for a in q.args:
                walk(a)
        elif isinstance(q, PPlug):
            out.append(q.context)
            walk(q.arg)
        elif isinstance(q, PSubst):
            walk(q.body)
            for _, v in q.pairs:
                walk(v)

    walk(p)
    return out
