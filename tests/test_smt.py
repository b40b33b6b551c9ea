"""The SMT engine: verdicts, counterexamples, candidates, and its faults said clearly."""

from __future__ import annotations

from pathlib import Path

import pytest
import z3

from calcscout.obligations.claims import plan
from calcscout.obligations.engines.smt import can_encode, choose_engine, run_smt
from calcscout.rules.core.errors import EncodingError
from calcscout.rules.core.spec import Bounds
from calcscout.rules.loading.load import load_file

DATA = Path(__file__).parent / "data"
CPS = DATA / "smt" / "cps.calc"
BUG8 = DATA / "smt" / "cps_bug8.calc"
EVERY = DATA / "conformance" / "every-construct.calc"


def obligation(path: Path, claim: str):
    spec = load_file(str(path))
    c = next(c for c in spec.claims if c.name == claim)
    return spec, plan(spec, c).head


def smt(path: Path, claim: str, size: int, **kw):
    spec, ob = obligation(path, claim)
    return run_smt(spec, ob, spec.effective_bounds(Bounds(size=size)), **kw)


def test_true_inverse_holds_within_the_bound():
    v = smt(CPS, "back", 12)
    assert (v.verdict, v.scope, v.engine, v.bounds.size) == ("holds", "bounded", "smt", 12)
    assert v.tried > 0 and "up to 12" in v.notes[0]


def test_membership_in_a_refinement_sort():
    assert smt(CPS, "image", 10).verdict == "holds"
    v = smt(CPS, "not_image", 10)
    assert v.verdict == "refuted"
    assert v.counterexample.size == 1
    assert v.counterexample.terms["M"] == "x"


def test_planted_bug_found_at_its_smallest_size():
    v = smt(BUG8, "back", 10)
    assert v.verdict == "refuted"
    assert v.counterexample.size == 8
    assert v.counterexample.terms["M"].count("app") == 3
    assert "ds(cps(M))" in v.counterexample.terms


def test_premise_one_step_decided():
    v = smt(CPS, "one", 6)
    assert v.verdict == "refuted" and v.counterexample.size == 4
    assert "N" in v.counterexample.terms
    assert "first step by rule beta_v" in v.counterexample.evidence


def test_reduction_conclusion_is_a_candidate_settled_by_rewriting():
    v = smt(CPS, "sim", 4)
    assert v.verdict == "holds"
    assert any("candidate" in n for n in v.notes)


def test_normalized_translation_is_not_encoded():
    spec, ob = obligation(EVERY, "image")
    ok, why = can_encode(spec, ob)
    assert not ok and "normalize" in why
    assert choose_engine(ob, "auto", spec) == "enum"
    with pytest.raises(EncodingError) as e:
        run_smt(spec, ob, spec.effective_bounds(Bounds(size=3)))
    assert e.value.exit_code == 2 and "normalize" in e.value.render()


def test_auto_prefers_smt_for_decided_claims_only():
    spec, back = obligation(CPS, "back")
    _, sim = obligation(CPS, "sim")
    assert choose_engine(back, "auto", spec) == "smt"
    assert choose_engine(sim, "auto", spec) == "enum"
    assert choose_engine(sim, "smt", spec) == "smt"


def test_a_solver_unknown_is_inconclusive_with_its_reason(monkeypatch):
    monkeypatch.setattr(z3.Solver, "check", lambda self, *a: z3.unknown)
    monkeypatch.setattr(z3.Solver, "reason_unknown", lambda self: "timeout")
    v = smt(CPS, "back", 5, timeout=0.001)
    assert v.verdict == "inconclusive"
    assert "unknown" in v.reason and "timeout" in v.reason
    assert v.cut_by == "timeout"


def test_an_encoding_past_its_budget_says_the_size_reached():
    v = smt(CPS, "back", 30, budget=2000)
    assert v.verdict == "inconclusive"
    assert "too large at size" in v.reason
