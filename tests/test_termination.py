"""Termination proved, not only searched: orders found by Z3, re-checked without it.

Family: proofs of ``terminating C`` (path orders, Knuth-Bendix, polynomial
interpretations, dependency pairs), their independent re-check, the fallback to the
bounded search, the ``normalize(F)`` part and the exported query; also checked: systems
with binders (bracket abstraction's group), systems not claimed (beta, contexts on the
left), and the soundness of every proof against mutants with a cycle.
"""

from __future__ import annotations

import dataclasses
import json
import os
import subprocess
import sys
import sysconfig
from functools import cache
from pathlib import Path

import pytest

import calcscout.encoders.orders as orders
from calcscout.obligations.engines import termination
from calcscout.obligations.engines.confluence import decide_terminating
from calcscout.obligations.engines.termination import check, dependency_graph, dependency_pairs, prove
from calcscout.rules.core.spec import Bounds, PCon, PMeta, Rule, Spec, Terminating
from calcscout.rules.loading.load import load_file, load_text
from calcscout.rules.rewriting.firstorder import App, Var, view

ROOT = Path(__file__).parent.parent
DATA = Path(__file__).parent / "data" / "termination"
LIBRARY = ROOT / "rules" / "library"
Z3 = os.path.join(sysconfig.get_path("scripts"), "z3")


@cache
def spec(file: str) -> Spec:
    path = LIBRARY / file if (LIBRARY / file).exists() else DATA / file
    return load_file(str(path))


def calc(file: str, name: str):
    return spec(file).calculi[name]


def bounds(size=5, steps=10, names=1, nodes=5000) -> Bounds:
    return Bounds(size=size, steps=steps, names=names, nodes=nodes)


# ---------------------------------------------------------------- known answers


def test_peano_arithmetic_by_a_path_order():
    # Baader and Nipkow, "Term Rewriting and All That" (1998), chapter 5; Dershowitz 1982.
    v = decide_terminating(spec("arith-trs.calc"), "peano", bounds())
    assert (v.verdict, v.scope) == ("holds", "all")
    assert v.witness["method"] == "lpo" and "path order" in v.reason
    prec = v.witness["precedence"]
    assert prec["mul"] > prec["add"] > prec["succ"]  # what every textbook proof uses


def test_ackermann_by_lpo_though_the_bounded_search_is_inconclusive():
    # Kamin and Levy 1980 (the lexicographic path order's standard example); terms grow,
    # so the search alone cuts paths at the step bound.
    s = spec("ackermann.calc")
    v = decide_terminating(s, "ack", bounds())
    assert (v.verdict, v.scope, v.witness["method"]) == ("holds", "all", "lpo")
    assert v.witness["precedence"]["ack"] > v.witness["precedence"]["succ"]
    searched = decide_terminating(s, "ack", bounds(size=6), prove=False)
    assert searched.verdict == "inconclusive" and searched.cut_by in ("steps", "nodes")


def test_toyama_f_needs_dependency_pairs():
    # Toyama, "Counterexamples to termination for the direct sum of term rewriting
    # systems", IPL 1987: f(a, b, x) -> f(x, x, x) terminates; no simplification order
    # proves it, dependency pairs do (F(x, x, x) does not unify with F(a, b, x)).
    c = calc("toyama.calc", "toyama_f")
    for m in ("lpo", "rpo", "kbo", "poly1", "poly2", "poly2n2"):
        assert not prove(c, methods=(m,)).proved, m
    p = prove(c)
    assert p.proved and p.witness["method"] == "dp"
    assert p.witness["pairs"] == ["f#(a, b, M) -> f#(M, M, M)"]
    assert p.witness["graph"] == [] and p.witness["components"] == []


def test_toyama_g_terminates_and_the_union_is_refuted_with_no_proof():
    # Toyama 1987: g(x, y) -> x, g(x, y) -> y terminates; the union with f does not: the
    # cycle from f(a, b, g(a, b)).
    assert prove(calc("toyama.calc", "toyama_g")).proved
    union = calc("toyama.calc", "toyama_union")
    p = prove(union)
    assert not p.proved and p.claimed
    v = decide_terminating(spec("toyama.calc"), "toyama_union", bounds(size=6, names=0))
    assert v.verdict == "refuted" and v.witness is None
    assert v.counterexample.terms["term"] == "f(a, b, g(a, b))"
    assert "no termination proof found" in v.reason


def test_completed_group_axioms_by_knuth_bendix():
    # Knuth and Bendix, "Simple word problems in universal algebras" (1970): the ten rules
    # of the completed group axioms, oriented by their order.
    c = calc("groups-completed.calc", "group_complete")
    assert len(c.rules) == 10
    p = prove(c, methods=("kbo",))
    assert p.proved, p.reason
    w = p.witness
    assert w["weights"]["inv"] == 0 and w["precedence"]["inv"] > w["precedence"]["mul"]
    v = decide_terminating(spec("groups-completed.calc"), "group_complete", bounds())
    assert (v.verdict, v.scope) == ("holds", "all")


