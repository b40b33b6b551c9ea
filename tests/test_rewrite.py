"""One-step reducts (anywhere, in evaluation contexts, by group), reduction
graphs with their bounds, normal forms, cycles, joinability; networkx is the
independent reference for the graph algorithms."""

from __future__ import annotations

import dataclasses
import gc
import weakref

import conftest
import networkx as nx
import pytest
from conftest import LIBRARY, load_calc, term
from hypothesis import given, settings
from hypothesis import strategies as st

from calcscout.rules.core.enumerate import enumerate_terms
from calcscout.rules.core.errors import FileError
from calcscout.rules.core.spec import Calculus, Rule
from calcscout.rules.core.terms import Term, is_internal, name, node, sweep
from calcscout.rules.loading.load import load_file
from calcscout.rules.rewriting.rewrite import (
    find_cycle,
    join,
    normal_forms,
    path_steps,
    position_text,
    reaches,
    reduction_graph,
    reducts,
)

DATA = conftest.DATA / "rewrite"


def calc(file: str, name_: str) -> Calculus:
    folder = LIBRARY if file in {"lambda.calc", "lamv.calc", "ski.calc"} else DATA
    return load_calc(folder / file, name_)


def steps_of(c: Calculus, text: str, group: str | None = None) -> list[tuple[str, str, Term]]:
    return [(s.rule, s.where, s.result) for s in reducts(c, term(c, text), group)]


OMEGA = r"(\x. x x) (\x. x x)"


# ---------------------------------------------------------------- one step


def test_beta_does_not_capture():
    c = calc("lam.calc", "lam")
    [(rule, where, result)] = steps_of(c, r"(\x. \y. x) y")
    assert (rule, where) == ("beta", "root")
    assert result is term(c, r"\z. y")
    assert result is not term(c, r"\y. y")


def test_reducts_carry_rule_and_position():
    c = calc("lam.calc", "lam")
    got = steps_of(c, r"((\x. x) y) ((\x. x) z)")
    assert [(r, w) for r, w, _ in got] == [("beta", "0"), ("beta", "1")]
    assert got[0][2] is term(c, r"y ((\x. x) z)")
    assert got[1][2] is term(c, r"((\x. x) y) z")
    [s] = reducts(c, term(c, r"x (y ((\x. x) z))"))
    assert s.position == (1, 1) and position_text(s.position) == "1.1"


def test_reduce_anywhere_goes_under_binders():
    c = calc("lam.calc", "lam")
    [(_, where, result)] = steps_of(c, r"\x. (\y. y x) x")
    assert where == "0" and result is term(c, r"\x. x x")
    assert not any(is_internal(n) for n in result.free)


def test_root_and_inner_redexes_both_reduce():
    c = calc("lam.calc", "lam")
    got = steps_of(c, r"(\x. x) ((\y. y) z)")
    assert [w for _, w, _ in got] == ["root", "1"]
    assert got[0][2] is term(c, r"(\y. y) z")
    assert got[1][2] is term(c, r"(\x. x) z")


def test_beta_v_waits_for_a_value():
    c = calc("lamv.calc", "lamv")
    assert [w for _, w, _ in steps_of(c, r"(\x. x) ((\y. y) z)")] == ["1"]


def test_reduce_in_evaluation_contexts_is_left_to_right_and_not_under_binders():
    anywhere = calc("lamv.calc", "lamv")
    evaluation = calc("lamv.calc", "lamv_eval")
    text = r"((\x. x) y) ((\x. x) z)"
    assert [w for _, w, _ in steps_of(anywhere, text)] == ["0", "1"]
    assert [w for _, w, _ in steps_of(evaluation, text)] == ["0"]
    assert [w for _, w, _ in steps_of(evaluation, r"y ((\x. x) z)")] == ["1"]
    assert steps_of(anywhere, r"\x. (\y. y) x")
    assert not steps_of(evaluation, r"\x. (\y. y) x")


def test_plotkin_evaluation_is_deterministic():
    """Plotkin 1975: call-by-value evaluation contexts give at most one step."""
    c = calc("lamv.calc", "lamv_eval")
    anywhere = calc("lamv.calc", "lamv")
    several = 0
    for t in enumerate_terms(c, "term", 8, 2):
        assert len(reducts(c, t)) <= 1
        several += len(reducts(anywhere, t)) > 1
    assert several  # the check is not vacuous: the calculus itself has choices


