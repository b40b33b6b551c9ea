"""Critical pairs: which overlaps exist (sorts, binders, contexts), their
symbolic sides with pending substitutions, and joinability symbolically or
on instances."""

from __future__ import annotations

import json

from conftest import load_calc as calc

from calcscout.rules.core.spec import Bounds, Calculus
from calcscout.rules.critical_pairs.critical import critical_pairs, overlaps, pairs_report, parallel_reducts
from calcscout.rules.notation.notation import parse_term, print_abstract
from calcscout.rules.rewriting.rewrite import join, reducts

BOUNDS = Bounds(size=5, steps=10, names=1, nodes=2000)


def shown(c: Calculus):
    return [(p.rules, p.where, p.show(p.peak), p.show(p.left), p.show(p.right))
            for p in critical_pairs(c)]


# ---------------------------------------------------------------- groups


def test_group_axioms_have_the_three_overlaps_with_associativity():
    # Knuth and Bendix, "Simple word problems in universal algebras" (1970); Baader and
    # Nipkow, "Term Rewriting and All That" (1998), section 7.1: the overlaps of the
    # oriented group axioms are associativity with each of the three rules at its left
    # argument.
    got = shown(calc("groups.calc", "group"))
    assert got == [
        (("assoc", "left_id"), "0", "mul(mul(e, N), P)", "mul(e, mul(N, P))", "mul(N, P)"),
        (("assoc", "left_inv"), "0", "mul(mul(inv(N), N), P)", "mul(inv(N), mul(N, P))",
         "mul(e, P)"),
        (("assoc", "assoc"), "0", "mul(mul(mul(M', N'), N), P)",
         "mul(mul(M', N'), mul(N, P))", "mul(mul(M', mul(N', N)), P)"),
    ]


def test_the_inverse_pair_does_not_join_with_two_normal_forms():
    # The pair completion orients into its first new rule, inv(x)*(x*z) -> z (Knuth and
    # Bendix 1970; Baader and Nipkow 1998, 7.1): on the instance x, y it has the two
    # distinct normal forms mul(inv(x), mul(x, x)) and x.
    c = calc("groups.calc", "group")
    ov = overlaps(c)
    pair = next(p for p in ov.pairs if p.rules == ("assoc", "left_inv"))
    j = ov.joinability(pair, BOUNDS)
    assert (j.status, j.how) == ("not-joinable", "instances")
    peak, left, right = j.instance
    assert print_abstract(c, peak) == "mul(mul(inv(x), x), x)"
    assert print_abstract(c, left) == "mul(inv(x), mul(x, x))"
    assert print_abstract(c, right) == "mul(e, x)"
    # both sides end in distinct normal forms (independently: their one-step reducts)
    assert reducts(c, left) == ()
    assert [s.result for s in reducts(c, right)] == [parse_term(c, "x")]
    # the other two pairs join for every instance
    others = [ov.joinability(p, BOUNDS) for p in ov.pairs if p is not pair]
    assert [(j.status, j.how) for j in others] == [("joinable", "symbolic")] * 2


def test_the_first_completion_rule_joins_that_pair():
    c = calc("groups.calc", "group_kb1")
    ov = overlaps(c)
    pair = next(p for p in ov.pairs if p.rules == ("assoc", "left_inv"))
    assert (ov.joinability(pair, BOUNDS).status, ov.joinability(pair, BOUNDS).how) == \
        ("joinable", "symbolic")


# ---------------------------------------------------------------- no pairs


def test_systems_without_critical_pairs():
    # Huet, "Confluent reductions" (J. ACM 1980): f(M, M) and f(M, g(M)) do not unify (the
    # occurs check); combinatory logic, beta and Peano arithmetic are orthogonal.
    for file, name in [("nonlinear.calc", "huet"), ("ski.calc", "ski"),
                       ("lambda.calc", "lambda"), ("arith-trs.calc", "peano"),
                       ("lamv.calc", "lamv")]:
        assert critical_pairs(calc(file, name)) == [], name


# ---------------------------------------------------------------- binders, substitutions


def test_beta_eta_pairs_join_and_are_parallel_closed():
    # Barendregt, "The Lambda Calculus" (1984), 3.3: beta and eta overlap in
    # (\x. M x) N and in \x. (\y. P) x, and each pair closes at once.
    c = calc("lambda.calc", "lambda_eta")
    ov = overlaps(c)
    assert shown(c) == [
        (("beta", "eta"), "0", "app(lam(x.app(M', x)), N)", "app(M', N)", "app(M', N)"),
        (("eta", "beta"), "0", "lam(x.app(lam(y.M1[x := y]), x))", "lam(x.M1)", "lam(x.M1)"),
    ]
    for p in ov.pairs:
        assert p.left is p.right
        assert ov.joinability(p, BOUNDS).status == "joinable"
        assert ov.parallel_closed(p)


