"""Deciding ``confluent C`` and ``terminating C``: theorems where their side
conditions hold, bounded search with re-checked counterexamples elsewhere."""

from __future__ import annotations

import networkx as nx
import pytest
from conftest import load_spec as spec

from calcscout.obligations.engines.confluence import confluence_theorem, decide_confluent, decide_terminating
from calcscout.rules.core.errors import CalcError
from calcscout.rules.core.spec import Bounds, Confluent, Terminating
from calcscout.rules.loading.load import load_text
from calcscout.rules.notation.notation import parse_term
from calcscout.rules.rewriting.rewrite import reduction_graph, reducts


def bounds(size=6, steps=10, names=1, nodes=20000) -> Bounds:
    return Bounds(size=size, steps=steps, names=names, nodes=nodes)


# ---------------------------------------------------------------- theorems


def test_combinatory_logic_is_orthogonal_hence_confluent():
    # Rosen, "Tree-manipulating systems and Church-Rosser theorems" (J. ACM 1973) for
    # first-order orthogonal systems; Klop, "Combinatory reduction systems" (1980).
    v = decide_confluent(spec("ski.calc"), "ski", bounds())
    assert (v.verdict, v.scope) == ("holds", "all")
    assert "orthogonal" in v.reason and "Rosen" in v.reason


def test_beta_is_confluent_by_klop():
    # Church and Rosser, "Some properties of conversion" (1936); as an orthogonal system
    # with binders, Klop 1980.
    v = decide_confluent(spec("lambda.calc"), "lambda", bounds())
    assert (v.verdict, v.scope) == ("holds", "all")
    assert "Klop" in v.reason


def test_beta_eta_is_confluent_its_pairs_parallel_closed():
    # Barendregt, "The Lambda Calculus" (1984), 3.3.9: beta-eta is Church-Rosser; its
    # critical pairs beta/eta close at once (parallel-closed, Huet 1980).
    v = decide_confluent(spec("lambda.calc"), "lambda_eta", bounds())
    assert (v.verdict, v.scope) == ("holds", "all")
    assert "parallel-closed" in v.reason and "Huet" in v.reason


@pytest.mark.parametrize("calc", ["lambda", "lambda_eta"])
def test_the_bounded_search_agrees_with_the_theorems(calc):
    v = decide_confluent(spec("lambda.calc"), calc, bounds(size=6), prove=False)
    assert (v.verdict, v.scope, v.undecided) == ("holds", "bounded", 0)
    assert v.tried > 100


def test_peano_arithmetic_is_orthogonal():
    # Baader and Nipkow 1998, chapter 6: orthogonal first-order systems are confluent.
    v = decide_confluent(spec("arith-trs.calc"), "peano", bounds())
    assert (v.verdict, v.scope) == ("holds", "all")


@pytest.mark.parametrize("file, calc, why", [
    ("nonlinear.calc", "huet", "not left-linear"),
    ("groups.calc", "group", "not left-linear"),
    ("lamv.calc", "lamv", "ranges over sort val"),
    ("lamv.calc", "lamv_eval", "reduction only in context E"),
    ("critical/subst.calc", "freename", "matched as a free name"),
    ("critical/subst.calc", "lets", "condition `x free in ...`"),
])
def test_theorems_apply_only_where_their_side_conditions_hold(file, calc, why):
    reason, why_not = confluence_theorem(spec(file).calculi[calc])
    assert reason is None and why in why_not


# ---------------------------------------------------------------- refutations


def test_group_axioms_are_not_confluent():
    # Knuth and Bendix 1970: (inv(x) * x) * z reduces to z and to inv(x) * (x * z).
    v = decide_confluent(spec("groups.calc"), "group", bounds())
    assert v.verdict == "refuted"
    assert v.counterexample.terms == {"term": "mul(mul(inv(x), x), x)",
                                      "left": "mul(inv(x), mul(x, x))", "right": "x"}
    assert v.counterexample.size == 6
    assert "two distinct normal forms" in v.counterexample.evidence


def test_a_critical_pair_instance_refutes_beyond_the_enumerated_size():
    # Below size 6 every group term is confluent; the pair's instance (size 6) is not.
    v = decide_confluent(spec("groups.calc"), "group", bounds(size=4))
    assert v.verdict == "refuted"
    assert v.counterexample.terms["term"] == "mul(mul(inv(x), x), x)"
    assert "critical pair of assoc and left_inv" in v.counterexample.evidence


def test_huets_system_without_critical_pairs_is_not_confluent():
    # Huet, "Confluent reductions" (J. ACM 1980): f(c, c) -> a and f(c, c) ->* b.
    v = decide_confluent(spec("nonlinear.calc"), "huet", bounds(size=3))
    assert v.verdict == "refuted"
    assert v.counterexample.terms == {"term": "f(c, c)", "left": "a", "right": "b"}


