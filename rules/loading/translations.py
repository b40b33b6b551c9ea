"""Resolving and checking translations (LANGUAGE.md §5).

Checks at load time: signatures name sorts of the right calculi; equations are
source patterns over the parameter sort; right-hand sides are built from
target constructors, names from the left, the extra parameters and calls;
every call is structural (and calls that do not take the term apart form no
cycle); every right-hand side is a term of the result sort; and the equations
of each function are exhaustive.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

from calcscout.rules.core.sorts import State, grammar
from calcscout.rules.core.spec import (
    Calculus,
    Equation,
    PAbs,
    Pattern,
    PCall,
    PCon,
    PMeta,
    PName,
    Pos,
    Signature,
    Translation,
    base_meta,
)
from calcscout.rules.loading.exhaustive import describe, missing_case
from calcscout.rules.loading.patterns import PatternResolver, shape_problem
from calcscout.rules.loading.syntax import RawPattern, RawTranslation

if TYPE_CHECKING:
    from calcscout.rules.loading.diagnostics import Diagnostics


def build_translations(raws: dict[str, RawTranslation], calculi: dict[str, Calculus],
                       loader: Diagnostics) -> dict[str, Translation]:
    done: dict[str, Translation] = {}
    for name in raws:
        _build(name, raws, calculi, loader, done, [])
    return done


def _chain(name: str, raws: dict[str, RawTranslation], loader: Diagnostics,
           stack: list[str]) -> list[RawTranslation] | None:
    """The translation and the ones it extends, itself first."""
    raw = raws[name]
    if raw.extends is None:
        return [raw]
    base, pos = raw.extends
    if base in stack or base == name:
        loader.error("translation extension cycle: " + " -> ".join([*stack, name, base]), pos)
        return None
    if base not in raws:
        loader.error(f"translation {name} extends {base}, which is not declared", pos,
                     hint=loader.suggest(base, raws))
        return None
    rest = _chain(base, raws, loader, [*stack, name])
    return None if rest is None else [raw, *rest]


def _build(name, raws, calculi, loader, done, stack) -> Translation | None:
    if name in done:
        return done[name]
    chain = _chain(name, raws, loader, stack)
    if chain is None:
        return None
    raw = chain[0]
    src = _calc(raw.source, calculi, loader)
    dst = _calc(raw.target, calculi, loader)
    if src is None or dst is None:
        return None
    before = len(loader.problems)
    tb = TranslationBuilder(raw, chain, src, dst, loader)
    tr = tb.build()
    if tr is None or len(loader.problems) > before:
        return None
    done[name] = tr
    return tr


def _calc(ref: tuple[str, Pos], calculi: dict[str, Calculus], loader: Diagnostics) -> Calculus | None:
    name, pos = ref
    c = calculi.get(name)
    if c is None:
        loader.error(f"unknown calculus {name}", pos, hint=loader.suggest(name, calculi))
    return c


class TranslationBuilder:
    def __init__(self, raw: RawTranslation, chain: list[RawTranslation], src: Calculus,
                 dst: Calculus, loader: Diagnostics):
        self.raw = raw
        self.chain = chain
        self.src = src
        self.dst = dst
        self.loader = loader
        self.sigs: dict[str, Signature] = {}
        self.ok = True

    def error(self, message: str, pos: Pos | None, hint: str | None = None) -> None:
        self.ok = False
        self.loader.error(message, pos, hint)

    def build(self) -> Translation | None:
        # signatures: the base's first, then this block's (a block may add functions)
        for r in reversed(self.chain):
            for s in r.signatures:
                sig = self.signature(s)
                if sig is None:
                    continue
                if s.fn in self.sigs and r is self.chain[0] and any(
                        x.fn == s.fn for x in r.signatures if x is not s and x.pos.line < s.pos.line):
                    self.error(f"function {s.fn} has two signatures", s.pos)
                self.sigs[s.fn] = sig
        entry = next((r.name for r in self.chain if r.name in self.sigs), None)
        if entry is None:
            self.error(f"translation {self.raw.name} has no entry function: declare "
                       f"`{self.raw.name} : SORT -> SORT`", self.raw.pos,
                       hint="the function that bears the translation's name is its entry")
            return None
        # equations: this block's own first, then the inherited ones
        equations: list[Equation] = []
        for r in self.chain:
            for e in r.equations:
                eq = self.equation(e)
                if eq is not None:
                    equations.append(eq)
        if not self.ok:
            return None
        normalize = None
        for r in self.chain:
            if r.normalize is not None:
                normalize = r.normalize
                break
        if normalize is not None:
            group, gpos = normalize
            if group not in self.dst.groups:
                self.error(f"then normalize {group}: calculus {self.dst.name} has no rule group "
                           f"{group}", gpos, hint=self.loader.suggest(group, self.dst.groups)
                           or f"groups of {self.dst.name}: {', '.join(self.dst.groups) or 'none'}")
                return None
        tr = Translation(self.raw.name, self.src.name, self.dst.name, self.sigs, tuple(equations),
                         entry, normalize[0] if normalize else None,
                         self.raw.extends[0] if self.raw.extends else None, self.raw.pos)
        self.check_cycles(tr)
        self.check_exhaustive(tr)
        return tr if self.ok else None

    # ------------------------------------------------------------ signatures

    def signature(self, s) -> Signature | None:
        if s.fn in self.dst.shapes:
            self.error(f"function {s.fn} has the name of a constructor of {self.dst.name}", s.pos,
                       hint="functions and target constructors must be named apart")
            return None
        params = []
        for i, (p, ppos) in enumerate(s.params):
            calc = self.src if i == 0 else self.dst
            sort = self.sort_of(calc, p, ppos, "the first parameter" if i == 0 else "a parameter")
            if sort is None:
                return None
            params.append(sort)
        rsort = self.sort_of(self.dst, s.result[0], s.result[1], "the result")
        if rsort is None:
            return None
        return Signature(s.fn, tuple(params), rsort, s.pos)

    def sort_of(self, calc: Calculus, name: str, pos: Pos, what: str) -> str | None:
        sort = calc.sorts.get(name)
        if sort is None and calc.metas.get(name) in calc.sorts:
            sort = calc.sorts[calc.metas[name]]
        if sort is None or sort.is_context:
            side = "source" if calc is self.src else "target"
            self.error(f"{what} of a signature must be a sort of the {side} calculus "
                       f"{calc.name}; {name} is not", pos,
                       hint=self.loader.suggest(name, [s for s in calc.sorts
                                                       if not calc.sorts[s].is_context]))
            return None
        return sort.name

    # ------------------------------------------------------------ equations

    def equation(self, e) -> Equation | None:
        sig = self.sigs.get(e.fn)
        if sig is None:
            self.error(f"an equation for {e.fn}, which has no signature in translation "
                       f"{self.raw.name}", e.pos, hint=f"declare `{e.fn} : SORT -> SORT`")
            return None
        if len(e.args) != len(sig.params):
            self.error(f"{e.fn} takes {len(sig.params)} argument(s), here {len(e.args)}", e.pos)
            return None
        src_resolver = PatternResolver(self.src, self.loader)
        src_resolver.inferred = self.inferred_metas(e.rhs)
        first = e.args[0]
        pattern = src_resolver.abstraction(first, (), "lhs") if not first.binders else None
        if pattern is None:
            if first.binders:
                self.error("the first argument of an equation is a pattern, not an abstraction",
                           first.binders[0][1])
            self.ok = False
            return None
        if isinstance(pattern, PMeta):
            g = grammar(self.src)
            if not g.overlap(pattern.sort, sig.params[0]):
                self.error(f"{pattern.name} ranges over {pattern.sort}, which has no term of the "
                           f"parameter sort {sig.params[0]}", pattern.pos)
        extra: list[PMeta] = []
        for a, sort in zip(e.args[1:], sig.params[1:], strict=True):
            if a.binders or a.pattern.kind != "ident":
                self.error("an extra parameter of an equation is a metavariable", a.pattern.pos)
                return None
            extra.append(PMeta(a.pattern.name, sort, a.pattern.pos))
        lhs_names, lhs_metas = _lhs_vars(pattern, self.src)
        scope = RhsScope(lhs_names, lhs_metas, {m.name: m for m in extra})
        rhs = self.rhs(e.rhs, scope, frozenset())
        if rhs is None:
            return None
        self.check_binder_scopes(pattern, rhs)
        eq = Equation(e.fn, pattern, tuple(extra), rhs, e.pos)
        got = self.guaranteed(rhs)
        if got is not None and sig.result not in got:
            self.error(f"the right-hand side of {e.fn} is not always a term of sort "
                       f"{sig.result} of {self.dst.name}", e.rhs.pos,
                       hint=f"{e.fn} is declared to return {sig.result}")
        return eq

    def inferred_metas(self, rhs: RawPattern) -> dict[str, str]:
        """Pattern variables the source calculus does not declare get their sort from the
        functions the right-hand side passes them to (as claims' metavariables do)."""
        found: dict[str, set[str]] = {}

        def walk(p: RawPattern) -> None:
            if p.kind == "app":
                sig = self.sigs.get(p.name)
                if sig is not None and p.args and p.args[0].pattern.kind == "ident":
                    n = p.args[0].pattern.name
                    if self.src.metas.get(n) is None and self.src.metas.get(base_meta(n)) is None \
                            and n not in self.src.shapes:
                        found.setdefault(n, set()).add(sig.params[0])
                for a in p.args:
                    walk(a.pattern)

        walk(rhs)
        return {n: next(iter(s)) for n, s in found.items() if len(s) == 1}

    def rhs(self, raw: RawPattern, scope: RhsScope, binders: frozenset[str]) -> Pattern | None:
        if raw.kind == "ident":
            n = raw.name
            if n in scope.extra:
                return scope.extra[n]
            if n in scope.names or n in binders:
                ns = scope.names.get(n) or self.dst.names_sort_of(n) or ""
                return PName(n, self.dst.names_sort_of(n) or ns, raw.pos)
            shape = self.dst.shapes.get(n)
            if shape is not None and shape.arity == 0:
                return PCon(n, (), raw.pos)
            if n in scope.metas:
                self.error(f"{n} is a term of the source calculus {self.src.name}; the "
                           "right-hand side must translate it", raw.pos,
                           hint=f"call a function of the translation on it, such as "
                           f"{self.raw.name}({n})")
                return None
            owner = self.dst.metas.get(n) or self.dst.metas.get(base_meta(n))
            if owner in self.dst.names_sorts:
                self.error(f"the name {n} is bound neither by the pattern nor by a binder "
                           "around it", raw.pos)
            else:
                self.error(f"unknown identifier {n} on the right of an equation", raw.pos,
                           hint=self.loader.suggest(n, [*scope.extra, *scope.names,
                                                        *self.dst.shapes]))
            return None
        if raw.kind != "app":
            self.error("plugging and substitution cannot stand in a translation equation",
                       raw.pos)
            return None
        if raw.name in self.sigs:
            return self.call(raw, scope, binders)
        shape = self.dst.shapes.get(raw.name)
        if shape is None:
            self.error(f"unknown constructor or function {raw.name} (target calculus "
                       f"{self.dst.name})", raw.pos,
                       hint=self.loader.suggest(raw.name, [*self.sigs, *self.dst.shapes]))
            return None
        problem = shape_problem(raw, shape)
        if problem is not None:
            self.error(*problem)
            return None
        args: list[Pattern] = []
        for a in raw.args:
            names = tuple(b for b, _ in a.binders)
            body = self.rhs(a.pattern, scope, binders | set(names))
            if body is None:
                return None
            args.append(PAbs(names, body, a.pattern.pos) if names else body)
        return PCon(raw.name, tuple(args), raw.pos)

    def call(self, raw: RawPattern, scope: RhsScope, binders: frozenset[str]) -> Pattern | None:
        sig = self.sigs[raw.name]
        if len(raw.args) != len(sig.params):
            self.error(f"{raw.name} takes {len(sig.params)} argument(s), here {len(raw.args)}",
                       raw.pos)
            return None
        first = raw.args[0]
        target = first.pattern
        if first.binders or target.kind != "ident" or (
                target.name not in scope.metas and target.name not in scope.names):
            self.error(f"the call {raw.text()} is not on a subterm of the pattern", raw.pos,
                       hint="a translation function may only be called on metavariables of "
                       "its equation's pattern, so that it always terminates")
            return None
        if target.name in scope.metas:
            arg0: Pattern = scope.metas[target.name]
            g = grammar(self.src)
            if not g.included(arg0.sort, sig.params[0]):
                self.error(f"{raw.name} takes terms of sort {sig.params[0]}, but {target.name} "
                           f"ranges over {arg0.sort}", target.pos)
                return None
        else:
            arg0 = PName(target.name, scope.names[target.name], target.pos)
            g = grammar(self.src)
            if sig.params[0] not in g.names_state.get(arg0.names_sort, frozenset()):
                self.error(f"{raw.name} takes terms of sort {sig.params[0]}, which has no names "
                           f"of {arg0.names_sort}", target.pos)
                return None
        rest: list[Pattern] = []
        for a, sort in zip(raw.args[1:], sig.params[1:], strict=True):
            if a.binders:
                self.error("an extra argument of a call is a term, not an abstraction",
                           a.pattern.pos)
                return None
            p = self.rhs(a.pattern, scope, binders)
            if p is None:
                return None
            got = self.guaranteed(p)
            if got is not None and sort not in got:
                self.error(f"the argument {a.pattern.text()} of {raw.name} is not always a term "
                           f"of sort {sort}", a.pattern.pos)
            rest.append(p)
        return PCall(raw.name, (arg0, *rest), raw.pos)

    def check_binder_scopes(self, pattern: Pattern, rhs: Pattern) -> None:
        """A name bound in the pattern, used itself on the right (``f(lam(x.x)) = x``),
        must stand under a binder for it there.

        A metavariable matched under ``x.`` may be translated outside any binder
        for ``x`` (``ds(klam(k.P)) = ds(P)`` drops a binder): while it is
        translated, ``x`` is a name of its names sort like any other, which the
        equations for names may map away.  If it reaches the result all the same,
        :mod:`calcscout.rules.rewriting.translate` stops with an error naming the equation.
        """
        binder_names = _binder_names(pattern)

        def walk(p: Pattern, above: frozenset[str]) -> None:
            if isinstance(p, PCall):
                for arg in p.args:
                    walk(arg, above)
            elif isinstance(p, PName):
                if p.name in binder_names and p.name not in above:
                    self.error(f"the name {p.name} is bound in the pattern but used here outside "
                               "any binder for it", p.pos)
            elif isinstance(p, PAbs):
                walk(p.body, above | set(p.names))
            elif isinstance(p, PCon):
                for arg in p.args:
                    walk(arg, above)

        walk(rhs, frozenset())

    # ------------------------------------------------------------ sorts

    def guaranteed(self, p: Pattern) -> State | None:
        """The target sorts every instance of ``p`` belongs to."""
        g = grammar(self.dst)
        if isinstance(p, PCall):
            return g.sorts_including([self.sigs[p.fn].result])
        if isinstance(p, PMeta):
            return g.sorts_including([p.sort])
        if isinstance(p, PName):
            return g.names_state.get(p.names_sort, frozenset())
        if isinstance(p, PAbs):
            return self.guaranteed(p.body)
        if isinstance(p, PCon):
            children = []
            for a in p.args:
                got = self.guaranteed(a)
                if got is None:
                    return None
                children.append(got)
            return g.delta(p.con, tuple(children))
        return None

    # ------------------------------------------------------------ global checks

    def check_cycles(self, tr: Translation) -> None:
        """Calls on the whole argument (``tr(M) = ... tk(M, k)``) must not go round."""
        edges: dict[str, list[tuple[str, Pos]]] = {}
        for eq in tr.equations:
            whole = eq.pattern.name if isinstance(eq.pattern, PMeta | PName) else None
            if whole is None:
                continue
            for c in _calls(eq.rhs):
                a = c.args[0]
                if isinstance(a, PMeta | PName) and a.name == whole:
                    edges.setdefault(eq.fn, []).append((c.fn, c.pos))
        state: dict[str, int] = {}

        def visit(f: str, path: list[str]) -> bool:
            state[f] = 1
            for g, pos in edges.get(f, ()):
                if state.get(g) == 1:
                    cyc = [*path[path.index(g):], g] if g in path else [f, g]
                    self.error("the calls " + " -> ".join(f"{x}(M)" for x in cyc) +
                               " go round without taking the term apart (it could loop)", pos,
                               hint="let one of these equations match on a constructor")
                    return True
                if state.get(g) is None and visit(g, [*path, g]):
                    return True
            state[f] = 2
            return False

        for f in list(edges):
            if state.get(f) is None and visit(f, [f]):
                break

    def check_exhaustive(self, tr: Translation) -> None:
        g = grammar(self.src)
        for fn, sig in tr.signatures.items():
            patterns = [e.pattern for e in tr.equations if e.fn == fn]
            w = missing_case(g, sig.params[0], patterns)
            if w is not None:
                self.error(f"translation {tr.name} has no equation for terms of the shape "
                           f"{describe(w, g)} of sort {sig.params[0]}", sig.pos,
                           hint=f"add an equation {fn}({describe(w, g)}) = ...")


@dataclass(frozen=True)
class RhsScope:
    """What an equation's right-hand side may use: the pattern's names (with their names
    sorts) and metavariables, and the extra parameters."""

    names: dict[str, str]
    metas: dict[str, PMeta]
    extra: dict[str, PMeta]


def _lhs_vars(p: Pattern, calc: Calculus) -> tuple[dict[str, str], dict[str, PMeta]]:
    """The names (with their names sorts) and metavariables a source pattern binds."""
    names: dict[str, str] = {}
    metas: dict[str, PMeta] = {}

    def walk(q: Pattern) -> None:
        if isinstance(q, PMeta):
            metas.setdefault(q.name, q)
        elif isinstance(q, PName):
            names.setdefault(q.name, q.names_sort)
        elif isinstance(q, PCon):
            shape = calc.shapes[q.con]
            for a, bsorts in zip(q.args, shape.binder_sorts, strict=True):
                if isinstance(a, PAbs):
                    for n, ns in zip(a.names, bsorts, strict=True):
                        names.setdefault(n, ns)
                    walk(a.body)
                else:
                    walk(a)

    walk(p)
    return names, metas


def _binder_names(p: Pattern) -> set[str]:
    out: set[str] = set()

    def walk(q: Pattern) -> None:
        if isinstance(q, PAbs):
            out.update(q.names)
            walk(q.body)
        elif isinstance(q, PCon):
            for a in q.args:
                walk(a)

    walk(p)
    return out


def _calls(p: Pattern) -> list[PCall]:
    out: list[PCall] = []

    def walk(q: Pattern) -> None:
        if isinstance(q, PCall):
            out.append(q)
            for a in q.args:
                walk(a)
        elif isinstance(q, PAbs):
            walk(q.body)
        elif isinstance(q, PCon):
            for a in q.args:
                walk(a)

    walk(p)
    return out