def test_pending_substitutions_compose():
    # app(lam(y.M[x := N]), P) -> M[x := N][y := P], which is M[x := N, y := P] by the
    # composition law of explicit substitutions (Abadi, Cardelli, Curien and Levy,
    # "Explicit substitutions", JFP 1991); y is not free in N.
    c = calc("critical/subst.calc", "twice")
    ov = overlaps(c)
    [p] = ov.pairs
    assert (p.show(p.left), p.show(p.right)) == ("M[x := N, y := P]", "app(lam(y.M[x := N]), P)")
    j = ov.joinability(p, BOUNDS)
    assert (j.status, j.how) == ("joinable", "symbolic")
    assert j.common is p.left
    assert p.left in parallel_reducts(ov.sound, p.right)


# ---------------------------------------------------------------- sorts


def test_sorts_decide_whether_rules_overlap():
    assert critical_pairs(calc("critical/sorted.calc", "narrow")) == []
    wide = calc("critical/sorted.calc", "wide")
    ov = overlaps(wide)
    assert [p.rules for p in ov.pairs] == [("beta_v", "discard"), ("discard", "beta_v")]
    j = ov.joinability(ov.pairs[0], BOUNDS)
    assert j.status == "not-joinable"
    # the smallest instance: M is the free name x
    assert [print_abstract(wide, t) for t in j.instance] == ["app(lam(y.x), c)", "x",
                                                             "lam(y.x)"]


def test_refinements_split_the_overlap_into_cases():
    # is_even(succ(succ(n))) meets yes only for even n and no only for odd n; each pair
    # joins in one step by the case it is about.
    c = calc("critical/sorted.calc", "parity")
    ov = overlaps(c)
    got = [(p.rules, p.show(p.left), p.show(p.right)) for p in ov.pairs]
    assert got == [(("yes", "two"), "tt", "is_even(n)"), (("no", "two"), "ff", "is_even(n)"),
                   (("two", "yes"), "is_even(n)", "tt"), (("two", "no"), "is_even(n)", "ff")]
    assert all(ov.joinability(p, BOUNDS).how == "symbolic" for p in ov.pairs)


# ---------------------------------------------------------------- contexts


def test_contexts_are_unfolded_and_the_depth_is_reported():
    c = calc("rewrite/contexts.calc", "exc")
    ov = overlaps(c)
    assert ov.uses_contexts and ov.context_depth == 2
    rules = {p.rules for p in ov.pairs}
    assert rules == {("lift", "lift"), ("unwind", "lift")}
    for p in ov.pairs:
        assert ov.joinability(p, BOUNDS).status == "joinable"
    report = pairs_report(c, BOUNDS)
    assert report["context_depth"] == 2


# ---------------------------------------------------------------- instances are genuine


def test_instance_counterexamples_are_real_peaks():
    for file, name in [("groups.calc", "group"), ("groups.calc", "group_kb1"),
                       ("critical/sorted.calc", "wide")]:
        c = calc(file, name)
        ov = overlaps(c)
        for p in ov.pairs:
            j = ov.joinability(p, BOUNDS)
            if j.instance is None:
                continue
            peak, left, right = j.instance
            results = {s.result for s in reducts(c, peak)}
            assert left in results and right in results
            assert join(c, left, right, 50, 5000).status == "not-joinable"


# ---------------------------------------------------------------- the report


def test_pairs_report_has_the_documented_shape():
    c = calc("groups.calc", "group")
    report = pairs_report(c, BOUNDS)
    json.dumps(report)
    assert report["calculus"] == "group"
    entry = report["pairs"][1]
    assert {k: entry[k] for k in ("rules", "position", "peak", "left", "right", "status",
                                  "how")} == {
        "rules": ["assoc", "left_inv"], "position": "0", "peak": "mul(mul(inv(N), N), P)",
        "left": "mul(inv(N), mul(N, P))", "right": "mul(e, P)", "status": "not-joinable",
        "how": "instances"}
    assert entry["instance"] == {"peak": "mul(mul(inv(x), x), x)",
                                 "left": "mul(inv(x), mul(x, x))", "right": "mul(e, x)"}
    assert [e["status"] for e in report["pairs"]] == ["joinable", "not-joinable", "joinable"]


# ---------------------------------------------------------------- soundness


def test_a_free_in_condition_is_not_used_symbolically():
    c = calc("critical/soundness.calc", "guarded")
    ov = overlaps(c)
    pair = next(p for p in ov.pairs if p.rules == ("wrap_let", "wrap_sub"))
    assert (pair.show(pair.left), pair.show(pair.right)) == ("let(N, x.M)", "M[x := N]")
    j = ov.joinability(pair, BOUNDS)
    assert (j.status, j.how) == ("not-joinable", "instances")
    assert print_abstract(c, j.instance[1]) == "let(x, y.x)"


def test_a_names_metavariable_under_a_binder_splits_into_cases():
    c = calc("critical/soundness.calc", "names_under")
    got = {(p.rules, p.show(p.peak)) for p in critical_pairs(c)}
    assert got == {(("under", "var_f"), "lam(x.f(x))"), (("under", "var_f"), "lam(x.f(y))")}
