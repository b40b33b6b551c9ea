"""Which calculus each term of a counterexample belongs to.

A counterexample keeps its terms by the text the claim writes (``M``,
``resugar(M)``) in abstract form; reading them back needs the calculus of
each, which the obligation's formula knows.
"""

from __future__ import annotations

from collections.abc import Callable

from calcscout.obligations.claims import Obligation, plan
from calcscout.obligations.engines.evaluate import Evaluator
from calcscout.obligations.verdict import Verdict
from calcscout.rules.core.spec import Atom, Bounds, Confluent, Expr, Implies, Spec, Terminating


def obligations_by_name(spec: Spec) -> dict[str, Obligation]:
    """Every obligation of every claim of ``spec``, by the name its verdict carries."""
    out: dict[str, Obligation] = {}
    for claim in spec.claims:
        for ob in plan(spec, claim).obligations:
            out[ob.name] = ob
    return out


def term_calculi(spec: Spec, ob: Obligation) -> dict[str, str]:
    """Counterexample key -> calculus, for every expression of a relational obligation (for
    ``confluent`` and ``terminating``: their keys ``term``, ``left``, ``right``, ``cycle``)."""
    if isinstance(ob.formula, Confluent | Terminating) and ob.normalizes is None:
        return {k: ob.formula.calculus for k in ("term", "left", "right", "cycle")}
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


def notation_printer(spec: Spec) -> Callable[[Verdict, str, str], str | None]:
    """For the terminal report: a counterexample's term (kept in abstract form) printed with
    its calculus's notations, or None where the key is not a term of a known calculus."""
    from calcscout.rules.core.errors import CalcError
    from calcscout.rules.notation.notation import parse_term, print_term

    obligations = obligations_by_name(spec)
    calculi: dict[str, dict[str, str]] = {}

    def show(v: Verdict, key: str, text: str) -> str | None:
        ob = obligations.get(v.name.split(".by(")[0])  # a --by-rule part: its obligation
        if ob is None:
            return None
        if ob.name not in calculi:
            calculi[ob.name] = term_calculi(spec, ob)
        calc = calculi[ob.name].get(key)
        if calc is None or calc not in spec.calculi:
            return None
        try:
            return print_term(spec.calculi[calc], parse_term(spec.calculi[calc], text))
        except CalcError:
            return None

    return show
