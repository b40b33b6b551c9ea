"""Sorted unification of higher-order patterns: the occurs and scope checks,
pruning, sorts meeting in their intersection or splitting into cases; on
first-order patterns, the most general unifiers agree with the PyPI library
``unification`` up to renaming."""

from __future__ import annotations

import warnings
from functools import cache
from pathlib import Path

from hypothesis import given, settings
from hypothesis import strategies as st

from calcscout.rules.core.sorts import grammar
from calcscout.rules.core.spec import Calculus
from calcscout.rules.critical_pairs.unify import (
    MetaInfo,
    UBound,
    UMeta,
    UName,
    UNode,
    first_order,
    from_pattern,
    resolve,
    unify,
)
from calcscout.rules.loading.load import load_file, load_text

with warnings.catch_warnings():
    # unification 0.3 imports a deprecated toolz module.
    warnings.simplefilter("ignore")
    from unification import unify as reference_unify
    from unification import var as reference_var

DATA = Path(__file__).parent / "data" / "critical"
LIBRARY = Path(__file__).parent.parent / "rules" / "library"

FIRST_ORDER = """
calculus fo {
  sort t M N ::= a | b | g(M) | f(M, N)
}
"""


@cache
def fo() -> Calculus:
    return load_text(FIRST_ORDER).calculi["fo"]


@cache
def lib(file: str, calc: str) -> Calculus:
    return load_file(LIBRARY / file).calculi[calc]


@cache
def fixture(file: str, calc: str) -> Calculus:
    return load_file(DATA / file).calculi[calc]


def term_meta(calc: Calculus, x: str, sort: str, scope: tuple[str, ...] = ()) -> MetaInfo:
    g = grammar(calc)
    return MetaInfo(x, sort, "term", scope, tuple(f"v{i}" for i in range(len(scope))),
                    frozenset(g.states_with(sort)))


def lam(body):
    return UNode("lam", (body,), (1,))


def app(m, n):
    return UNode("app", (m, n), (0, 0))


# ---------------------------------------------------------------- binders


def test_scope_check_refuses_a_name_the_metavariable_may_not_see():
    c = lib("lambda.calc", "lambda")
    metas = {"M": term_meta(c, "M", "term")}
    # lam(x. M) with M not seeing x (as after `x fresh in M`) against lam(x. x)
    assert unify(c, lam(UMeta("M", ())), lam(UBound(0)), metas) == []
    # ... while M seeing x unifies: M is the bound name itself.
    metas = {"M": term_meta(c, "M", "term", ("var",))}
    [u] = unify(c, lam(UMeta("M", (0,))), lam(UBound(0)), metas)
    assert u.apply(lam(UMeta("M", (0,)))) == lam(UBound(0))


def test_occurs_check():
    c = fo()
    metas = {"X": term_meta(c, "X", "t")}
    assert unify(c, UMeta("X"), UNode("g", (UMeta("X"),), (0,)), metas) == []


def test_pruning_a_metavariable_that_could_see_too_much():
    # lam(x. M) with M blind to x, against lam(x. lam(y. N)) with N seeing x and y:
    # N must forget x (pruned to a new metavariable seeing y only).
    c = lib("lambda.calc", "lambda")
    metas = {"M": term_meta(c, "M", "term"), "N": term_meta(c, "N", "term", ("var", "var"))}
    s = lam(UMeta("M", ()))
    t = lam(lam(UMeta("N", (1, 0))))
    [u] = unify(c, s, t, metas)
    peak = u.apply(s)
    assert u.apply(t) == peak
    inner = peak.args[0].args[0]
    assert isinstance(inner, UMeta) and inner.args == (0,)  # sees y only
    assert u.metas[inner.name].arity == 1


def test_two_metavariables_meet_in_the_names_both_see():
    c = lib("lambda.calc", "lambda")
    metas = {"M": term_meta(c, "M", "term", ("var", "var")),
             "N": term_meta(c, "N", "term", ("var", "var"))}
    # under x.y.: M(x, y) =?= N(y, x) — they agree on no position but see the same names
    s = lam(lam(UMeta("M", (1, 0))))
    t = lam(lam(UMeta("N", (0, 1))))
    [u] = unify(c, s, t, metas)
    assert u.apply(s) == u.apply(t)
    # the same metavariable with its arguments swapped keeps no name
    [u] = unify(c, lam(lam(UMeta("M", (1, 0)))), lam(lam(UMeta("M", (0, 1)))), metas)
    assert u.apply(UMeta("M", (1, 0))).args == ()


def test_lhs_conversion_takes_fresh_conditions_as_scope():
    c = lib("lambda.calc", "lambda_eta")
    eta = next(r for r in c.rules if r.name == "eta")
    conv = from_pattern(c, eta.lhs, eta)
    assert conv.term == lam(app(UMeta("M", ()), UBound(0)))
    assert conv.metas["M"].arity == 0 and conv.pattern_conditions
    beta = next(r for r in c.rules if r.name == "beta")
    conv = from_pattern(c, beta.lhs, beta, outer=(("var", "z"),))
    assert conv.term == app(lam(UMeta("M", (1, 0))), UMeta("N", (0,)))
    assert conv.metas["M"].scope_names == ("z", "x")


# ---------------------------------------------------------------- sorts


def test_a_value_metavariable_does_not_unify_with_an_application():
    c = lib("lamv.calc", "lamv")
    metas = {"V": term_meta(c, "V", "val"), "M": term_meta(c, "M", "term"),
             "N": term_meta(c, "N", "term")}
    assert unify(c, UMeta("V"), app(UMeta("M"), UMeta("N")), metas) == []
    assert len(unify(c, UMeta("V"), lam(UMeta("M", (0,))), {
        **metas, "M": term_meta(c, "M", "term", ("var",))})) == 1


