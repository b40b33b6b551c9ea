"""The enumeration engine's verdicts (LANGUAGE.md §8) on claims with answers worked out
by hand, and the smallest-counterexample promise checked against an independent search."""

from __future__ import annotations

import conftest
import pytest
from conftest import verdicts_of

from calcscout.obligations.runner import RunOptions, run_claims
from calcscout.rules.core.enumerate import count_tuples, enumerate_tuples
from calcscout.rules.core.spec import Bounds
from calcscout.rules.core.terms import Term
from calcscout.rules.loading.load import load_file

DATA = conftest.DATA / "engine"


@pytest.fixture(scope="module")
def spec():
    return load_file(DATA / "basics.calc")


@pytest.fixture(scope="module")
def verdicts(spec):
    return verdicts_of(spec)


def test_true_claims_hold_with_the_number_of_cases(spec, verdicts) -> None:
    lam = spec.calculi["lam"]
    total = count_tuples([(lam, "term")], 5, 1)
    for name in ("identity", "flip_back", "dup_sim", "member", "joins_self", "plus_step",
                 "opt_step"):
        v = verdicts[name]
        assert v.verdict == "holds", (name, v.reason)
        assert v.scope == "bounded" and v.tried == total and v.undecided == 0
        assert v.bounds == Bounds(5, 10, 1, 2000)


def test_refuted_equality_has_the_smallest_counterexample(spec, verdicts) -> None:
    v = verdicts["flip_same"]
    assert v.verdict == "refuted"
    ce = v.counterexample
    # flip(M) == M fails first where an application has two different arguments
    assert ce.terms["M"] == "lam(y.app(y, x))" and ce.terms["flip(M)"] == "lam(y.app(x, y))"
    assert ce.size == 4
    assert "position 0" in ce.evidence and ce.details["position"] == "0"
    _no_smaller_case_fails(spec, ce.size, lambda m: _flip(m) is not m)


def test_refuted_simulation_names_the_premise_step_and_the_graph(verdicts) -> None:
    v = verdicts["flip_sim"]
    assert v.verdict == "refuted"
    ce = v.counterexample
    assert list(ce.terms) == ["M", "N", "flip(M)", "flip(N)"]
    assert ce.details["premise_step"] == {"rule": "beta", "position": "root"}
    g = ce.details["graph"]
    assert g["complete"] is True and g["cut_by"] is None
    assert ce.details["joins"] is False


def test_cut_graphs_make_a_claim_inconclusive_naming_the_bound(verdicts) -> None:
    v = verdicts["back"]
    assert v.verdict == "inconclusive"
    assert v.cut_by == "steps" and v.undecided > 0
    ex = v.undecided_example
    assert ex.terms["M"] == "f(x)" and ex.terms["N"] == "f(s(x))"


def test_a_refuted_normalize_part_refutes_its_claim(verdicts) -> None:
    """The claim used to stay inconclusive (exit 3) while JUnit counted the part's failure.

    Family: a claim's verdict against its parts'.  Checked: shorthand heads (the worst of
    their parts, unchanged), a head refuted by its own case first (keeps its own
    counterexample: test_own_counterexample_wins_over_the_normalize_part), the part's
    ``tried`` (now the position of its counterexample, as for every refuted claim)."""
    part = verdicts["forked.normalize(into_fork)"]
    assert part.verdict == "refuted" and part.part_of == "forked"
    assert part.counterexample.terms["normal_forms"] == ["a", "b"]
    assert part.tried == 1  # M = x, the first term, builds pick(x)
    head = verdicts["forked"]
    assert head.verdict == "refuted" and head.reason == "part forked.normalize(into_fork) is refuted"
    assert head.tried == 1 and head.undecided == 0 and head.counterexample is None


def test_steps_bound_from_the_command_line_wins(spec) -> None:
    claim = next(c for c in spec.claims if c.name == "back")
    out, _ = run_claims(spec, [claim], RunOptions(bounds=Bounds(steps=1, size=3)))
    assert out[0].bounds.steps == 1 and out[0].bounds.size == 3


def test_jobs_give_the_same_verdicts(spec) -> None:
    one, _ = run_claims(spec, list(spec.claims), RunOptions(jobs=1))
    two, _ = run_claims(spec, list(spec.claims), RunOptions(jobs=2))
    strip = [_stable(v.to_json()) for v in one]
    assert strip == [_stable(v.to_json()) for v in two]