def test_a_polynomial_interpretation_where_no_path_order_and_no_kbo_applies():
    # tests/data/termination/poly-only.calc: constructed here, the interpretation checked
    # by hand in the file (Lankford 1979's method).
    c = calc("poly-only.calc", "polyonly")
    for m in ("lpo", "rpo", "kbo"):
        assert not prove(c, methods=(m,)).proved, m
    p = prove(c)
    assert p.proved and p.witness["method"] == "poly1"
    assert "[f](x1) =" in p.reason


def test_division_by_dependency_pairs():
    # Arts and Giesl, "Termination of term rewriting using dependency pairs", TCS 2000:
    # minus and quot, not simply terminating.
    c = calc("division.calc", "division")
    for m in ("lpo", "rpo", "kbo", "poly1", "poly2"):
        assert not prove(c, methods=(m,)).proved, m
    p = prove(c)
    assert p.proved and p.witness["method"] == "dp"
    assert len(p.witness["pairs"]) == 3
    # the pair QUOT -> MINUS leads nowhere back: two one-pair components
    assert sorted(x["pairs"] for x in p.witness["components"]) == [[0], [1]]


def test_bracket_abstraction_group_with_binders_is_proved():
    # the group abs rebuilds binders without substituting: binders as constructors
    v = decide_terminating(spec("bracket.calc"), Terminating("clabs", "abs"), bounds())
    assert (v.verdict, v.scope) == ("holds", "all")


def test_sorted_metavariables_and_reduce_in_a_context_are_proved_unrestricted():
    # value-sorted metavariables read as variables, `reduce in E` dropped: both only
    # remove steps, so the unrestricted system's proof covers them
    s = load_text('''calculus cbv {
      sort val V W ::= zero | succ(V)
      sort term M N ::= V | add(M, N) | double(M)
      context E ::= [] | add(E, N) | add(V, E) | double(E)
      rule add_zero: add(zero, N) -> N
      rule add_succ: add(succ(V), N) -> succ(add(V, N))
      rule dbl: double(V) -> add(V, V)
      reduce in E
    }''')
    v = decide_terminating(s, "cbv", bounds())
    assert (v.verdict, v.scope) == ("holds", "all") and v.witness["method"] == "lpo"


# ---------------------------------------------------------------- not claimed


def test_substitution_on_the_right_is_not_claimed():
    v = decide_terminating(spec("lambda.calc"), "lambda", bounds(size=4, names=0))
    assert v.scope == "bounded" and v.witness is None
    assert v.reason.endswith("termination proof not claimed: rule beta has a substitution on "
                             "the right-hand side")


def test_context_on_the_left_is_not_claimed():
    # A-normalization's rule a_lift: E1[let(M, x.N)] -> let(M, x.E1[N])
    p = prove(calc("anf.calc", "lamc"), "anf")
    assert not p.proved and not p.claimed
    assert p.reason == ("termination proof not claimed: rule a_lift has a context E1[...] on "
                        "the left-hand side")


# ---------------------------------------------------------------- the independent check


def test_a_wrong_witness_is_rejected_by_the_check():
    c = calc("arith-trs.calc", "peano")
    system, _ = view(c)
    p = prove(c)
    assert check(system, p.witness) is None
    bad = dict(p.witness)
    bad["precedence"] = {f: -v for f, v in p.witness["precedence"].items()}  # reversed
    assert "does not hold" in check(system, bad)
    # a polynomial that does not decrease, a KBO with an inadmissible weight
    poly = prove(calc("poly-only.calc", "polyonly")).witness
    system2, _ = view(calc("poly-only.calc", "polyonly"))
    worse = json.loads(json.dumps(poly))
    worse["interpretation"]["g"] = [[1, [1]]]  # [g](x) = x: g(g(x)) no longer above f(...)
    assert check(system2, worse) is not None
    kbo = prove(calc("groups-completed.calc", "group_complete"), methods=("kbo",)).witness
    system3, _ = view(calc("groups-completed.calc", "group_complete"))
    inadmissible = json.loads(json.dumps(kbo))
    inadmissible["precedence"]["inv"] = -1  # weight 0 but not on top
    assert "weight 0" in check(system3, inadmissible)


def test_a_witness_the_check_rejects_is_an_internal_error(monkeypatch):
    real = orders.find

    def lying(problem, method, timeout=None):
        found = real(problem, method, timeout)
        if found.witness is not None and "precedence" in found.witness:
            found.witness["precedence"] = {f: 0 for f in found.witness["precedence"]}
        return found

    monkeypatch.setattr(orders, "find", lying)
    with pytest.raises(termination.WitnessRejected, match="does not re-check"):
        prove(calc("arith-trs.calc", "peano"))