def test_overlapping_sorts_meet_in_their_intersection():
    c = lib("lamv.calc", "lamv")
    g = grammar(c)
    metas = {"V": term_meta(c, "V", "val"), "M": term_meta(c, "M", "term")}
    [u] = unify(c, UMeta("V"), UMeta("M"), metas)
    left = u.apply(UMeta("M"))
    assert isinstance(left, UMeta)
    assert u.metas[left.name].states == frozenset(g.states_with("val"))


def test_refinements_restrict_the_metavariables_inside():
    # even =?= succ(n): n must be odd (the sorts even, odd, nat of the fixture)
    c = fixture("sorted.calc", "parity")
    g = grammar(c)
    metas = {"e": term_meta(c, "e", "even"), "n": term_meta(c, "n", "nat")}
    [u] = unify(c, UMeta("e"), UNode("succ", (UMeta("n"),), (0,)), metas)
    assert all("odd" in q for q in u.metas["n"].states)
    assert u.metas["n"].states == frozenset(g.states_with("odd"))
    odd = {"o": term_meta(c, "o", "odd")}
    assert unify(c, UMeta("o"), UNode("zero"), odd) == []


def test_correlated_sort_constraints_split_into_cases():
    c = load_text("""
    calculus pairs {
      sort a A ::= p | q
      sort b B ::= q | r
      sort s S ::= A | B
      sort both Z ::= pr(A, A) | pr(B, B)
      sort top T ::= S | Z | pr(S, S)
    }""").calculi["pairs"]
    metas = {"Z": term_meta(c, "Z", "both"), "X": term_meta(c, "X", "s"),
             "Y": term_meta(c, "Y", "s")}
    cases = unify(c, UMeta("Z"), UNode("pr", (UMeta("X"), UMeta("Y")), (0, 0)), metas)
    assert len(cases) >= 2
    for u in cases:
        (qx,) = u.metas["X"].states
        (qy,) = u.metas["Y"].states
        assert ("a" in qx and "a" in qy) or ("b" in qx and "b" in qy)


def test_a_names_metavariable_is_a_variable():
    c = lib("lambda.calc", "lambda")
    metas = {"x": MetaInfo("x", "var", "names"), "M": term_meta(c, "M", "term"),
             "N": term_meta(c, "N", "term")}
    assert unify(c, UMeta("x"), app(UMeta("M"), UMeta("N")), metas) == []
    [u] = unify(c, UMeta("x"), UName("y"), metas)
    assert u.apply(UMeta("x")) == UName("y")
    [u] = unify(c, UMeta("M"), UMeta("x"), metas)
    assert u.apply(UMeta("M")) == u.apply(UMeta("x"))


# ---------------------------------------------------------------- first order, cross-checked


SYMBOLS = {"a": 0, "b": 0, "g": 1, "f": 2}
META_NAMES = ["X", "Y", "Z"]


def fo_terms():
    leaves = st.sampled_from(["a", "b"]).map(lambda c: UNode(c)) | \
        st.sampled_from(META_NAMES).map(UMeta)

    def extend(children):
        return (children.map(lambda m: UNode("g", (m,), (0,)))
                | st.tuples(children, children).map(lambda p: UNode("f", p, (0, 0))))

    return st.recursive(leaves, extend, max_leaves=6)


def to_reference(t, vars_):
    if isinstance(t, UMeta):
        return vars_[t.name]
    return (t.con, *(to_reference(a, vars_) for a in t.args))


def reference_resolve(t, s, seen=frozenset()):
    """Apply the library's (triangular) substitution; None on a cycle, since the
    library does no occurs check."""
    if isinstance(t, tuple):
        parts = []
        for a in t[1:]:
            r = reference_resolve(a, s, seen)
            if r is None:
                return None
            parts.append(r)
        return (t[0], *parts)
    if t in s:
        if t in seen:
            return None
        return reference_resolve(s[t], s, seen | {t})
    return t


def from_ours(t):
    """Our first-order view with metavariables as ``("?", name)``."""
    return first_order(t)


def canonical(t, names=None):
    """Rename variables by first occurrence (``("?", name)`` or library vars)."""
    names = {} if names is None else names
    if isinstance(t, tuple) and t and t[0] == "?":
        return ("?", names.setdefault(t[1], len(names)))
    if isinstance(t, tuple):
        return (t[0], *(canonical(a, names) for a in t[1:]))
    return ("?", names.setdefault(t, len(names)))  # a library variable


@settings(max_examples=300, deadline=None)
@given(fo_terms(), fo_terms())
def test_first_order_mgus_agree_with_the_unification_library(s, t):
    # The reference: Rocklin's `unification` package (PyPI), plain first-order syntactic
    # unification over tuples; without an occurs check, so a cyclic answer means "none".
    c = fo()
    metas = {m: term_meta(c, m, "t") for m in META_NAMES}
    ours = unify(c, s, t, metas)
    vars_ = {m: reference_var(m) for m in META_NAMES}
    rs, rt = to_reference(s, vars_), to_reference(t, vars_)
    theirs = reference_unify(rs, rt, {})
    resolved = None if theirs is False else reference_resolve(rs, theirs)
    if resolved is None:
        assert ours == []
        return
    assert len(ours) == 1
    u = ours[0]
    assert u.apply(s) == u.apply(t)
    assert canonical(from_ours(u.apply(s))) == canonical(resolved)
    # and the substitutions agree on every metavariable, up to one renaming
    mine = ("tuple", *(from_ours(resolve(UMeta(m), u.subst)) for m in META_NAMES))
    other = ("tuple", *(reference_resolve(vars_[m], theirs) for m in META_NAMES))
    assert canonical(mine) == canonical(other)
