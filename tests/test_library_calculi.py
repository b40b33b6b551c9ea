"""The reference calculi of rules/library/ give the answers the literature gives, through
the same `check` path a user takes (the sources are named in each file's comments)."""

from __future__ import annotations

import pytest
from conftest import LIBRARY, load_spec, verdicts_of

LIB = LIBRARY


def verdicts(name: str) -> dict:
    return verdicts_of(load_spec(LIB / name))


def test_lambda_beta_and_beta_eta_are_confluent_and_omega_loops() -> None:
    # Church and Rosser 1936; Barendregt 1984, chapter 3
    v = verdicts("lambda.calc")
    assert v["beta_confluent"].verdict == "holds" and v["beta_confluent"].scope == "all"
    assert "Klop" in v["beta_confluent"].reason
    assert v["beta_eta_confluent"].verdict == "holds" and v["beta_eta_confluent"].scope == "all"
    assert "Huet" in v["beta_eta_confluent"].reason
    t = v["beta_terminates"]
    assert t.verdict == "refuted"
    omega = "app(lam(x.app(x, x)), lam(x.app(x, x)))"
    assert t.counterexample.terms["term"] == omega and t.counterexample.terms["cycle"] == [omega]


def test_combinatory_logic_is_confluent_and_has_a_looping_term() -> None:
    # Hindley and Seldin 2008, chapter 2: S I I (S I I) reduces to itself (up to I-steps)
    v = verdicts("ski.calc")
    assert v["ski_confluent"].verdict == "holds" and v["ski_confluent"].scope == "all"
    t = v["ski_terminates"]
    assert t.verdict == "refuted" and t.counterexample.size == 11
    assert t.counterexample.terms["term"] == "ap(ap(ap(s, i), i), ap(ap(s, i), i))"


@pytest.mark.parametrize("claim", ["betav_confluent", "eval_confluent"])
def test_call_by_value_is_confluent_up_to_the_bound(claim: str) -> None:
    # Plotkin 1975: beta_v is Church-Rosser; no theorem applies to value-restricted rules,
    # so the verdict is a bounded one, and says so
    v = verdicts("lamv.calc")[claim]
    assert v.verdict == "holds" and v.scope == "bounded" and v.tried > 100
