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
    v = smt(CPS, "back", 5, timeout=5.0)  # the patched check answers unknown at once
    assert v.verdict == "inconclusive"
    assert "unknown" in v.reason and "timeout" in v.reason
    assert v.cut_by == "timeout"


def test_an_encoding_past_its_budget_says_the_size_reached():
    v = smt(CPS, "back", 30, budget=2000)
    assert v.verdict == "inconclusive"
    assert "too large at size" in v.reason


# ---------------------------------------------------------------- budgets and reports


def cli(capsys, *args: str) -> tuple[int, str, str]:
    from calcscout.obligations.commands.cli import main

    with pytest.raises(SystemExit) as e:
        main(list(args))
    out, err = capsys.readouterr()
    return int(e.value.code or 0), out, err


@pytest.mark.parametrize("value", ["-1", "0", "inf", "-inf", "nan"])
def test_a_timeout_that_is_no_number_of_seconds_is_refused(capsys, value):
    """Family: numbers float() takes that are no timeout; checked -1, 0, inf, -inf, nan."""
    code, out, err = cli(capsys, "check", str(CPS), "back", "--engine", "smt",
                         f"--timeout={value}")
    assert code == 2
    assert "finite positive number of seconds" in err and "Traceback" not in err


def test_the_timeout_bounds_building_the_encoding_too(monkeypatch):
    """--size 400 --timeout 5 built the encoding for minutes: now the building stops once
    the timeout has passed since the claim started, and the claim is inconclusive saying at
    which size.  (Time made to pass at once, so that the test does not wait.)

    Family: work outside the solver's own timeout; checked the slot constraints, the
    translations' memo tables and the equality/occurrence/membership memos (all call the
    store's budget check), and the ordering queries (each has the solver's timeout)."""
    import time as _time

    real = _time.monotonic
    calls = {"n": 0}

    def clock():
        calls["n"] += 1
        return real() + (0 if calls["n"] < 3 else 1000)

    monkeypatch.setattr("calcscout.encoders.symbolic.time.monotonic", clock)
    monkeypatch.setattr("calcscout.encoders.z3run.time.monotonic", clock)
    v = smt(CPS, "back", 400, timeout=5.0)
    assert v.verdict == "inconclusive" and v.cut_by == "timeout"
    assert "timeout (5 s) ran out while the encoding for size" in v.reason


def test_a_claim_that_holds_is_reported_as_terms_covered(capsys):
    """The solver's count for a claim that holds is the number of terms its unsat answers
    cover (the enumeration's count), labelled so: not "cases tried"."""
    code, out, _ = cli(capsys, "check", str(CPS), "back", "--engine", "smt", "--size", "10")
    assert code == 0
    assert "for all 38438 terms up to size 10, names 1 (solver)" in out
    assert "case(s)" not in out.splitlines()[1]
    v = smt(CPS, "back", 10)
    assert v.tried == 38438 and any("not tried one by one" in n for n in v.notes)


def test_a_candidate_relation_past_its_step_limit_keeps_equality(monkeypatch):
    """Where the one-step test of `->*` grows past its limit the encoding keeps only
    equality (still a sound filter): the verdict is the same, with a note."""
    monkeypatch.setattr("calcscout.encoders.smt.STEP_LIMIT", 10)
    v = smt(CPS, "sim", 4)
    assert v.verdict == "holds"
    assert any("one-step test grew past its limit" in n for n in v.notes)
