"""``check --culprits`` and ``check --by-rule``: which rules and equations a failure needs.

Family: failures that need rules of one calculus (the demo's mono part: the core
rule whose step the slipped equation does not carry over), failures that need no
rule at all (the demo's unit and counit: the translations alone), and failures
that need rules of two systems together (Toyama 1987's non-terminating union);
also checked: the fixed demo variant (v2) has nothing to blame, a rule the
failure does not need is left out of the minimal set (toyama.calc's `tidy`).
"""

from __future__ import annotations

import json

import pytest
from conftest import DATA, DEMO, load_spec

from calcscout.obligations.analysis.culprits import (
    ddmin,
    minimal,
    restrict,
    still_refuted,
    with_rules,
)
from calcscout.obligations.analysis.keys import obligations_by_name
from calcscout.obligations.commands.cli import main
from calcscout.rules.core.spec import Bounds
from calcscout.rules.loading.load import load_file

V1 = str(DEMO / "resugar-v1.calc")
V2 = str(DEMO / "resugar-v2.calc")
TOYAMA = str(DATA / "culprits" / "toyama.calc")
SLIP = "resugar: resugar(if(M, N, P))"  # the planted slip: the branches are swapped


def _json(capsys, *args: str) -> tuple[int, dict]:
    with pytest.raises(SystemExit) as info:
        main(["check", *args, "--json", "-"])
    out, _ = capsys.readouterr()
    return info.value.code, json.loads(out)


def _claims(report: dict) -> dict[str, dict]:
    return {c["name"]: c for c in report["claims"]}


def test_demo_slip_is_isolated(capsys):
    code, report = _json(capsys, V1, "connection", "--culprits", "--size", "5")
    assert code == 1
    c = _claims(report)
    mono = c["connection.mono(G)"]["counterexample"]["details"]["culprits"]
    # the one rule of the premise's calculus the failure needs, and the one equation
    # that translated the step's redex
    assert mono["minimal"] == ["core.if_t"]
    assert mono["at_redex"] == [SLIP]
    # what the evidence uses: the premise's step, the conclusion's graph, the equations
    assert mono["used"][:2] == ["core.if_t", "surface.when_t"]
    assert SLIP in mono["used"] and "resugar: rv(tt)" in mono["used"]
    assert not any(u.startswith("desugar") for u in mono["used"])  # desugar is not involved
    # unit and counit need no rule at all: the translations alone make them fail
    for part in ("connection.unit", "connection.counit"):
        got = c[part]["counterexample"]["details"]["culprits"]
        assert got["minimal"] == []
        assert SLIP in got["used"] and "desugar: desugar(when(E, F, G))" in got["used"]
        assert "at_redex" not in got
    # a claim that holds has no counterexample and no culprits
    assert c["connection.mono(F)"]["counterexample"] is None


def test_demo_terminal_prints_culprits_under_the_counterexample(capsys):
    with pytest.raises(SystemExit):
        main(["check", V1, "connection", "--culprits", "--size", "4"])
    out = capsys.readouterr().out
    block = out.split("refuted: connection.mono(G)")[1].split("refuted:")[0]
    assert f"  at redex: {SLIP}\n" in block
    assert "  minimal:  core.if_t\n" in block
    assert "minimal:  no rule (the failure lies in the translations)" in out


def test_minimal_set_is_one_minimal_and_refutes():
    """Keeping only the minimal set refutes; dropping any one of its rules repairs."""
    spec = load_file(V1)
    ob = obligations_by_name(spec)["connection.mono(G)"]
    b = spec.claim_bounds(ob.claim, Bounds(size=5))
    least = minimal(spec, ob, b)
    assert least == ["core.if_t"]
    core = spec.calculi["core"]
    keep = [r for r in core.rules if f"core.{r.name}" in least]
    assert still_refuted(*restrict(spec, ob, keep), b)
    for r in keep:
        assert not still_refuted(*restrict(spec, ob, [x for x in keep if x is not r]), b)
    # and the premise without its if rules: the claim holds (only beta is left)
    assert not still_refuted(*restrict(spec, ob, [core.rules[0]]), b)


def test_fixed_variant_has_nothing_to_blame(capsys):
    code, report = _json(capsys, V2, "connection", "--culprits", "--by-rule", "--size", "4")
    assert code == 0
    assert all(c["counterexample"] is None for c in report["claims"])
    parts = [c for c in report["claims"] if ".by(" in c["name"]]
    assert parts and all(p["verdict"] == "holds" for p in parts)