def test_collect_all_keeps_going(spec) -> None:
    claim = next(c for c in spec.claims if c.name == "flip_same")
    out, _ = run_claims(spec, [claim], RunOptions(collect_all=True))
    v = out[0]
    assert v.verdict == "refuted" and 1 < len(v.more) <= 10
    sizes = [c.size for c in v.more]
    assert sizes == sorted(sizes) and v.more[0].terms == v.counterexample.terms


def _stable(d: dict) -> dict:
    d = dict(d)
    d.pop("seconds", None)
    return d


def _flip(t: Term) -> Term:
    from calcscout.rules.core.terms import Node, node

    if isinstance(t, Node):
        args = [_flip(a) for a in t.args]
        if t.con == "app":
            args.reverse()
        return node(t.con, args, t.binders)
    return t


def _no_smaller_case_fails(spec, size: int, fails) -> None:
    """An independent check of minimality: no term smaller than the counterexample fails."""
    lam = spec.calculi["lam"]
    for (m,) in enumerate_tuples([(lam, "term")], size - 1, 1):
        assert not fails(m)


def test_a_premise_step_that_loops_back_is_rechecked_as_a_step() -> None:
    # M -> N with N = M (a rule whose reduct is its redex): the counterexample's premise is
    # re-checked by one-step reducts, not by a shortest path (which would be empty)
    from calcscout.rules.loading.load import load_text

    spec = load_text("calculus c { names var x\n sort val V ::= x\n sort term M N ::= V | f(M)\n"
                     " rule loop: f(M) -> f(M) }\n"
                     "claim k: for M, N in c.term: M -> N implies N : val\n")
    out, _ = run_claims(spec, list(spec.claims), RunOptions())
    v = out[0]
    assert v.verdict == "refuted"
    assert v.counterexample.terms["M"] == v.counterexample.terms["N"] == "f(x)"


def test_a_graph_complete_at_the_bound_on_steps_is_not_cut() -> None:
    """a -> b -> a within steps 1: the last layer's reduct a is in the graph already, so the
    graph is complete and a fails M ->* t(M) definitely (it used to be undecided, and the
    report gave f(c) as the smallest counterexample).

    Family: every judgement of completeness at the bound on steps.  Checked: ->* and ->+
    (the early-exit search, fixed here, now asks as the graph builder does), joins (both
    graphs grown by the graph builder: already right), ->+ back to the start through the
    last layer (holds now, was inconclusive), a premise's graph (not reported cut), and
    terminating (the graph builder's cycle)."""
    spec = load_file(DATA / "complete-at-bound.calc")
    out, _ = run_claims(spec, list(spec.claims), RunOptions())
    v = {x.name: x for x in out}
    for name in ("reach", "reach_plus", "join"):
        assert v[name].verdict == "refuted", name
        ce = v[name].counterexample
        assert ce.terms["M"] == "a" and ce.size == 1 and v[name].tried == 1, name
    g = v["reach"].counterexample.details["graph"]
    assert g["complete"] is True and g["nodes"] == 2 and g["normal_forms"] == []
    assert v["cycle"].verdict == "holds" and v["cycle"].undecided == 0
    assert v["premise"].verdict == "holds" and not v["premise"].notes
    assert v["stops"].verdict == "refuted"
    assert v["stops"].counterexample.terms["cycle"] == ["a", "b"]


def test_search_agrees_with_the_graph_builder_on_completeness() -> None:
    """The early-exit search and the full graph builder, on every term of size up to 3 and
    every bound on steps up to 3: the same completeness and the same answer."""
    from calcscout.obligations.engines.evaluate import search
    from calcscout.rules.rewriting.rewrite import reaches, reduction_graph

    spec = load_file(DATA / "complete-at-bound.calc")
    calc = spec.calculi["c"]
    terms = [t for (t,) in enumerate_tuples([(calc, "term")], 3, 0)]
    for steps in (1, 2, 3):
        for s in terms:
            g = reduction_graph(calc, s, steps, 100)
            for t in terms:
                r = search(calc, s, t, steps, 100)
                assert r.found == (reaches(g, t) is not None), (s, t, steps)
                if not r.found:
                    assert r.complete == g.graph["complete"], (s, t, steps)


@pytest.fixture(scope="module")
def parts():
    spec = load_file(DATA / "parts.calc")
    out, _ = run_claims(spec, list(spec.claims), RunOptions())
    return {v.name: v for v in out}


