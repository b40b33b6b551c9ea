"""Matching: sorts and refinements, non-linear patterns, binders without capture,
contexts (also with the hole under a binder), conditions, instantiation."""

from __future__ import annotations

import conftest
import pytest
from conftest import load_calc, term
from hypothesis import given, settings
from hypothesis import strategies as st

from calcscout.rules.core.spec import Calculus, PAbs, PCon, PMeta, PName, PPlug, Rule
from calcscout.rules.core.terms import Name, Node, Term, bound, is_internal, name, node
from calcscout.rules.rewriting.instantiate import build
from calcscout.rules.rewriting.match import (
    Context,
    check_conditions,
    decompositions,
    free_names,
    match,
    rule_matches,
)

DATA = conftest.DATA / "rewrite"


def calc(file: str, name_: str) -> Calculus:
    return load_calc(DATA / file, name_)


def rule(c: Calculus, rule_name: str) -> Rule:
    return next(r for r in c.rules if r.name == rule_name)


def matches(c: Calculus, rule_name: str, text: str) -> list[dict]:
    return list(rule_matches(c, rule(c, rule_name), term(c, text)))


def internal(t: Term) -> list[str]:
    return [n for n in t.free if is_internal(n)]


# ---------------------------------------------------------------- sorts


def test_value_metavariable_matches_values_only():
    c = calc("lamv.calc", "lamv")
    assert matches(c, "beta_v", "app(lam(x.x), y)")
    assert matches(c, "beta_v", "app(lam(x.x), lam(y.y))")
    assert not matches(c, "beta_v", "app(lam(x.x), app(y, y))")


def test_refinement_sorts_decide_which_rule_matches():
    c = calc("misc.calc", "eqs")
    two = "is_even(succ(succ(zero)))"
    three = "is_even(succ(succ(succ(zero))))"
    assert matches(c, "even_yes", two) and not matches(c, "even_no", two)
    assert matches(c, "even_no", three) and not matches(c, "even_yes", three)


def test_names_metavariable_in_variable_position_matches_names_only():
    c = calc("misc.calc", "eqs")
    p = PCon("app", (PName("x", "var"), PMeta("M", "term")))
    [b] = match(c, p, term(c, "app(y, z)"))
    assert b["x"] is name("y") and b["M"] is name("z")
    assert not list(match(c, p, term(c, "app(lam(x.x), z)")))


def test_constructor_pattern_needs_the_same_constructor_and_arity():
    c = calc("misc.calc", "eqs")
    p = PCon("pair", (PMeta("M", "term"), PMeta("N", "term")))
    assert not list(match(c, p, term(c, "app(x, y)")))
    assert len(list(match(c, p, term(c, "pair(x, app(x, y))")))) == 1


# ---------------------------------------------------------------- non-linear


@pytest.mark.parametrize(
    ("text", "fires"),
    [
        ("eq(x, x)", True),
        ("eq(lam(x.x), lam(y.y))", True),  # α-equal values are the same value
        ("eq(tt, tt)", True),
        ("eq(x, y)", False),
        ("eq(lam(x.x), lam(x.y))", False),
        ("eq(app(x, x), app(x, x))", False),  # equal, but not values
    ],
)
def test_repeated_metavariable_needs_the_same_term(text, fires):
    c = calc("misc.calc", "eqs")
    assert bool(matches(c, "eq_same", text)) is fires


def test_repeated_binder_name_opens_with_one_name():
    c = calc("misc.calc", "eqs")
    # pair(lam(x.M), lam(x.M)): both bodies must be the same under one bound name
    p = PCon("pair", (PCon("lam", (PAbs(("x",), PMeta("M", "term")),)),) * 2)
    assert list(match(c, p, term(c, "pair(lam(x.app(x, y)), lam(z.app(z, y)))")))
    assert not list(match(c, p, term(c, "pair(lam(x.app(x, y)), lam(z.app(y, z)))")))


# ---------------------------------------------------------------- binders


def test_binder_is_opened_with_a_fresh_name_that_the_body_sees():
    c = calc("lam.calc", "lam")
    [b] = matches(c, "beta", "app(lam(x.app(x, y)), z)")
    x = b["x"]
    assert isinstance(x, Name) and is_internal(x.name)
    assert b["M"] is node("app", (x, name("y")))
    assert b["N"] is name("z")


def test_fresh_name_avoids_names_already_in_the_term():
    c = calc("lam.calc", "lam")
    p = PCon("lam", (PAbs(("x",), PMeta("M", "term")),))
    # a term under an opened binder already holds an internal name
    t = node("lam", (node("app", (bound(0), name("#var:1"))),), (1,))
    [b] = match(c, p, t)
    assert b["x"] is not name("#var:1")
    assert b["M"] is node("app", (b["x"], name("#var:1")))


