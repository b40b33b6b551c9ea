"""Claims into obligations (LANGUAGE.md §6).

An obligation is one formula to decide, with its quantified metavariables.
A plain claim is one obligation; a shorthand is expanded into its parts:

- ``galois(F, G)``: ``mono(F)``, ``mono(G)``, ``unit`` (``M ->* G(F(M))``),
  ``counit`` (``F(G(P)) ->* P``);
- ``reflection(F, G)``: those and ``exact_counit`` (``F(G(P)) == P``);
- ``isomorphism(F, G)``: ``mono(F)``, ``mono(G)``, ``exact_unit``
  (``G(F(M)) == M``), ``exact_counit``.

Parts are named ``CLAIM.PART``; shorthand parts use the roles ``F`` and ``G``
as the contract writes them (``gc.mono(F)``).  Every translation with ``then
normalize`` that a claim uses adds a part ``CLAIM.normalize(T)`` named after
the translation ``T`` (a claim may use several).
"""

from __future__ import annotations

from dataclasses import dataclass

from calcscout.rules.core.spec import (
    Atom,
    Claim,
    ECall,
    EMeta,
    Expr,
    Formula,
    Implies,
    Relation,
    Shorthand,
    Spec,
    Terminating,
    Translation,
)


@dataclass(frozen=True)
class Obligation:
    name: str
    claim: Claim
    formula: Formula
    quantified: tuple[EMeta, ...]
    text: str
    part: str | None = None  # None for the claim itself
    normalizes: str | None = None  # for a normalize(T) part: the translation


@dataclass(frozen=True)
class Plan:
    """A claim's obligations: the claim's own entry first, then its parts."""

    claim: Claim
    head: Obligation | None  # None for a shorthand (its verdict is the worst of its parts)
    parts: tuple[Obligation, ...]

    @property
    def obligations(self) -> tuple[Obligation, ...]:
        """The claim's own obligation (if it has one), then its parts."""
        return ((self.head,) if self.head else ()) + self.parts


def plan(spec: Spec, claim: Claim) -> Plan:
    f = claim.formula
    parts: list[Obligation] = []
    head: Obligation | None = None
    if isinstance(f, Shorthand):
        parts.extend(_shorthand_parts(spec, claim, f))
        used = [spec.translations[f.forward], spec.translations[f.backward]]
    else:
        head = Obligation(claim.name, claim, f, claim.quantified, claim.text)
        used = [spec.translations[t] for t in _translations_in(f)]
    seen: set[str] = set()
    for tr in used:
        if tr.normalize is not None and tr.name not in seen:
            seen.add(tr.name)
            parts.append(_normalize_part(spec, claim, tr))
    return Plan(claim, head, tuple(parts))


def _translations_in(f: Formula) -> list[str]:
    out: list[str] = []

    def expr(e: Expr | None) -> None:
        if isinstance(e, ECall):
            if e.translation not in out:
                out.append(e.translation)
            for a in e.args:
                expr(a)

    def atom(a: Atom) -> None:
        expr(a.left)
        expr(a.right)

    if isinstance(f, Atom):
        atom(f)
    elif isinstance(f, Implies):
        atom(f.premise)
        atom(f.conclusion)
    return out


def _call(tr: Translation, arg: Expr, spec: Spec) -> ECall:
    sig = tr.signatures[tr.entry]
    return ECall(tr.name, tr.entry, (arg,), tr.target, sig.result)


def _mono(spec: Spec, claim: Claim, tr: Translation, role: str) -> Obligation:
    calc = spec.calculi[tr.source]
    sort = tr.signatures[tr.entry].params[0]
    metas = [m for m in calc.sorts[sort].metas] or ["M"]
    m = metas[0]
    n = metas[1] if len(metas) > 1 else m + "'"
    M, N = EMeta(m, calc.name, sort), EMeta(n, calc.name, sort)
    premise = Atom(M, Relation("->", calc.name), N)
    concl = Atom(_call(tr, M, spec), Relation("->*", tr.target), _call(tr, N, spec))
    text = f"{m} -> {n} implies {tr.name}({m}) ->* {tr.name}({n})"
    return Obligation(f"{claim.name}.mono({role})", claim, Implies(premise, concl), (M,), text,
                      f"mono({role})")


def _shorthand_parts(spec: Spec, claim: Claim, f: Shorthand) -> list[Obligation]:
    F, G = spec.translations[f.forward], spec.translations[f.backward]
    M, P = claim.quantified
    FM = _call(F, M, spec)
    GFM = _call(G, FM, spec)
    GP = _call(G, P, spec)
    FGP = _call(F, GP, spec)
    src, dst = F.source, F.target
    fn, gn = F.name, G.name
    unit = Obligation(f"{claim.name}.unit", claim, Atom(M, Relation("->*", src), GFM), (M,),
                      f"{M.name} ->* {gn}({fn}({M.name}))", "unit")
    counit = Obligation(f"{claim.name}.counit", claim, Atom(FGP, Relation("->*", dst), P), (P,),
                        f"{fn}({gn}({P.name})) ->* {P.name}", "counit")
    exact_unit = Obligation(f"{claim.name}.exact_unit", claim, Atom(GFM, Relation("=="), M), (M,),
                            f"{gn}({fn}({M.name})) == {M.name}", "exact_unit")
    exact_counit = Obligation(f"{claim.name}.exact_counit", claim, Atom(FGP, Relation("=="), P),
                              (P,), f"{fn}({gn}({P.name})) == {P.name}", "exact_counit")
    monos = [_mono(spec, claim, F, "F"), _mono(spec, claim, G, "G")]
    if f.kind == "galois":
        return [*monos, unit, counit]
    if f.kind == "reflection":
        return [*monos, unit, counit, exact_counit]
    return [*monos, exact_unit, exact_counit]


def _normalize_part(spec: Spec, claim: Claim, tr: Translation) -> Obligation:
    """The report that the normalising group terminated with a unique normal form on every
    term the claim made it meet; decided alongside the claim's own cases."""
    text = f"normalize {tr.name} by {tr.target}.{tr.normalize}: one normal form on every term met"
    return Obligation(f"{claim.name}.normalize({tr.name})", claim, Terminating(tr.target,
                      tr.normalize), (), text, f"normalize({tr.name})", normalizes=tr.name)


