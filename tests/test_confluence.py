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
    # found through the pair, reported as the smallest enumerated case beyond the bound
    assert "two distinct normal forms" in v.counterexample.evidence
    assert any("beyond the size bound 4: the critical pair of assoc and left_inv" in n
               for n in v.notes)


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
        # the bounded search alone (the proofs are in tests/test_termination.py)
        v = decide_terminating(spec(file), calc, bounds(size=5), prove=False)
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


# ---------------------------------------------------------------- sorted systems


@pytest.mark.parametrize("calc, rule, term, forms", [
    ("boxed", "c_e", "k(box(c))", {"a", "k(box(e))"}),
    ("boxed_beta", "beta", "app(lam(x.k(box(x))), a)", {"a", "k(box(a))"}),
    ("boxed_closed", "c_e", "k(box(c))", {"a", "k(box(e))"}),
])
def test_no_theorem_when_a_reduct_can_leave_the_grammar(calc, rule, term, forms):
    """Orthogonal (or parallel-closed) once the sorts are forgotten, yet not confluent:
    a step takes a term out of every sort and a redex above it no longer matches.
    Family: a theorem about unsorted rewriting applied to a sorted calculus whose
    steps do not keep the sorts; checked: a rule losing a sort (c -> e under box), a
    substitution of any term for a name that is a value (beta), Huet's parallel-closed
    criterion, and that every library calculus keeps its verdict (lambda, lambda_eta,
    ski, peano, bracket and the three CPS targets still proved)."""
    s = spec("confluence/leaves-grammar.calc")
    reason, why_not = confluence_theorem(s.calculi[calc])
    assert reason is None
    assert why_not.startswith(f"rule {rule}: its reduct may leave the grammar")
    v = decide_confluent(s, calc, bounds())
    assert v.verdict == "refuted" and v.scope != "all"
    assert v.counterexample.terms["term"] == term
    assert {v.counterexample.terms["left"], v.counterexample.terms["right"]} == forms
    assert any(n.startswith("no theorem applies: rule") for n in v.notes)


def test_the_reason_names_a_context_that_refuses_the_reduct():
    from calcscout.rules.core.sorts import grammar

    c = spec("confluence/leaves-grammar.calc").calculi["boxed"]
    _, why_not = confluence_theorem(c)
    assert "a redex in sorts term, val, becomes a term in sorts term" in why_not
    assert "which box(_) does not accept" in why_not
    g = grammar(c)
    value, term = frozenset({"val", "term"}), frozenset({"term"})
    assert g.replacement_loss(value, term) == [("box", 0)]
    assert g.replacement_loss(term, value) is None  # more sorts never hurt


def test_a_step_that_keeps_the_sorts_still_proves():
    s = spec("confluence/leaves-grammar.calc")
    reason, _ = confluence_theorem(s.calculi["boxed_ok"])
    assert reason is not None and "orthogonal" in reason
    v = decide_confluent(s, "boxed_ok", bounds(), prove=False)
    assert (v.verdict, v.undecided) == ("holds", 0)


@pytest.mark.parametrize("file, calc", [
    ("lambda.calc", "lambda"), ("lambda.calc", "lambda_eta"), ("ski.calc", "ski"),
    ("plotkin-cps.calc", "cpsv"), ("arith-trs.calc", "peano"),
])
def test_library_steps_keep_their_sorts(file, calc):
    # beta's argument may be any term, a name is a term: substituting keeps every
    # context's sorts, so the theorems still apply.
    from calcscout.obligations.engines.confluence import _keeps_sorts

    c = spec(file).calculi[calc]
    assert all(_keeps_sorts(c, r) is None for r in c.rules)


# ---------------------------------------------------------------- smallest counterexample


@pytest.mark.parametrize("size", [2, 3, 6])
def test_the_counterexample_is_the_smallest_case_not_the_first_pair(size):
    """A critical pair (h_kk/kk) fails at size 4; f(c, c), of size 3, fails too.
    Family: a counterexample that comes from somewhere other than the enumeration
    order; checked: a pair's instance beyond the size bound (the enumeration goes on
    up to its size), within it (the enumeration comes first), the names bound on
    pair instances (next test), and the group axioms beyond the bound (above)."""
    v = decide_confluent(spec("confluence/smallest.calc"), "mixed", bounds(size=size))
    assert v.verdict == "refuted"
    assert v.counterexample.terms == {"term": "f(c, c)", "left": "a", "right": "b"}
    assert v.counterexample.size == 3
    beyond = [n for n in v.notes if n.startswith("beyond the size bound")]
    assert bool(beyond) == (size < 3)
    if beyond:
        assert "critical pair of h_kk and kk" in beyond[0]


def test_critical_pair_instances_respect_the_names_bound():
    """p(q(M, x)) overlaps q(M, x) only on a free name: with `names 0` no case has
    one, so nothing is refuted; with `names 1` the smallest case is p(q(x, x))."""
    s = spec("confluence/smallest.calc")
    v = decide_confluent(s, "named", bounds(size=4, names=0))
    assert (v.verdict, v.scope, v.counterexample) == ("holds", "bounded", None)
    v = decide_confluent(s, "named", bounds(size=2, names=1))
    assert v.verdict == "refuted"
    assert v.counterexample.terms == {"term": "p(q(x, x))", "left": "a", "right": "p(b)"}
    from calcscout.rules.critical_pairs.critical import overlaps

    ov = overlaps(s.calculi["named"])
    (pair,) = ov.pairs
    assert list(ov.instances(pair, bounds(size=4, names=0))) == []
    assert all(len(t.free) <= 1 for t in ov.instances(pair, bounds(size=4, names=1)))