def test_eta_does_not_fire_when_the_name_occurs_in_the_function():
    c = calc("lam.calc", "lam_eta")
    assert not matches(c, "eta", r"\x. x x")
    [b] = matches(c, "eta", r"\x. y x")
    assert b["M"] is name("y")
    [b] = matches(c, "eta", r"\x. (\y. y) x")
    assert not internal(b["M"])


def test_metavariable_outside_a_binder_cannot_capture_its_name():
    c = calc("misc.calc", "eqs")
    # pair(lam(x.M), M): the second M is outside the binder, so M may not mention x
    p = PCon("pair", (PCon("lam", (PAbs(("x",), PMeta("M", "term")),)), PMeta("M", "term")))
    assert list(match(c, p, term(c, "pair(lam(x.y), y)")))
    assert not list(match(c, p, term(c, "pair(lam(x.x), x)")))


def test_two_binders_get_two_names():
    c = calc("misc.calc", "lets")
    [b] = matches(c, "split_v", "split(pair(x, y), x.y.pair(y, x))")
    assert b["x"] is not b["y"]
    assert b["N"] is node("pair", (b["y"], b["x"]))


# ---------------------------------------------------------------- conditions


def test_free_and_fresh_conditions():
    c = calc("misc.calc", "lets")
    assert matches(c, "let_use", "let(y, x.app(x, x))")
    assert not matches(c, "let_use", "let(y, x.z)")
    assert matches(c, "let_gc", "let(y, x.z)")
    assert not matches(c, "let_gc", "let(y, x.app(z, x))")


def test_free_names_of_an_instantiated_pattern():
    c = calc("lam.calc", "lam")
    [b] = matches(c, "beta", "app(lam(x.app(x, y)), z)")
    body = PCon("app", (PMeta("M", "term"), PMeta("N", "term")))
    assert free_names(body, b) == {b["x"].name, "y", "z"}
    under = PCon("lam", (PAbs(("x",), body),))
    assert free_names(under, b) == {"y", "z"}
    assert check_conditions(rule(c, "beta"), b)


# ---------------------------------------------------------------- contexts


def test_decompositions_through_evaluation_contexts():
    c = calc("lamv.calc", "lamv_eval")
    t = term(c, "app(app(x, y), app(z, x))")
    got = {ctx.position: s for ctx, s in decompositions(c, "E", t)}
    # app(V, E) needs a value on the left, and app(x, y) is none
    assert set(got) == {(), (0,), (0, 0), (0, 1)}
    assert got[(0, 1)] is name("y")
    t2 = term(c, "app(x, app(y, z))")
    assert {ctx.position for ctx, _ in decompositions(c, "E", t2)} == {
        (), (0,), (1,), (1, 0), (1, 1)
    }


def test_context_other_arguments_must_have_their_sorts():
    c = calc("contexts.calc", "exc")
    # F ::= app(V, F): the left of app must be a value
    assert matches(c, "lift", "app(x, raise(y))")
    assert not matches(c, "lift", "app(app(x, x), raise(y))")
    # F1 has no hole alternative: raise(y) alone is not F1[raise(V)]
    assert not matches(c, "lift", "raise(y)")


def test_raise_inside_an_evaluation_context():
    c = calc("contexts.calc", "exc")
    [b] = matches(c, "unwind", "handle(app(app(raise(y), z), x), x.app(x, x))")
    assert b["V"] is name("y")
    assert isinstance(b["F"], Context) and b["F"].position == (0, 0)
    # raise under a binder is not in an evaluation context
    assert not matches(c, "unwind", "handle(app(lam(x.raise(x)), z), x.x)")


def test_hole_under_a_binder_opens_it_and_plugging_captures():
    c = calc("contexts.calc", "under")
    [b] = matches(c, "peel", "box(lam(x.app(hit(x), y)))")
    ctx = b["C"]
    assert isinstance(ctx, Context) and ctx.position == (0, 0)
    assert b["M"] is name(ctx.fresh_names[0])
    assert build(c, rule(c, "peel").rhs, b) is term(c, "lam(x.app(x, y))")


def test_every_decomposition_plugs_back_to_the_term():
    c = calc("contexts.calc", "under")
    t = term(c, "app(lam(x.lam(y.app(app(x, y), z))), lam(x.x))")
    decs = list(decompositions(c, "C", t))
    assert len(decs) == len({ctx.position for ctx, _ in decs}) == 6
    for ctx, s in decs:
        assert ctx.plug(s) is t
        assert not s.loose