def test_overlaps_that_no_term_has_are_dropped():
    from calcscout.rules.critical_pairs.critical import overlaps

    ov = overlaps(spec("critical/subst.calc").calculi["lets"])
    assert ov.pairs == [] and ov.dropped == 2
    v = decide_confluent(spec("critical/subst.calc"), "lets", bounds(size=5))
    assert (v.verdict, v.scope) == ("holds", "bounded")


def test_a_free_name_pattern_breaks_confluence():
    v = decide_confluent(spec("critical/subst.calc"), "freename", bounds())
    assert v.verdict == "refuted"
    assert v.counterexample.terms["term"] == "app(lam(x.is_var(x)), tt)"


# ---------------------------------------------------------------- termination


def test_omega_does_not_terminate():
    # Omega = (\x. x x)(\x. x x) reduces to itself (Barendregt 1984, chapter 2; recalled
    # from memory).
    v = decide_terminating(spec("lambda.calc"), "lambda", bounds(size=9, names=0))
    assert v.verdict == "refuted"
    omega = "app(lam(x.app(x, x)), lam(x.app(x, x)))"
    assert v.counterexample.terms == {"term": omega, "cycle": [omega]}


def test_combinatory_logic_has_a_term_that_reduces_to_itself():
    # S I I (S I I) ->+ S I I (S I I) (Hindley and Seldin 2008, chapter 2; recalled).
    s = spec("ski.calc")
    v = decide_terminating(s, "ski", bounds(size=11, names=0, nodes=2000))
    assert v.verdict == "refuted"
    c = s.calculi["ski"]
    sii = "ap(ap(ap(s, i), i), ap(ap(s, i), i))"
    assert v.counterexample.terms["term"] == sii
    cycle = [parse_term(c, t) for t in v.counterexample.terms["cycle"]]
    for a, b in zip(cycle, cycle[1:] + cycle[:1], strict=True):
        assert b in {st.result for st in reducts(c, a)}
    # independently: the term lies on a cycle of its own graph (networkx's SCCs)
    g = reduction_graph(c, parse_term(c, sii), 10, 2000)
    comp = next(k for k in nx.strongly_connected_components(g) if parse_term(c, sii) in k)
    assert len(comp) > 1


def test_terminating_systems_hold_up_to_bounds():
    for file, calc in [("groups.calc", "group"), ("arith-trs.calc", "peano"),
                       ("lamv.calc", "lamv")]:
        v = decide_terminating(spec(file), calc, bounds(size=5))
        assert (v.verdict, v.scope, v.undecided) == ("holds", "bounded", 0), calc
        assert v.tried > 0


def test_an_infinite_path_without_a_cycle_is_inconclusive():
    v = decide_terminating(spec("nonlinear.calc"), "huet", bounds(size=3))
    assert (v.verdict, v.cut_by) == ("inconclusive", "steps")
    assert 0 < v.undecided <= v.tried


def test_a_graph_that_would_outgrow_memory_is_cut_by_nodes():
    v = decide_terminating(spec("nonlinear.calc"), "huet", bounds(size=3, steps=1000, nodes=50))
    assert (v.verdict, v.cut_by) == ("inconclusive", "nodes")
    v = decide_confluent(spec("lambda.calc"), "lambda", bounds(size=9, names=0, nodes=3),
                         prove=False)
    assert (v.verdict, v.cut_by) == ("inconclusive", "nodes")


# ---------------------------------------------------------------- claims and bounds


def test_bounds_below_one_are_rejected_at_load_time():
    with pytest.raises(CalcError):
        load_text("bounds size 0\ncalculus c { sort t M ::= a }")
    with pytest.raises(ValueError):
        decide_terminating(spec("ski.calc"), "ski", Bounds(size=0, steps=10, names=0, nodes=5))


@pytest.mark.parametrize("file, expected", [
    ("groups.calc", {"group_conf": "refuted", "group_stops": "holds"}),
    ("nonlinear.calc", {"huet_conf": "refuted", "huet_stops": "inconclusive"}),
    ("arith-trs.calc", {"peano_conf": "holds", "peano_stops": "holds"}),
])
def test_library_claims(file, expected):
    s = spec(file)
    got = {}
    for claim in s.claims:
        b = s.effective_bounds(claim.within)
        decide = decide_confluent if isinstance(claim.formula, Confluent) else decide_terminating
        assert isinstance(claim.formula, Confluent | Terminating)
        got[claim.name] = decide(s, claim, b).verdict
    assert got == expected