def test_reduce_anywhere_is_reduce_in_the_context_of_every_position():
    """Two independent routes to the compatible closure: descending through raw
    bodies, and decomposing through a context whose hole may sit under binders."""
    anywhere = calc("lam.calc", "lam")
    everywhere = calc("contexts.calc", "lam_everywhere")
    differ = 0
    for t in enumerate_terms(anywhere, "term", 8, 2):
        a = {(s.rule, s.position, s.result) for s in reducts(anywhere, t)}
        b = {(s.rule, s.position, s.result) for s in reducts(everywhere, t)}
        assert a == b, t
        differ += len(a) > 1
    assert differ


def test_context_with_hole_under_a_binder_reduces_there():
    c = calc("contexts.calc", "head")
    [(_, where, result)] = steps_of(c, r"\x. (\y. y) x")
    assert where == "0" and result is term(c, r"\x. x")
    # head reduction does not reduce an argument
    assert not steps_of(c, r"x ((\y. y) z)")


def test_exception_rules_with_a_context_on_the_left():
    c = calc("contexts.calc", "exc")
    got = steps_of(c, r"handle(app(app(raise(y), z), x), x.app(x, x))")
    assert ("unwind", "root", term(c, "app(y, y)")) in got
    # lift works at every hole of the handler's evaluation context that has a frame above
    lifts = {(w, t) for r, w, t in got if r == "lift"}
    assert lifts == {
        ("0", term(c, "handle(raise(y), x.app(x, x))")),
        ("0.0", term(c, "handle(app(raise(y), x), x.app(x, x))")),
    }
    assert {r for r, _, _ in got} == {"unwind", "lift"}


def test_groups_restrict_the_rules():
    c = calc("misc.calc", "lets")
    text = "let(let(x, y.y), z.pair(z, z))"
    everything = {r for r, _, _ in steps_of(c, text)}
    admin = {r for r, _, _ in steps_of(c, text, "admin")}
    assert everything == {"let_use", "assoc", "swap"}
    assert admin == {"assoc", "swap"}


def test_non_left_linear_rule_fires_on_alpha_equal_arguments():
    c = calc("misc.calc", "eqs")
    assert [r for r, _, _ in steps_of(c, r"eq(lam(x.x), lam(y.y))")] == ["eq_same"]
    assert not steps_of(c, r"eq(lam(x.x), lam(x.y))")


def test_a_rule_that_lets_a_bound_name_escape_is_reported():
    c = calc("lam.calc", "lam_eta")
    eta = next(r for r in c.rules if r.name == "eta")
    careless = Rule("careless", eta.lhs, eta.rhs, pos=eta.pos)  # the condition dropped
    bad = dataclasses.replace(c, name="bad", rules=(careless,))
    with pytest.raises(FileError, match="careless"):
        reducts(bad, term(bad, r"\x. x x"))


def test_memo_does_not_keep_terms_alive():
    c = calc("lam.calc", "lam")
    t = node("app", (node("lam", (node("app", (name("w1"),) * 2),), (1,)), name("w2")))
    assert reducts(c, t)
    ref = weakref.ref(t)
    del t
    gc.collect()
    sweep()  # the intern table lets it go at its next sweep; the memo must not hold it
    assert ref() is None


# ---------------------------------------------------------------- graphs


def test_omega_has_a_cycle():
    c = calc("lam.calc", "lam")
    omega = term(c, OMEGA)
    g = reduction_graph(c, omega, steps=10, nodes=100)
    assert g.graph["complete"] and g.graph["cut_by"] is None
    assert list(g) == [omega]
    assert find_cycle(g) == [omega]
    assert normal_forms(g) == []


def test_a_term_with_a_normal_form_and_a_cycle():
    c = calc("lam.calc", "lam")
    t = term(c, rf"(\x. y) ({OMEGA})")
    g = reduction_graph(c, t, steps=10, nodes=100)
    assert g.graph["complete"]
    assert normal_forms(g) == [name("y")]
    cycle = find_cycle(g)
    assert cycle is not None
    assert all(g.has_edge(a, b) for a, b in zip(cycle, cycle[1:] + cycle[:1], strict=True))
    path = reaches(g, name("y"))
    assert path == [t, name("y")]
    assert [(s.rule, s.where) for s in path_steps(g, path)] == [("beta", "root")]


