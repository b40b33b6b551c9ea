"""Evidence about a subterm names its bound variables as the whole term is printed
(rules.notation.print_abstract_at, used by the evidence of ``==``)."""

from __future__ import annotations

from pathlib import Path

from calcscout.obligations.runner import RunOptions, run_claims
from calcscout.rules.loading.load import load_file
from calcscout.rules.notation.notation import parse_term, print_abstract, print_abstract_at

DATA = Path(__file__).parent / "data" / "notation"


def test_the_differing_subterms_use_the_names_of_the_printed_term() -> None:
    """Issue 8, item 9: for M = lam(x.lam(y.lam(z.app(z, y)))) the evidence said
    "app(x, y) versus app(y, x)", names that M's printing never uses.  Family:
    messages that print a subterm cut out of a term; checked the evidence text and
    its JSON details (left_subterm, right_subterm), and print_abstract_at at every
    position of a term with an unused outer binder and a free name."""
    spec = load_file(DATA / "evidence-names.calc")
    out, _ = run_claims(spec, list(spec.claims), RunOptions())
    ce = out[0].counterexample
    assert ce.terms["D"] == "lam(x.lam(y.lam(z.app(z, y))))"
    assert ce.evidence.endswith("differ at position 0.0.0: app(y, z) versus app(z, y)")
    assert (ce.details["left_subterm"], ce.details["right_subterm"]) == ("app(y, z)",
                                                                         "app(z, y)")


def test_a_subterm_prints_under_the_names_of_its_binders() -> None:
    calc = load_file(DATA / "evidence-names.calc").calculi["a"]
    whole = parse_term(calc, "lam(x.lam(y.lam(z.app(z, app(y, x1)))))")
    assert print_abstract(calc, whole) == "lam(x.lam(y.lam(z.app(z, app(y, x1)))))"
    assert print_abstract_at(calc, whole, ()) == print_abstract(calc, whole)
    assert print_abstract_at(calc, whole, (0,)) == "lam(y.lam(z.app(z, app(y, x1))))"
    assert print_abstract_at(calc, whole, (0, 0, 0)) == "app(z, app(y, x1))"
    assert print_abstract_at(calc, whole, (0, 0, 0, 1, 0)) == "y"
