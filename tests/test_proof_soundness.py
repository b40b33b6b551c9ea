"""Soundness of the proof engine: no false claim is ever proved.

Mutation: every equation of the translations of the small fixtures (and, in the slow run,
of the whole library and the demo) is mutated one way at a time (swap arguments, drop a
constructor, replace a subterm by a name, change a binder); a claim that the proof engine
proves on a mutant must not be refuted by the enumeration engine at a larger bound.  Bugs
behind deep patterns hold to small sizes and are the ones a careless prover would pass.
"""

from __future__ import annotations

from pathlib import Path

import pytest
from proof_mutants import mutants

from calcscout.obligations.runner import RunOptions, run_claims
from calcscout.rules.core.errors import CalcError
from calcscout.rules.core.spec import Bounds, Confluent, Terminating
from calcscout.rules.loading.load import load_file, load_text

ROOT = Path(__file__).resolve().parents[1]
DATA = ROOT / "tests" / "data"


def _relational(spec):
    return [c for c in spec.claims if not isinstance(c.formula, Confluent | Terminating)]


def test_a_bug_behind_a_deep_pattern_is_not_proved() -> None:
    spec = load_file(DATA / "proof" / "deep-bug.calc")
    small, _ = run_claims(spec, list(spec.claims), RunOptions(Bounds(size=8)))
    assert {v.name: v.verdict for v in small}["back"] == "holds"  # it looks true
    big, _ = run_claims(spec, list(spec.claims), RunOptions(Bounds(size=9)))
    assert {v.name: v.verdict for v in big}["back"] == "refuted"
    proof, _ = run_claims(spec, list(spec.claims), RunOptions(engine="proof"))
    for v in proof:
        assert not (v.verdict == "holds" and v.scope == "all"), v.name


def mutation_counts(path: Path, bigger: int) -> dict[str, int]:
    """Check every mutant of the file; return the counts (and fail on a proved falsehood)."""
    source = path.read_text()
    counts = {"mutants": 0, "refuted": 0, "proved": 0, "proved_and_refuted": 0}
    for where, kind, text in mutants(source):
        try:
            spec = load_text(text, str(path))
        except CalcError:
            continue
        claims = _relational(spec)
        if not claims:
            continue
        counts["mutants"] += 1
        try:
            proofs, _ = run_claims(spec, claims, RunOptions(engine="proof"))
            bounded, _ = run_claims(spec, claims, RunOptions(Bounds(size=bigger)))
        except CalcError:
            continue  # a run-time error of the mutant (a bound name escaping, say)
        refuted = {v.name for v in bounded if v.verdict == "refuted"}
        done = {v.name for v in proofs if v.verdict == "holds" and v.scope == "all"}
        counts["refuted"] += bool(refuted)
        counts["proved"] += len(done)
        bad = done & refuted
        counts["proved_and_refuted"] += len(bad)
        assert not bad, f"{path.name} {where} ({kind}): proved yet refuted: {sorted(bad)}"
    return counts


@pytest.mark.parametrize("name", ["proof/values.calc", "proof/deep-bug.calc"])
def test_no_mutant_of_a_fixture_is_proved_false(name: str) -> None:
    counts = mutation_counts(DATA / name, bigger=8)
    assert counts["mutants"] >= 5 and counts["refuted"] >= 1, counts
    print(name, counts)
    assert counts["proved_and_refuted"] == 0


@pytest.mark.slow
@pytest.mark.parametrize("name", ["rules/library/plotkin-cps.calc",
                                  "rules/demo/resugar-v2.calc",
                                  "rules/library/anf.calc"])
def test_no_mutant_of_the_library_is_proved_false(name: str) -> None:
    counts = mutation_counts(ROOT / name, bigger=6)
    print(name, counts)
    assert counts["proved_and_refuted"] == 0