def test_graph_cut_by_steps_says_so():
    c = calc("lam.calc", "lam")
    growing = term(c, r"(\x. x x x) (\x. x x x)")
    g = reduction_graph(c, growing, steps=3, nodes=1000)
    assert not g.graph["complete"] and g.graph["cut_by"] == "steps"
    assert max(d["depth"] for _, d in g.nodes(data=True)) == 3
    assert normal_forms(g) == []  # the unexpanded frontier is not taken for normal forms


def test_graph_cut_by_nodes_says_so_and_stays_within_the_bound():
    c = calc("lam.calc", "lam")
    growing = term(c, r"(\x. x x x) (\x. x x x)")
    g = reduction_graph(c, growing, steps=100, nodes=5)
    assert not g.graph["complete"] and g.graph["cut_by"] == "nodes"
    assert g.number_of_nodes() == 5


def test_a_frontier_whose_reducts_are_known_is_complete():
    c = calc("lam.calc", "lam")
    omega = term(c, OMEGA)
    # 0 steps: Ω's only reduct is Ω itself, already in the graph
    g = reduction_graph(c, omega, steps=0, nodes=10)
    assert g.graph["complete"] and find_cycle(g) == [omega]
    g = reduction_graph(c, term(c, r"(\x. x) y"), steps=0, nodes=10)
    assert g.graph["cut_by"] == "steps"


def test_ski_identity_from_s_and_k():
    """S K K x ->* x (Curry and Feys 1958: I = S K K)."""
    c = calc("ski.calc", "ski")
    t = term(c, "S K K x")
    g = reduction_graph(c, t, steps=10, nodes=100)
    assert g.graph["complete"] and normal_forms(g) == [name("x")]
    assert [s.rule for s in path_steps(g, reaches(g, name("x")))] == ["s_red", "k_red"]


def test_ski_self_application_loops():
    c = calc("ski.calc", "ski")
    g = reduction_graph(c, term(c, "S I I (S I I)"), steps=20, nodes=1000)
    assert find_cycle(g) is not None


def test_library_lambda_eta():
    c = calc("lambda.calc", "lambda_eta")
    assert [r for r, _, _ in steps_of(c, r"\x. y x")] == ["eta"]
    assert not steps_of(calc("lambda.calc", "lambda"), r"\x. y x")


# ---------------------------------------------------------------- joins


def test_join_finds_a_common_reduct():
    c = calc("ski.calc", "ski")
    j = join(c, term(c, "K x y"), term(c, "I x"), steps=5, nodes=100)
    assert j.status == "joinable" and j.common is name("x")
    assert j.left_path[-1] is j.right_path[-1] is name("x")


def test_join_of_two_distinct_normal_forms_is_definitely_not():
    c = calc("lam.calc", "lam")
    j = join(c, term(c, r"(\x. x) y"), term(c, "z"), steps=5, nodes=100)
    assert j.status == "not-joinable" and j.joinable is False


def test_join_cut_by_a_bound_is_unknown():
    c = calc("lam.calc", "lam")
    j = join(c, term(c, r"(\x. x x x) (\x. x x x)"), term(c, "z"), steps=4, nodes=100)
    assert j.status == "unknown" and j.cut_by == "steps"


# ---------------------------------------------------------------- networkx as reference


@st.composite
def graphs(draw) -> nx.DiGraph:
    n = draw(st.integers(1, 7))
    edges = draw(st.lists(st.tuples(st.integers(0, n - 1), st.integers(0, n - 1)), max_size=12))
    g = nx.DiGraph()
    g.add_nodes_from(range(n))
    g.add_edges_from(edges)
    return g


def _has_cycle(g: nx.DiGraph) -> bool:
    return any(len(c) > 1 or g.has_edge(next(iter(c)), next(iter(c)))
               for c in nx.strongly_connected_components(g))


@settings(max_examples=300, deadline=None, database=None)
@given(graphs())
def test_find_cycle_agrees_with_networkx(g):
    cycle = find_cycle(g)
    assert (cycle is not None) == _has_cycle(g)
    if cycle is not None:
        assert len(set(cycle)) == len(cycle)
        assert all(g.has_edge(a, b) for a, b in zip(cycle, cycle[1:] + cycle[:1], strict=True))


@st.composite
def ski_terms(draw, budget: int = 11) -> Term:
    if budget < 3 or draw(st.integers(0, 2)) == 0:
        return node(draw(st.sampled_from(["s", "k", "i"])))
    left = draw(st.integers(1, budget - 2))
    return node("ap", (draw(ski_terms(left)), draw(ski_terms(budget - 1 - left))))


