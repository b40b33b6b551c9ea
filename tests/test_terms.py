"""Interned locally nameless terms: α-equivalence is identity, size as LANGUAGE.md §4
defines it, and the laws of substitution."""

from __future__ import annotations

import pickle

from hypothesis import given, settings
from hypothesis import strategies as st

from calcscout.rules.core import terms as T

NAMES = ["x", "y", "z"]


def lam(n: str, body: T.Term) -> T.Term:
    return T.node("lam", [T.close(body, [n])], [1])


def app(a: T.Term, b: T.Term) -> T.Term:
    return T.node("app", [a, b])


v = T.name


def raw_terms(max_leaves: int = 12):
    """Random λ-terms with named binders over x, y, z (closed under the binders they use)."""
    leaves = st.sampled_from(NAMES).map(v)
    return st.recursive(
        leaves,
        lambda sub: st.one_of(
            st.tuples(st.sampled_from(NAMES), sub).map(lambda p: lam(*p)),
            st.tuples(sub, sub).map(lambda p: app(*p)),
        ),
        max_leaves=max_leaves,
    )


def test_alpha_equivalent_terms_are_the_same_object() -> None:
    # λx.λy.y x and λa.λb.b a  (Barendregt 1984, §2.1: α-congruence; common practice)
    assert lam("x", lam("y", app(v("y"), v("x")))) is lam("a", lam("b", app(v("b"), v("a"))))
    assert lam("x", v("x")) is not lam("x", v("y"))
    assert lam("x", lam("x", v("x"))) is lam("y", lam("z", v("z")))


def test_size_counts_nodes_and_name_occurrences_not_binders() -> None:
    # the two examples of LANGUAGE.md §4
    assert lam("x", v("x")).size == 2
    assert app(lam("x", v("x")), v("y")).size == 4


def test_free_names_in_order_of_first_occurrence() -> None:
    t = app(app(v("z"), lam("x", app(v("x"), v("y")))), v("z"))
    assert t.free == ("z", "y")
    assert t.loose == 0


def test_pickling_reinterns() -> None:
    t = lam("x", app(v("x"), v("y")))
    assert pickle.loads(pickle.dumps(t)) is t


@settings(max_examples=200, deadline=None)
@given(raw_terms(), st.sampled_from(NAMES))
def test_close_then_open_with_the_same_name_is_the_identity(body: T.Term, n: str) -> None:
    assert T.open_body(T.close(body, [n]), [v(n)]) is body


@settings(max_examples=300, deadline=None)
@given(raw_terms(), raw_terms(6), raw_terms(6))
def test_substitution_lemma(m: T.Term, n: T.Term, lt: T.Term) -> None:
    """M[x:=N][y:=L] = M[y:=L][x:=N[y:=L]] if x ≠ y and x not free in L
    (Barendregt, The Lambda Calculus, 1984, Lemma 2.1.16)."""
    x, y = "x", "y"
    if x in lt.free:
        lt = T.substitute(lt, {x: v("z")})
    left = T.substitute(T.substitute(m, {x: n}), {y: lt})
    right = T.substitute(T.substitute(m, {y: lt}), {x: T.substitute(n, {y: lt})})
    assert left is right


@settings(max_examples=200, deadline=None)
@given(raw_terms(), raw_terms(6))
def test_substitution_avoids_capture(m: T.Term, n: T.Term) -> None:
    """Substituting under a binder never captures: the free names of M[x:=N] are those of M
    without x, and those of N if x was free in M (common practice; Barendregt 1984, §2.1)."""
    t = lam("y", m)
    s = T.substitute(t, {"x": n})
    expected = set(t.free) - {"x"}
    if "x" in t.free:
        expected |= set(n.free)
    assert set(s.free) == expected
    assert s.size == t.size + (n.size - 1) * _occurrences(t, "x")


def _occurrences(t: T.Term, n: str) -> int:
    return sum(1 for _, s in T.subterms(t) if isinstance(s, T.Name) and s.name == n)


def test_simultaneous_substitution_is_not_sequential() -> None:
    t = app(v("x"), v("y"))
    assert T.substitute(t, {"x": v("y"), "y": v("x")}) is app(v("y"), v("x"))


def test_the_intern_table_lets_unused_terms_go() -> None:
    """Dead terms go at the next sweep (made as the table grows, never from a garbage
    collector callback, where a stop signal would be swallowed)."""
    before = len(T._table)
    made = [lam("x", app(v("x"), v(f"n{i}"))) for i in range(2000)]
    assert len(T._table) >= before + 2000
    del made
    T.sweep()
    assert len(T._table) < before + 100


def test_a_sweep_keeps_live_terms_and_their_identity() -> None:
    """The intern table is swept rather than weak (for speed): a sweep must
    never drop a term someone holds, directly or as an argument of one."""
    inner = app(v("x"), v("swept"))
    outer = lam("x", app(inner, v("kept")))
    key_before = len(T._table)
    for i in range(300):
        lam("x", app(v("x"), v(f"dead{i}")))
    T.sweep()
    assert len(T._table) < key_before + 50
    assert app(v("x"), v("swept")) is inner
    assert lam("x", app(app(v("x"), v("swept")), v("kept"))) is outer
    held_only_by_outer = outer.args[0]
    assert T.node("app", held_only_by_outer.args) is held_only_by_outer
