"""Resolving claims (LANGUAGE.md §6): which calculus and sort each metavariable
ranges over, which translation function each call means, which relation each
arrow is.

A metavariable's calculus comes, in this order, from a ``for ... in C.S:``
clause, from the functions it is passed to, from a relation qualifier on an
atom it stands in, and finally from the only calculus that declares a
metavariable of that name; if none of these settles it, the claim is an error
that asks for a ``for`` clause.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from calcscout.rules.core.sorts import grammar
from calcscout.rules.core.spec import (
    Atom,
    Calculus,
    Claim,
    Confluent,
    ECall,
    EMeta,
    Expr,
    Formula,
    Implies,
    Pos,
    Relation,
    Shorthand,
    Terminating,
    Translation,
    base_meta,
    functions_named,
)
from calcscout.rules.loading.syntax import RawAtom, RawClaim, RawExpr

if TYPE_CHECKING:
    from calcscout.rules.loading.diagnostics import Diagnostics

SHORTHANDS = ("galois", "reflection", "isomorphism")
PREMISE_RELATIONS = ("->", "->*", "->+", "->=")


class _Bad(Exception):
    pass


def resolve_claims(raws: list[RawClaim], calculi: dict[str, Calculus],
                   translations: dict[str, Translation], loader: Diagnostics,
                   broken: set[str] | frozenset[str] = frozenset()) -> list[Claim]:
    """``broken``: translations that failed to load (their errors are reported already, so
    claims that use them are skipped without a second message)."""
    out = []
    for raw in raws:
        if _mentions(raw, broken):
            continue
        try:
            claim = ClaimResolver(raw, calculi, translations, loader).resolve()
        except _Bad:
            continue
        out.append(claim)
    return out


class ClaimResolver:
    def __init__(self, raw: RawClaim, calculi: dict[str, Calculus],
                 translations: dict[str, Translation], loader: Diagnostics):
        self.raw = raw
        self.calculi = calculi
        self.translations = translations
        self.loader = loader
        # metavariable -> (calculus, sort, how it was learnt)
        self.known: dict[str, tuple[str, str]] = {}
        self.declared: set[str] = set()

    def fail(self, message: str, pos: Pos | None, hint: str | None = None):
        self.loader.error(f"claim {self.raw.name}: {message}", pos, hint)
        raise _Bad

    def resolve(self) -> Claim:
        raw = self.raw
        within = self.loader.bounds(raw.within)
        for metas, cname, sname, pos in raw.quantifiers:
            calc = self.calculus(cname, pos)
            sort = self.sort(calc, sname, pos)
            for m, _ in metas:
                self.known[m] = (calc.name, sort)
                self.declared.add(m)
        formula: Formula
        quantified: list[EMeta] = []
        if raw.kind in ("confluent", "terminating"):
            assert raw.subject is not None
            cname, group, pos = raw.subject
            calc = self.calculus(cname, pos)
            if group is not None and group not in calc.groups:
                self.fail(f"calculus {cname} has no rule group {group}", pos)
            cls = Confluent if raw.kind == "confluent" else Terminating
            formula = cls(calc.name, group, pos)
        elif raw.kind == "atom" and _is_shorthand(raw.atoms[0], self.translations):
            formula, quantified = self.shorthand(raw.atoms[0].left)
        else:
            atoms = raw.atoms
            premise = atoms[0] if raw.kind == "implies" else None
            generated: set[str] = set()
            if premise is not None:
                self.check_premise(premise)
                assert premise.right is not None
                generated.add(premise.right.name)
            self.infer(atoms)
            if premise is not None:
                m, n = premise.left.name, premise.right.name
                if n not in self.known and m in self.known:
                    calc = self.calculi[self.known[m][0]]
                    self.known[n] = (calc.name, self.meta_sort(calc, n) or self.known[m][1])
            resolved = [self.atom(a) for a in atoms]
            formula = resolved[0] if premise is None else Implies(resolved[0], resolved[1],
                                                                   raw.pos)
            order: list[str] = []
            for a in atoms:
                for e in (a.left, a.right):
                    if e is not None:
                        for name in _metas_in(e):
                            if name not in order and name not in generated:
                                order.append(name)
            for name in order:
                c, s = self.known[name]
                quantified.append(EMeta(name, c, s))
        return Claim(raw.name, formula, tuple(quantified), raw.text, within, raw.file, raw.pos)

    # ------------------------------------------------------------ lookups

    def calculus(self, name: str, pos: Pos) -> Calculus:
        c = self.calculi.get(name)
        if c is None:
            self.fail(f"unknown calculus {name}", pos, hint=self.loader.suggest(name, self.calculi))
        return c

    def sort(self, calc: Calculus, name: str, pos: Pos) -> str:
        s = calc.sorts.get(name)
        if s is None and calc.metas.get(name) in calc.sorts:
            s = calc.sorts[calc.metas[name]]
        if s is None or s.is_context:
            self.fail(f"calculus {calc.name} has no sort {name}", pos,
                      hint=self.loader.suggest(name, [x for x in calc.sorts
                                                      if not calc.sorts[x].is_context]))
        return s.name

    @staticmethod
    def meta_sort(calc: Calculus, meta: str) -> str | None:
        owner = calc.metas.get(meta) or calc.metas.get(base_meta(meta))
        if owner in calc.sorts and not calc.sorts[owner].is_context:
            return owner
        return None

    def function(self, e: RawExpr) -> tuple[Translation, str]:
        options = functions_named(self.translations, e.name)
        if not options:
            hint = self.loader.suggest(e.name, [f for t in self.translations.values()
                                                for f in t.signatures] + list(self.translations))
            self.fail(f"unknown function {e.name}", e.pos, hint=hint)
        if len(options) > 1:
            names = ", ".join(t.name for t, _ in options)
            self.fail(f"the function {e.name} is defined by several translations ({names})",
                      e.pos, hint="call it through a translation's own name, or rename it")
        return options[0]

    # ------------------------------------------------------------ inference

    def check_premise(self, a: RawAtom) -> None:
        if a.relation is None or a.relation[0] not in PREMISE_RELATIONS:
            what = "a membership" if a.member_of else (a.relation[0] if a.relation else "a term")
            self.fail(f"a premise must be `M REL N` with REL one of ->, ->*, ->+, ->= "
                      f"(here {what})", a.pos)
        assert a.right is not None
        for side in (a.left, a.right):
            if side.args is not None:
                self.fail("a premise relates two metavariables (M -> N); here "
                          f"{side.text()}", side.pos,
                          hint="translate in the conclusion: M -> N implies F(M) ->* F(N)")
        if a.left.name == a.right.name:
            self.fail("the premise must name a new metavariable on its right", a.right.pos)

    def infer(self, atoms: list[RawAtom]) -> None:
        learnt: dict[str, set[tuple[str, str]]] = {}

        def learn(e: RawExpr, calc: str, sort: str) -> None:
            if e.args is None:
                if e.name in self.declared:
                    return
                c = self.calculi[calc]
                learnt.setdefault(e.name, set()).add((calc, self.meta_sort(c, e.name) or sort))
                return
            tr, fn = self.function(e)
            sig = tr.signatures[fn]
            if len(e.args) != len(sig.params):
                self.fail(f"{e.name} takes {len(sig.params)} argument(s), here {len(e.args)}",
                          e.pos)
            for i, (a, p) in enumerate(zip(e.args, sig.params, strict=True)):
                learn(a, tr.source if i == 0 else tr.target, p)

        for a in atoms:
            for e in (a.left, a.right):
                if e is not None and e.args is not None:
                    learn(e, "", "")
        for name, options in learnt.items():
            calcs = {c for c, _ in options}
            if len(calcs) > 1:
                self.fail(f"{name} is passed to functions of different calculi "
                          f"({', '.join(sorted(calcs))})", self.raw.pos,
                          hint=f"say which with `for {name} in CALC.SORT:`")
            calc = next(iter(calcs))
            sorts = sorted({s for _, s in options})
            self.known[name] = (calc, sorts[0])
        # metavariables no function settled: relation qualifiers, then a unique declaring calculus
        for a in atoms:
            for e in (a.left, a.right):
                if e is None or e.args is not None or e.name in self.known:
                    continue
                if a.relation is not None and a.relation[1] is not None:
                    c = self.calculus(a.relation[1][0], a.relation[2])
                    s = self.meta_sort(c, e.name)
                    if s is not None:
                        self.known[e.name] = (c.name, s)
                        continue
                if a.member_of is not None and a.member_of[1] is not None:
                    c = self.calculus(a.member_of[0], a.member_of[2])
                    s = self.meta_sort(c, e.name)
                    if s is not None:
                        self.known[e.name] = (c.name, s)
                        continue
        for a in atoms:
            for e in (a.left, a.right):
                if e is None or e.args is not None or e.name in self.known:
                    continue
                if a is atoms[0] and self.raw.kind == "implies" and e is a.right:
                    continue  # generated from the premise's left
                owners = [c for c in self.calculi.values() if self.meta_sort(c, e.name)]
                if len(owners) == 1:
                    self.known[e.name] = (owners[0].name, self.meta_sort(owners[0], e.name))
                    continue
                where = (f"several calculi declare {base_meta(e.name)} "
                         f"({', '.join(c.name for c in owners)})" if owners else
                         f"no calculus declares a metavariable {base_meta(e.name)}")
                self.fail(f"cannot tell which calculus {e.name} ranges over: {where}", e.pos,
                          hint=f"say it outright: `for {e.name} in CALC.SORT:`")

    # ------------------------------------------------------------ building

    def expr(self, e: RawExpr) -> Expr:
        if e.args is None:
            if e.name not in self.known:
                self.fail(f"cannot tell which calculus {e.name} ranges over", e.pos,
                          hint=f"say it outright: `for {e.name} in CALC.SORT:`")
            c, s = self.known[e.name]
            return EMeta(e.name, c, s, e.pos)
        tr, fn = self.function(e)
        sig = tr.signatures[fn]
        args = []
        for i, (a, p) in enumerate(zip(e.args, sig.params, strict=True)):
            got = self.expr(a)
            want_calc = tr.source if i == 0 else tr.target
            calc = got.calculus
            if calc != want_calc:
                self.fail(f"{e.name} takes terms of {want_calc} here, but {a.text()} is a term of "
                          f"{calc}", a.pos)
            g = grammar(self.calculi[calc])
            if not g.overlap(got.sort, p):
                self.fail(f"{e.name} takes terms of sort {p}, and {a.text()} (sort {got.sort}) "
                          "has none", a.pos)
            args.append(got)
        return ECall(tr.name, fn, tuple(args), tr.target, sig.result, e.pos)

    def atom(self, a: RawAtom) -> Atom:
        left = self.expr(a.left)
        if a.member_of is not None:
            cname, sname, pos = a.member_of
            if sname is None:
                calc = self.calculi[left.calculus]
                sort = self.sort(calc, cname, pos)
            else:
                calc = self.calculus(cname, pos)
                sort = self.sort(calc, sname, pos)
            return Atom(left, None, None, (calc.name, sort), a.pos)
        if a.relation is None:
            self.fail(f"{a.left.text()} alone is not a claim", a.pos,
                      hint="write an atom such as A ->* B, A == B or A : SORT")
        kind, qual, rpos = a.relation
        assert a.right is not None
        right = self.expr(a.right)
        calc_name = left.calculus
        group = None
        if qual is not None:
            calc = self.calculus(qual[0], rpos)
            calc_name = calc.name
            group = qual[1]
            if group is not None and group not in calc.groups:
                self.fail(f"calculus {calc.name} has no rule group {group}", rpos,
                          hint=self.loader.suggest(group, calc.groups)
                          or f"groups of {calc.name}: {', '.join(calc.groups) or 'none'}")
        return Atom(left, Relation(kind, calc_name, group, rpos), right, None, a.pos)

    def shorthand(self, e: RawExpr) -> tuple[Shorthand, list[EMeta]]:
        assert e.args is not None
        if len(e.args) != 2 or any(a.args is not None for a in e.args):
            self.fail(f"{e.name}(F, G) takes two translations", e.pos)
        f, g = (self.translations.get(a.name) for a in e.args)
        for a, t in zip(e.args, (f, g), strict=True):
            if t is None:
                self.fail(f"{a.name} is not a translation", a.pos,
                          hint=self.loader.suggest(a.name, self.translations))
        assert f is not None and g is not None
        if g.source != f.target or g.target != f.source:
            self.fail(f"{e.name}({f.name}, {g.name}) needs {g.name} to go back from {f.target} "
                      f"to {f.source}; it goes from {g.source} to {g.target}", e.args[1].pos)
        fsig = f.signatures[f.entry]
        gsig = g.signatures[g.entry]
        src, dst = self.calculi[f.source], self.calculi[f.target]
        m = _meta_for(src, fsig.params[0], "M")
        p = _meta_for(dst, gsig.params[0], "P", avoid=m)
        quantified = [EMeta(m, src.name, fsig.params[0]), EMeta(p, dst.name, gsig.params[0])]
        return Shorthand(e.name, f.name, g.name, e.pos), quantified


def _meta_for(calc: Calculus, sort: str, fallback: str, avoid: str = "") -> str:
    """The metavariable a shorthand's part quantifies over: the sort's first one."""
    metas = [m for m in calc.sorts[sort].metas if m != avoid]
    return metas[0] if metas else (fallback if fallback != avoid else fallback + "1")


def _is_shorthand(a: RawAtom, translations: dict[str, Translation]) -> bool:
    return (a.relation is None and a.member_of is None and a.left.args is not None
            and a.left.name in SHORTHANDS and a.left.name not in translations
            and not any(a.left.name in t.signatures for t in translations.values()))


def _mentions(raw: RawClaim, names: set[str] | frozenset[str]) -> bool:
    if not names:
        return False

    def expr(e: RawExpr | None) -> bool:
        if e is None or e.args is None:
            return e is not None and e.name in names
        return e.name in names or any(expr(a) for a in e.args)

    return any(expr(a.left) or expr(a.right) for a in raw.atoms)


def _metas_in(e: RawExpr) -> list[str]:
    if e.args is None:
        return [e.name]
    return [m for a in e.args for m in _metas_in(a)]