def test_repeated_context_metavariable_needs_the_same_context():
    c = calc("contexts.calc", "under")
    p = PCon("app", (PPlug(PMeta("C", "C"), PCon("hit", (PMeta("M", "term"),))),
                     PPlug(PMeta("C", "C"), PCon("hit", (PMeta("N", "term"),)))))
    assert list(match(c, p, term(c, "app(lam(x.hit(x)), lam(y.hit(z)))")))
    assert not list(match(c, p, term(c, "app(lam(x.hit(x)), hit(z))")))
    [b] = match(c, p, term(c, "app(lam(x.hit(x)), lam(y.hit(y)))"))
    assert b["M"] is b["N"]


# ---------------------------------------------------------------- instantiation


def test_instantiated_right_hand_side_has_no_internal_names():
    c = calc("misc.calc", "lets")
    for rule_name, text in [
        ("assoc", "let(let(x, y.app(y, y)), z.app(z, x))"),
        ("swap", "pair(app(x, y), lam(x.x))"),
        ("split_v", "split(pair(lam(x.x), y), x.y.app(x, y))"),
    ]:
        [b] = matches(c, rule_name, text)
        out = build(c, rule(c, rule_name).rhs, b)
        assert not internal(out), rule_name


def test_fresh_right_hand_side_binders_do_not_capture():
    c = calc("misc.calc", "lets")
    # swap: pair(M, N) -> let(M, x.let(N, y.pair(y, x))); x, y are fresh, so the
    # user's free x and y in M and N stay free
    [b] = matches(c, "swap", "pair(x, y)")
    out = build(c, rule(c, "swap").rhs, b)
    assert out is term(c, "let(x, z.let(y, x1.pair(x1, z)))")


def test_assoc_moves_a_body_under_a_binder_without_capture():
    c = calc("misc.calc", "lets")
    [b] = matches(c, "assoc", "let(let(y, x.x), x.app(x, y))")
    out = build(c, rule(c, "assoc").rhs, b)
    assert out is term(c, "let(y, a.let(a, b.app(b, y)))")


# ---------------------------------------------------------------- properties


@st.composite
def lambda_terms(draw, budget: int = 9, depth: int = 0) -> Term:
    """A random λ-term of at most ``budget`` nodes over the free names x, y."""
    kinds = ["name"] + (["bound"] if depth else []) + (["lam", "app"] if budget >= 3 else [])
    kind = draw(st.sampled_from(kinds))
    if kind == "name":
        return name(draw(st.sampled_from(["x", "y"])))
    if kind == "bound":
        return bound(draw(st.integers(0, depth - 1)))
    if kind == "lam":
        return node("lam", (draw(lambda_terms(budget - 1, depth + 1)),), (1,))
    left = draw(st.integers(1, budget - 2))
    return node("app", (draw(lambda_terms(left, depth)),
                        draw(lambda_terms(budget - 1 - left, depth))))


@settings(max_examples=150, deadline=None, database=None)
@given(lambda_terms())
def test_beta_pattern_round_trip(t):
    """Matching the redex pattern and building the left-hand side again gives the term."""
    c = calc("lam.calc", "lam")
    lhs = rule(c, "beta").lhs
    got = list(match(c, lhs, t))
    is_redex = isinstance(t, Node) and t.con == "app" and getattr(t.args[0], "con", "") == "lam"
    assert len(got) == (1 if is_redex else 0)
    for b in got:
        assert build(c, lhs, b) is t


@settings(max_examples=150, deadline=None, database=None)
@given(lambda_terms())
def test_decompositions_plug_back(t):
    c = calc("contexts.calc", "under")
    for ctx, s in decompositions(c, "C", t):
        assert ctx.plug(s) is t


def test_direct_matcher_gives_the_generator_binding():
    """Patterns without contexts take a direct matcher (for speed); it must give
    the very binding the general matcher gives, fresh names included.

    Family: fresh names opened in one argument must stay taken in the next,
    also when the binder sits inside a nested constructor; checked with two
    lambdas side by side and a repeated binder name."""
    from calcscout.rules.rewriting.match import _Matcher, binding_names

    c = calc("misc.calc", "eqs")
    pats = [
        PCon("pair", (PCon("lam", (PAbs(("x",), PMeta("M", "term")),)),
                      PCon("lam", (PAbs(("y",), PMeta("N", "term")),)))),
        PCon("pair", (PCon("lam", (PAbs(("x",), PMeta("M", "term")),)),) * 2),
    ]
    for p in pats:
        for text in ("pair(lam(x.app(x, y)), lam(z.app(z, y)))",
                     "pair(lam(x.x), lam(x.x))", "pair(lam(x.y), y)"):
            t = term(c, text)
            fast = list(match(c, p, t))
            taken = frozenset(t.free) | binding_names({})
            slow = [b for b, _ in _Matcher(c).match(p, t, {}, taken)]
            assert fast == slow
    [b] = match(c, pats[0], term(c, "pair(lam(x.x), lam(x.x))"))
    assert b["x"] is not b["y"]