def test_comparisons_by_hand():
    # LPO (Baader and Nipkow 1998, chapter 5): ack(s(x), s(y)) > ack(x, ack(s(x), y))
    x, y = Var("x"), Var("y")
    s = lambda t: App("s", (t,))  # noqa: E731
    ack = lambda a, b: App("ack", (a, b))  # noqa: E731
    lpo = termination._path_order({"ack": 2, "s": 1}, {})
    assert lpo(ack(s(x), s(y)), ack(x, ack(s(x), y)))
    assert not lpo(ack(x, ack(s(x), y)), ack(s(x), s(y)))
    # the multiset status ignores argument order; lexicographic status does not
    f = lambda a, b: App("f", (a, b))  # noqa: E731
    mul = termination._path_order({"f": 1, "s": 0}, {"f": "mul"})
    assert mul(f(s(x), y), f(y, x)) and not lpo(f(x, s(y)), f(y, x))
    # polynomials: [s](x) = x + 1, [f](x, y) = 2x + y compare by coefficients
    interp = {"s": [[1, [1]], [1, [0]]], "f": [[2, [1, 0]], [1, [0, 1]]]}
    assert termination._poly_cmp(interp, 0, f(s(x), y), f(x, s(y)), True)  # 2x+y+2 > 2x+y+1
    assert not termination._poly_cmp(interp, 0, f(x, s(y)), f(s(x), y), False)


def test_estimated_dependency_graph():
    # Arts and Giesl 2000: in the division example QUOT(s(x), s(y)) -> QUOT(minus(x, y), s(y))
    # is on a cycle (minus(x, y) may reduce to s(...)) and QUOT -> MINUS is not.
    system, _ = view(calc("division.calc", "division"))
    pairs = dependency_pairs(system)
    g = dependency_graph(system, pairs)
    text = [f"{s} -> {t}" for s, t, _ in pairs]
    quot = text.index("quot#(s(M), s(N)) -> quot#(minus(M, N), s(N))")
    minus = text.index("minus#(s(M), s(N)) -> minus#(M, N)")
    assert g.has_edge(quot, quot) and g.has_edge(minus, minus)
    assert not g.has_edge(minus, quot)


# ---------------------------------------------------------------- fallback


def test_solver_giving_up_falls_back_to_the_bounded_search(monkeypatch):
    def gives_up(problem, method, timeout=None):
        return orders.Found("unknown", reason="timeout")

    monkeypatch.setattr(orders, "find", gives_up)
    v = decide_terminating(spec("ackermann.calc"), "ack", bounds(size=6))
    assert v.verdict == "inconclusive" and v.scope == "bounded" and v.witness is None
    assert any("gave up" in n and "timeout" in n for n in v.notes)
    assert "no termination proof found" in v.reason


def test_tiny_timeout_never_crashes_and_stays_honest():
    v = decide_terminating(spec("division.calc"), "division", bounds(size=4), timeout=0.001)
    assert v.verdict in ("holds", "inconclusive")
    if v.scope == "all":
        assert v.witness is not None and check(view(calc("division.calc", "division"))[0],
                                               v.witness) is None


# ---------------------------------------------------------------- reports


def run_cli(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "calcscout.obligations.commands.cli", *args],
                          capture_output=True, text=True, cwd=ROOT, timeout=300)


def test_json_report_carries_the_witness():
    r = run_cli("check", str(DATA / "ackermann.calc"), "--json", "-")
    assert r.returncode == 0, r.stderr
    [c] = json.loads(r.stdout)["claims"]
    assert (c["verdict"], c["scope"]) == ("holds", "all")
    assert c["witness"]["method"] == "lpo" and "ack_succ_succ" in c["witness"]["rules"]
    assert "lexicographic path order" in c["reason"]


def test_normalize_part_proved_for_all_terms():
    r = run_cli("check", str(DATA / "normalize-proved.calc"), "--json", "-")
    assert r.returncode == 0, r.stderr
    by = {c["name"]: c for c in json.loads(r.stdout)["claims"]}
    part = by["ev_nat.normalize(ev)"]
    assert (part["verdict"], part["scope"]) == ("holds", "all")
    assert "Rosen" in part["reason"] and "path order" in part["reason"]
    assert part["witness"]["method"] == "lpo"


def test_normalize_part_says_why_it_is_not_proved():
    r = run_cli("check", str(LIBRARY / "bracket.calc"), "cl_image", "--json", "-")
    by = {c["name"]: c for c in json.loads(r.stdout)["claims"]}
    part = by["cl_image.normalize(cl)"]
    assert part["scope"] == "bounded"
    assert any("proved terminating, but no confluence theorem" in n for n in part["notes"])


# ---------------------------------------------------------------- export