@settings(max_examples=120, deadline=None, database=None)
@given(ski_terms())
def test_reduction_graph_agrees_with_networkx(t):
    c = calc("ski.calc", "ski")
    g = reduction_graph(c, t, steps=6, nodes=300)
    # every edge is a step of the term it leaves
    for a, b in g.edges:
        assert b in {s.result for s in reducts(c, a)}
    assert set(nx.descendants(g, t)) | {t} == set(g)
    if g.graph["complete"]:
        assert set(normal_forms(g)) == {v for v in g if g.out_degree(v) == 0}
        assert (find_cycle(g) is not None) == _has_cycle(g)
    for v in g:
        path = reaches(g, v)
        assert path[0] is t and path[-1] is v
        assert len(path) - 1 == nx.shortest_path_length(g, t, v)


@settings(max_examples=60, deadline=None, database=None)
@given(ski_terms(9), ski_terms(9))
def test_join_agrees_with_networkx(a, b):
    c = calc("ski.calc", "ski")
    j = join(c, a, b, steps=4, nodes=200)
    ga = reduction_graph(c, a, steps=4, nodes=200)
    gb = reduction_graph(c, b, steps=4, nodes=200)
    common = set(ga) & set(gb)
    if j.status == "joinable":
        assert j.common in common
        assert nx.is_path(ga, j.left_path) and nx.is_path(gb, j.right_path)
    elif j.status == "not-joinable":
        assert not common and ga.graph["complete"] and gb.graph["complete"]
    else:
        assert not common and not (ga.graph["complete"] and gb.graph["complete"])


def _blow(n: int) -> tuple[Calculus, Term]:
    from calcscout.rules.rewriting.translate import Translator

    spec = load_file(DATA / "doubling.calc")
    k = node("z")
    for _ in range(n):
        k = node("s", (k,))
    return spec.calculi["c"], Translator(spec, spec.translations["blow"]).apply("blow", k)


def test_many_reducts_come_in_the_same_order_one_at_a_time() -> None:
    """Past LAZY_ABOVE steps a term's reducts are built lazily: the same steps, in the same
    order, as the eager construction (asked here with no limit)."""
    from calcscout.rules.rewriting.rewrite import LAZY_ABOVE, _reducer, iter_reducts

    c, t = _blow(11)  # 2048 leaves, each a redex
    assert 2**11 > LAZY_ABOVE
    eager = _reducer(c, None)._raw(t, (), 10**9)
    assert len(eager) == 2**11
    assert reducts(c, t) == eager
    assert tuple(iter_reducts(c, t)) == eager
    assert len({s.result for s in eager}) == 2**11


def test_the_bound_on_nodes_bounds_the_reducts_built() -> None:
    """A term with 2^16 reducts and a graph of 200 nodes: the graph (and the early-exit
    search, and join) stop once full, and are cut by nodes; they used to build every reduct
    of every node first (2 GB and minutes for the claims of doubling.calc).

    Family: every caller that took all of a term's reducts.  Checked: the graph builder
    (reduction_graph, join, premises, normalisation and confluence use it), the early-exit
    search of ->* and ->+ (it stops at the bound too, as the graph builder does), and the
    one-step atoms -> and ->= and `->` premises (now taken one at a time)."""
    import tracemalloc

    from calcscout.obligations.engines.evaluate import search

    c, t = _blow(16)
    target = node("b")
    tracemalloc.start()
    try:
        g = reduction_graph(c, t, 20, 200)
        r = search(c, t, target, 20, 200)
        j = join(c, t, target, 20, 200)
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert g.number_of_nodes() == 200 and g.graph["cut_by"] == "nodes"
    assert not g.graph["complete"]
    assert not r.found and not r.complete and r.cut_by == "nodes" and r.explored == 200
    assert j.status == "unknown" and j.cut_by == "nodes"
    # 2^16 reducts of a 17-deep spine each would take well over 100 MB
    assert peak < 30 * 2**20, peak


def test_claims_on_a_doubling_term_are_cut_by_nodes() -> None:
    from calcscout.obligations.runner import RunOptions, run_claims

    spec = load_file(DATA / "doubling.calc")
    out, _ = run_claims(spec, list(spec.claims), RunOptions())
    for v in out:
        assert v.verdict == "inconclusive" and v.cut_by == "nodes", v.name
        assert v.tried == 15 and v.undecided == 12