def test_own_counterexample_wins_over_the_normalize_part(parts) -> None:
    head, part = parts["own_first"], parts["own_first.normalize(into_fork)"]
    assert part.verdict == "refuted" and part.tried == 1
    assert head.verdict == "refuted" and head.counterexample.terms["M"] == "lam(x.x)"
    assert head.tried == 2 and head.reason is None


def test_a_premise_that_generates_nothing_holds_vacuously(parts) -> None:
    """`M -> N implies ...` where no term has a step used to say "holds, 8 cases".

    Family: every premise relation and every way a premise claim is reported.  Checked:
    ->, ->+ (vacuous), ->* (M itself is generated: never vacuous), the mono parts of a
    shorthand (vacuous parts, the head's verdict unchanged), the text line and the JSON
    field (test_cli), and that a claim with generated cases has no such field."""
    from calcscout.obligations.reporting.report import text_report

    for name in ("idle", "idle_plus", "iso.mono(F)", "iso.mono(G)"):
        v = parts[name]
        assert v.verdict == "holds" and v.vacuous, name
        assert v.to_json()["vacuous"] is True
        assert v.reason == "no term within the bounds has a step"
    for name in ("busy", "iso", "iso.exact_unit"):
        assert parts[name].verdict == "holds" and not parts[name].vacuous, name
        assert "vacuous" not in parts[name].to_json()
    text = text_report("parts.calc", [parts["idle"], parts["busy"]])
    assert "holds        idle  vacuously: no term within the bounds has a step" in text
    assert "vacuously" not in text.split("\n")[2]


def test_normalize_records_do_not_grow_with_the_cases(parts) -> None:
    """The fine cases of a normalised translation are kept as runs, not one entry each
    (memory must not grow with the number of cases); the part still counts every case,
    and shards (with their strides) give the same count."""
    from calcscout.obligations.claims import plan
    from calcscout.obligations.engines import enumeration

    spec = load_file(DATA / "parts.calc")
    claim = next(c for c in spec.claims if c.name == "tidy")
    head = plan(spec, claim).head
    b = spec.claim_bounds(claim, Bounds())
    whole = enumeration.run_shard(spec, head, b)
    assert whole.normalize["to_c"] == [[0, 0, whole.tried, 1]]
    shards = [enumeration.run_shard(spec, head, b, (i, 3)) for i in (1, 2, 3)]
    assert all(len(p.normalize["to_c"]) == 1 for p in shards)
    for limit in (None, 0, 5, 17):
        cut = {head.name: limit}
        one = enumeration.normalize_verdict("n", "", "", "to_c", "tidy", b, [whole], cut)
        three = enumeration.normalize_verdict("n", "", "", "to_c", "tidy", b, shards, cut)
        expect = whole.tried if limit is None else min(whole.tried, limit + 1)
        assert one.verdict == three.verdict == "holds" and one.tried == three.tried == expect
    assert parts["tidy.normalize(to_c)"].tried == whole.tried


def test_undecided_records_do_not_grow_with_the_cases(spec, verdicts) -> None:
    """Consecutive undecided cases cut by one bound are one run, not one entry each; the
    verdict counts them all, and shards give the same count and bound."""
    from calcscout.obligations.claims import plan
    from calcscout.obligations.engines import enumeration

    claim = next(c for c in spec.claims if c.name == "back")
    head = plan(spec, claim).head
    b = spec.claim_bounds(claim, Bounds())
    whole = enumeration.run_shard(spec, head, b)
    v = verdicts["back"]
    assert v.verdict == "inconclusive" and v.undecided > 10
    assert len(whole.undecided) < v.undecided  # runs
    assert enumeration.undecided_tally(whole.undecided) == (v.undecided, "steps")
    shards = [enumeration.run_shard(spec, head, b, (i, 3)) for i in (1, 2, 3)]
    entries = [u for p in shards for u in p.undecided]
    for below in (None, 0, 3, 10, 40):
        singles = [(i, "steps") for (s, _, n, k) in whole.undecided for i in range(s, s + n * k, k)]
        expect = len([i for i, _ in singles if below is None or i < below])
        assert enumeration.undecided_tally(entries, below)[0] == expect
        assert enumeration.undecided_tally(whole.undecided, below)[0] == expect
        assert enumeration.undecided_tally(singles, below)[0] == expect