def test_export_writes_the_order_query(tmp_path):
    r = run_cli("export", str(LIBRARY / "arith-trs.calc"), "peano_stops", "-o", str(tmp_path))
    assert r.returncode == 0, r.stderr
    text = (tmp_path / "peano_stops.smt2").read_text()
    assert "(set-logic QF_NIA)" in text and "sat: an order exists" in text
    assert text.rstrip().endswith("(check-sat)\n(get-model)")
    assert "(_ " not in text and "pbeq" not in text.lower()


def test_export_of_rules_outside_the_view_is_a_user_error(tmp_path):
    r = run_cli("export", str(LIBRARY / "lambda.calc"), "beta_terminates", "-o", str(tmp_path))
    assert r.returncode == 2 and "substitution" in r.stderr and "Traceback" not in r.stderr


@pytest.mark.skipif(not os.path.exists(Z3), reason="the z3 wheel's stand-alone solver is missing")
@pytest.mark.parametrize(("file", "claim", "answers"), [
    (LIBRARY / "arith-trs.calc", "peano_stops", ("sat",)),
    (DATA / "toyama.calc", "f_stops", ("sat",)),  # by dependency pairs: no cycle in the graph
    (DATA / "toyama.calc", "union_stops", ("unsat", "unknown")),  # it does not terminate
])
def test_standalone_solver_answers_the_exported_query(tmp_path, file, claim, answers):
    r = run_cli("export", str(file), claim, "-o", str(tmp_path))
    assert r.returncode == 0, r.stderr
    out = subprocess.run([Z3, str(tmp_path / f"{claim}.smt2")], capture_output=True, text=True,
                         timeout=120).stdout
    assert out.split()[0] in answers, out[:300]


# ---------------------------------------------------------------- soundness


def _metas(p) -> list[str]:
    if isinstance(p, PMeta):
        return [p.name]
    if isinstance(p, PCon):
        return [m for a in p.args for m in _metas(a)]
    return []


def _positions(p, path=()):
    yield path, p
    if isinstance(p, PCon):
        for i, a in enumerate(p.args):
            yield from _positions(a, (*path, i))


def _replace(p, path, new):
    if not path:
        return new
    args = list(p.args)
    args[path[0]] = _replace(args[path[0]], path[1:], new)
    return dataclasses.replace(p, args=tuple(args))


def mutants(c):
    """Every mutant of a first-order rule set: one rule's sides swapped, a subterm of one
    right side replaced by its left side, or a variable of a right side duplicated under a
    binary constructor of the calculus."""
    binary = [n for n, s in c.shapes.items() if s.arity == 2]
    for i, r in enumerate(c.rules):
        new: list[tuple[str, Rule]] = []
        if isinstance(r.rhs, PCon) and set(_metas(r.lhs)) <= set(_metas(r.rhs)):
            new.append(("swap", dataclasses.replace(r, lhs=r.rhs, rhs=r.lhs)))
        for path, _ in _positions(r.rhs):
            new.append((f"rhs{path}:=lhs", dataclasses.replace(r, rhs=_replace(r.rhs, path,
                                                                               r.lhs))))
        for path, sub in _positions(r.rhs):
            if isinstance(sub, PMeta) and binary:
                dup = PCon(binary[0], (sub, sub))
                new.append((f"dup{path}", dataclasses.replace(r, rhs=_replace(r.rhs, path, dup))))
        for label, rule in new:
            rules = list(c.rules)
            rules[i] = rule
            yield f"{r.name}:{label}", dataclasses.replace(c, rules=tuple(rules))


FIRST_ORDER = [("arith-trs.calc", "peano"), ("groups.calc", "group"), ("ski.calc", "ski"),
               ("toyama.calc", "toyama_f"), ("toyama.calc", "toyama_g"),
               ("ackermann.calc", "ack"), ("poly-only.calc", "polyonly"),
               ("division.calc", "division")]


@pytest.mark.parametrize(("file", "name"), FIRST_ORDER)
def test_no_proof_for_a_mutant_with_a_cycle(file, name):
    """Mutants of the first-order rule sets: whenever the bounded search finds a cycle
    (a definite refutation), no proof may be found."""
    c = calc(file, name)
    counts = {"mutants": 0, "cycles": 0}
    for label, m in mutants(c):
        counts["mutants"] += 1
        s = dataclasses.replace(spec(file), calculi={**spec(file).calculi, name: m})
        v = decide_terminating(s, name, bounds(size=4, names=0, steps=8, nodes=500),
                               prove=False)
        if v.verdict != "refuted":
            continue
        counts["cycles"] += 1
        p = prove(m, timeout=1.0)
        assert not p.proved, f"{label}: a cycle, yet {p.reason}"
    print(f"\n{file} {name}: {counts}")
    assert counts["mutants"] > 0
