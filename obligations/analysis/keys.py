"""Which calculus each term of a counterexample belongs to.

A counterexample keeps its terms by the text the claim writes (``M``,
``resugar(M)``) in abstract form; reading them back needs the calculus of
each, which the obligation's formula knows.
"""

from __future__ import annotations

from calcscout.obligations.claims import Obligation, plan
from calcscout.obligations.engines.evaluate import Evaluator
from calcscout.rules.core.spec import Atom, Bounds, Expr, Implies, Spec


def obligations_by_name(spec: Spec) -> dict[str, Obligation]:
    """Every obligation of every claim of ``spec``, by the name its verdict carries."""
    out: dict[str, Obligation] = {}
    for claim in spec.claims:
        for ob in plan(spec, claim).obligations:
            out[ob.name] = ob
    return out


def term_calculi(spec: Spec, ob: Obligation) -> dict[str, str]:
    """Counterexample key -> calculus, for every expression of a relational obligation."""
    ev = Evaluator(spec, Bounds())
    out: dict[str, str] = {}

    def expr(e: Expr | None) -> None:
        if e is None:
            return
        out[ev.text(e)] = e.calculus
        for a in getattr(e, "args", ()):
            expr(a)

    atoms = ([ob.formula] if isinstance(ob.formula, Atom) else
             [ob.formula.premise, ob.formula.conclusion] if isinstance(ob.formula, Implies)
             else [])
    for a in atoms:
        expr(a.left)
        expr(a.right)
    return out