def test_by_rule_splits_the_premise(capsys):
    code, report = _json(capsys, V1, "connection", "--by-rule", "--size", "5")
    assert code == 1  # the exit status is the claims', parts do not change it
    c = _claims(report)
    names = [x["name"] for x in report["claims"]]
    g = names.index("connection.mono(G)")
    assert names[g + 1:g + 4] == ["connection.mono(G).by(beta)", "connection.mono(G).by(if_t)",
                                  "connection.mono(G).by(if_f)"]
    assert c["connection.mono(G).by(beta)"]["verdict"] == "holds"
    assert c["connection.mono(G).by(if_t)"]["verdict"] == "refuted"
    assert c["connection.mono(G).by(if_f)"]["verdict"] == "refuted"
    for n in ("beta", "if_t", "if_f"):
        assert c[f"connection.mono(G).by({n})"]["part_of"] == "connection.mono(G)"
    # each part's counterexample steps by its own rule
    assert "by rule if_f" in c["connection.mono(G).by(if_f)"]["counterexample"]["evidence"]
    assert c["connection.mono(G).by(if_f)"]["counterexample"]["terms"]["M"] == "if(ff, x, tt)"
    # the surface side's five rules each keep mono(F) true
    f_parts = [x for x in names if x.startswith("connection.mono(F).by(")]
    assert len(f_parts) == 5 and all(c[x]["verdict"] == "holds" for x in f_parts)
    # a part without a premise is not split
    assert not any(x.startswith("connection.unit.by(") for x in names)


def test_toyama_union_needs_rules_of_both_systems(capsys):
    code, report = _json(capsys, TOYAMA, "--culprits")
    assert code == 1
    c = _claims(report)
    assert c["r1_stops"]["verdict"] == "holds" and c["r2_stops"]["verdict"] == "holds"
    got = c["union_stops"]["counterexample"]["details"]["culprits"]
    # the cycle f(a, b, g(a, b)) -> f(g.., g.., g..) -> f(a, g.., g..) -> f(a, b, g..)
    # (Toyama 1987) uses the rule of R1 and both rules of R2; `tidy` is not needed
    assert got["used"] == ["union.dup", "union.left", "union.right"]
    assert got["minimal"] == ["union.dup", "union.left", "union.right"]


def test_culprits_refuse_a_shard(capsys):
    with pytest.raises(SystemExit) as info:
        main(["check", V1, "--culprits", "--shard", "1/2"])
    assert info.value.code == 2
    assert "--shard" in capsys.readouterr().err


@pytest.mark.parametrize("n, needed", [
    (8, {3, 6}), (1, {0}), (5, set()), (16, {0, 15}), (7, {1, 2, 3}),
])
def test_ddmin_finds_a_one_minimal_subset(n, needed):
    calls = []

    def fails(s):
        calls.append(tuple(s))
        return needed <= set(s)

    got = ddmin(list(range(n)), fails)
    assert set(got) == needed
    assert got == sorted(got)  # order of the input kept


def test_ddmin_one_minimal_with_alternatives():
    """Two disjoint causes: ddmin returns one of them, and it is 1-minimal."""
    def fails(s):
        return {1, 2} <= set(s) or {5} <= set(s)

    got = ddmin(list(range(8)), fails)
    assert fails(got)
    assert all(not fails([x for x in got if x != y]) for y in got)


def test_spec_is_unchanged_by_the_analysis():
    spec = load_spec(DEMO / "resugar-v1.calc")
    before = [r.name for r in spec.calculi["core"].rules]
    ob = obligations_by_name(spec)["connection.mono(G)"]
    minimal(spec, ob, spec.claim_bounds(ob.claim, Bounds(size=4)))
    assert [r.name for r in spec.calculi["core"].rules] == before


def test_a_refuted_normalize_part_gets_no_culprits(capsys):
    """A ``normalize(T)`` part is refuted by its translation's normal forms, not by a claim's
    rules: it must not be taken for a ``terminating`` claim and searched over."""
    code, report = _json(capsys, str(DATA / "engine" / "basics.calc"), "forked", "plus_step",
                         "--culprits")
    c = _claims(report)
    part = c["forked.normalize(into_fork)"]
    assert part["verdict"] == "refuted"
    assert "culprits" not in (part["counterexample"] or {}).get("details", {})
    assert code in (1, 3)


def test_minimal_restricts_the_premise_side_only():
    """With the conclusion keeping every rule, the one irreversible rule is blamed; dropping
    rules from the whole calculus would blame b (whose step e undoes) instead."""
    spec = load_file(str(DATA / "culprits" / "premise-side.calc"))
    ob = obligations_by_name(spec)["undo"]
    b = spec.claim_bounds(ob.claim)
    assert minimal(spec, ob, b) == ["side.d"]
    rules = {r.name: r for r in spec.calculi["side"].rules}
    assert not still_refuted(*restrict(spec, ob, [rules["b"]]), b)
    assert still_refuted(with_rules(spec, "side", [rules["b"]]), ob, b)  # the whole-calculus way


def test_explain_shows_saved_culprits(capsys, tmp_path):
    """The culprits travel in the JSON report, so ``explain`` prints them again."""
    saved = tmp_path / "r.json"
    with pytest.raises(SystemExit):
        main(["check", V1, "connection", "--culprits", "--size", "4", "--json", str(saved)])
    capsys.readouterr()
    with pytest.raises(SystemExit) as info:
        main(["explain", str(saved), "connection.mono(G)"])
    out = capsys.readouterr().out
    assert info.value.code in (0, 1)
    assert f"  at redex: {SLIP}\n" in out and "  minimal:  core.if_t\n" in out
