"""The command line as a user meets it: output, exit codes, reports (LANGUAGE.md §9)."""

from __future__ import annotations

import importlib.util
import json
import xml.etree.ElementTree as ET
from pathlib import Path

import pytest

from calcscout.obligations.commands.cli import main

DATA = Path(__file__).parent / "data"
BASICS = str(DATA / "engine" / "basics.calc")
EVERY = str(DATA / "conformance" / "every-construct.calc")
DEMO = Path(__file__).parent.parent / "rules" / "demo"


def run(capsys, *args: str) -> tuple[int, str, str]:
    with pytest.raises(SystemExit) as info:
        main(list(args))
    out, err = capsys.readouterr()
    return info.value.code, out, err


def test_version_and_help(capsys) -> None:
    code, out, _ = run(capsys, "--version")
    assert code == 0 and out.startswith("calcscout, version ")
    for cmd in ("check", "lint", "terms", "translate", "reduce", "merge", "explain"):
        code, out, _ = run(capsys, cmd, "--help")
        assert code == 0 and "Usage:" in out, cmd


def test_lint_ok_and_nothing(capsys, tmp_path) -> None:
    code, out, _ = run(capsys, "lint", EVERY)
    assert code == 0 and "ok: 6 calculi, 3 translations, 11 claims in 2 files" in out
    empty = tmp_path / "empty.calc"
    empty.write_text("# nothing here\n")
    code, out, _ = run(capsys, "lint", str(empty))
    assert code == 0 and "declares nothing" in out


def test_lint_bad_file_exits_2_with_place_and_caret(capsys) -> None:
    code, out, err = run(capsys, "lint", str(DATA / "conformance" / "bad" / "shape.calc"))
    assert code == 2 and out == ""
    first = err.splitlines()[0]
    assert first.endswith("shape.calc:5:24: error: constructor app used with another shape "
                          "(two arguments declared, one given)")
    assert ":5:24: error: constructor app used with another shape" in first
    assert "^" in err and "Traceback" not in err


def test_terms_count_alone_and_listing(capsys) -> None:
    code, out, _ = run(capsys, "terms", BASICS, "lam.term", "--size", "3", "--names", "1",
                       "--count")
    assert code == 0 and out == "7\n"  # x; \\x.x, \\y.x; \\x.\\y.y, \\x.\\y.x, \\y.\\z.x, x x
    code, out, _ = run(capsys, "terms", BASICS, "lam.term", "--size", "3", "--names", "1")
    lines = out.splitlines()
    assert len(lines) == 7 and lines[0] == "x" and lines[1] == "lam(x.x)"
    code, _, err = run(capsys, "terms", BASICS, "lam.nosuch")
    assert code == 2 and "no sort nosuch" in err
    code, _, err = run(capsys, "terms", BASICS, "lam.term", "--size", "0")
    assert code == 2 and "--size" in err


def test_translate_prints_abstract_then_notation(capsys) -> None:
    code, out, _ = run(capsys, "translate", str(DEMO / "quill-calculi.calc"), "desugar",
                       r"unless x then y else \z. z")
    assert code == 0
    assert out.splitlines() == ["if(x, lam(z.z), y)", r"if x then \z. z else y"]


def test_translate_with_an_extra_argument(capsys) -> None:
    code, out, _ = run(capsys, "translate", str(DATA / "translate" / "plotkin.calc"), "go", "x",
                       "k")
    assert code == 0 and out.splitlines()[0] == "app(k, x)"


def test_a_term_that_does_not_parse(capsys) -> None:
    code, out, err = run(capsys, "translate", EVERY, "tr", "app(x,")
    assert code == 2 and out == ""
    assert "<TERM>:1:" in err and "^" in err and "Traceback" not in err


def test_check_exit_codes(capsys) -> None:
    assert run(capsys, "check", BASICS, "identity")[0] == 0
    assert run(capsys, "check", BASICS, "identity", "flip_same")[0] == 1
    assert run(capsys, "check", BASICS, "back")[0] == 3
    code, _, err = run(capsys, "check", BASICS, "nosuch")
    assert code == 2 and "no claim nosuch" in err


def test_check_json_report_fields_in_order(capsys) -> None:
    code, out, _ = run(capsys, "check", BASICS, "flip_sim", "--json", "-")
    assert code == 1
    report = json.loads(out)
    assert report["file"].endswith("basics.calc")
    entry = report["claims"][0]
    assert list(entry)[:13] == ["name", "file", "formula", "verdict", "scope", "bounds", "tried",
                                "undecided", "cut_by", "seconds", "engine", "counterexample"][:13]
    assert entry["formula"] == "M -> N implies flip(M) ->* flip(N)"
    assert entry["bounds"] == {"size": 5, "steps": 10, "names": 1, "nodes": 2000}
    ce = entry["counterexample"]
    assert list(ce["terms"]) == ["M", "N", "flip(M)", "flip(N)"]
    assert ce["size"] == 4 and ce["evidence"]


def test_reports_are_written_whole_or_not_at_all(capsys, tmp_path) -> None:
    # a run-time failure in a claim is that claim's error verdict: the report is written
    # (it used to stop the run with no report; tests/test_claim_errors.py has the rest)
    target = tmp_path / "r.json"
    code, _, err = run(capsys, "check", str(DATA / "engine" / "runtime-failure.calc"), "--json",
                       str(target))
    assert code == 2 and err == ""
    assert json.loads(target.read_text())["claims"][0]["verdict"] == "error"
    # a command line that asks for what cannot be done stops the run: no report at all
    target.unlink()
    code, _, err = run(capsys, "check", EVERY, "--engine", "smt", "--json", str(target))
    assert code == 2 and "use --engine enum or auto" in err
    assert not target.exists() and list(tmp_path.iterdir()) == []


def test_junit_has_one_case_per_claim_and_part(capsys, tmp_path) -> None:
    path = tmp_path / "j.xml"
    run(capsys, "check", BASICS, "identity", "flip_same", "forked", "--junit", str(path))
    root = ET.parse(path).getroot()
    cases = {c.get("name"): c for c in root.iter("testcase")}
    assert set(cases) == {"identity", "flip_same", "forked", "forked.normalize(into_fork)"}
    assert cases["flip_same"].find("failure") is not None
    # refuted by its normalize part (it used to be skipped while the part failed)
    assert cases["forked"].find("failure") is not None
    assert cases["identity"].find("failure") is None


def test_no_colour_unless_a_terminal(capsys, monkeypatch) -> None:
    monkeypatch.setenv("NO_COLOR", "1")
    _, out, _ = run(capsys, "check", BASICS, "flip_same")
    assert "\x1b[" not in out
    assert "refuted" in out and "smallest counterexample (size 4)" in out


def test_shards_merge_into_the_unsharded_report(capsys, tmp_path) -> None:
    whole = tmp_path / "whole.json"
    run(capsys, "check", BASICS, "--json", str(whole))
    parts = []
    for i in (1, 2, 3):
        p = tmp_path / f"part{i}.json"
        run(capsys, "check", BASICS, "--shard", f"{i}/3", "--json", str(p))
        parts.append(str(p))
    merged = tmp_path / "merged.json"
    code, out, _ = run(capsys, "merge", *parts, "-o", str(merged))
    assert code == 1  # some claims are refuted
    strip = _without_timings(json.loads(whole.read_text()))
    assert _without_timings(json.loads(merged.read_text())) == strip
    code, _, err = run(capsys, "merge", *parts[:2], "-o", str(merged))
    assert code == 2 and "shard 3/3 is missing" in err


def test_explain_reprints_the_evidence_and_draws_the_graph(capsys, tmp_path) -> None:
    report = tmp_path / "r.json"
    run(capsys, "check", BASICS, "flip_sim", "--json", str(report))
    dot = tmp_path / "g.dot"
    code, out, _ = run(capsys, "explain", str(report), "flip_sim", "--dot", str(dot))
    assert code == 0
    assert "smallest counterexample (size 4)" in out and "flip(M) = app(x, lam(y.y))" in out
    text = dot.read_text()
    # the graph of flip(M) = app(x, lam(y.y)): one term, a normal form, drawn filled
    assert text.startswith("digraph reductions {") and text.rstrip().endswith("}")
    assert "peripheries=2" in text and "fillcolor" in text
    code, _, err = run(capsys, "explain", str(report), "nosuch")
    assert code == 2 and "no claim nosuch" in err


def test_reduce_summary_json_and_dot(capsys, tmp_path) -> None:
    code, out, _ = run(capsys, "reduce", BASICS, "lam", "app(lam(x.app(x, x)), lam(x.app(x, x)))",
                       "--json", "-")
    info = json.loads(out)
    assert code == 0 and info["cycles"] is True and info["normal_forms"] == []
    assert info["complete"] is True and info["nodes"] == 1
    code, out, _ = run(capsys, "reduce", BASICS, "grow", "f(x)", "--steps", "5", "--json", "-")
    info = json.loads(out)
    assert info["complete"] is False and info["cut_by"] == "steps"
    code, out, _ = run(capsys, "reduce", BASICS, "grow", "f(x)", "--nodes", "3", "--json", "-")
    assert json.loads(out)["cut_by"] == "nodes" and json.loads(out)["nodes"] <= 3
    dot = tmp_path / "g.dot"
    code, out, _ = run(capsys, "reduce", BASICS, "lam", "app(lam(x.x), y)", "--dot", str(dot))
    assert code == 0 and "normal form:" in out and "beta @ root" in dot.read_text()
    code, _, err = run(capsys, "reduce", BASICS, "lam", "f(x)")
    assert code == 2 and "unknown constructor f" in err


def _without_timings(report: dict) -> dict:
    for c in report["claims"]:
        c.pop("seconds", None)
    return report


def test_pairs_text_and_json(capsys) -> None:
    groups = str(Path(__file__).parent.parent / "rules" / "library" / "groups.calc")
    code, out, _ = run(capsys, "pairs", groups, "group", "--json", "-")
    report = json.loads(out)
    assert code == 0 and report["calculus"] == "group"
    statuses = sorted(p["status"] for p in report["pairs"])
    # the group axioms oriented left to right have three critical pairs, one of which
    # (associativity over the left inverse) does not join (Knuth and Bendix 1970)
    assert statuses == ["joinable", "joinable", "not-joinable"]
    code, out, _ = run(capsys, "pairs", groups, "group")
    assert code == 0 and "3 critical pair(s)" in out and "not-joinable (instances)" in out
    code, _, err = run(capsys, "pairs", groups, "group.nosuch")
    assert code == 2 and "no rule group nosuch" in err


def test_reduce_refuses_a_term_outside_every_sort(capsys) -> None:
    # num takes a digit, and x is a name of sort var: num(x) is in no sort of arith
    code, _, err = run(capsys, "reduce", EVERY, "arith", "num(x)")
    assert code == 2 and "not a term of calculus arith" in err


def test_engine_choice_is_reported_per_claim(capsys) -> None:
    cps = str(DATA / "smt" / "cps.calc")
    code, out, _ = run(capsys, "check", cps, "back", "sim", "--engine", "auto", "--size", "5",
                       "--json", "-")
    entries = {c["name"]: c for c in json.loads(out)["claims"]}
    assert code == 0
    # auto tries a proof first: the exact inverse is proved for all terms; the simulation is
    # not proved here (no substitution lemma), so the bounded engine for ->* decides it
    assert entries["back"]["engine"] == "proof" and entries["back"]["scope"] == "all"
    assert entries["sim"]["engine"] == "enum"  # ->* needs reduction paths
    assert entries["sim"]["proof"]["open"]  # and the proof's open cases are kept
    code, out, _ = run(capsys, "check", cps, "back", "--engine", "smt", "--size", "5",
                       "--json", "-")
    assert json.loads(out)["claims"][0]["engine"] == "smt"  # an exact equation: the solver
    code, _, err = run(capsys, "check", BASICS, "flip_back", "--engine", "smt", "--size", "4")
    assert code == 0
    code, _, err = run(capsys, "check", str(DATA / "conformance" / "every-construct.calc"),
                       "base", "--engine", "smt")
    assert code == 2 and "SMT engine does not take" in err


def test_export_writes_smtlib_files(capsys, tmp_path) -> None:
    code, out, _ = run(capsys, "export", str(DATA / "smt" / "cps.calc"), "back", "--size", "6",
                       "-o", str(tmp_path))
    assert code == 0
    paths = [Path(p) for p in out.split()]
    assert paths and all(p.suffix == ".smt2" and p.exists() for p in paths)
    text = paths[0].read_text()
    assert "(set-logic" in text and "(check-sat)" in text and "; unsat:" in text


def test_a_claim_named_twice_is_checked_once(capsys) -> None:
    """Family: repeated names on the command line; also checked: the claims keep the
    order in which they were first named."""
    code, out, _ = run(capsys, "check", BASICS, "identity", "flip_same", "identity",
                       "--json", "-")
    names = [c["name"] for c in json.loads(out)["claims"]]
    assert code == 1 and names == ["identity", "flip_same"]


def test_holds_on_an_empty_sort_says_so(capsys) -> None:
    """Family: a claim that holds with no case tried (a quantified sort with no term
    within the bounds, with or without a premise; sorts that are not empty but do not
    fit together); the verdict line and JSON warn, and a claim with cases has none."""
    empty = str(DATA / "hostile" / "empty-sort.calc")
    code, out, _ = run(capsys, "check", empty)
    assert code == 0
    lines = [line for line in out.splitlines() if line.startswith("  holds")]
    assert len(lines) == 2 and all("0 case(s)" in x and "warning: no case at all" in x
                                   for x in lines)
    code, out, _ = run(capsys, "check", empty, "--json", "-")
    for entry in json.loads(out)["claims"]:
        assert entry["tried"] == 0
        assert "M in open.num has no term up to size 4" in entry["warning"]
    code, out, _ = run(capsys, "check", empty, "--names", "1", "--json", "-")
    assert all("warning" not in c for c in json.loads(out)["claims"])
    # no sort is empty, but two metavariables do not fit in size 1 together
    together = str(DATA / "hostile" / "empty-together.calc")
    code, out, _ = run(capsys, "check", together, "--json", "-")
    entry = json.loads(out)["claims"][0]
    assert code == 0 and "have no values together up to size 1" in entry["warning"]
    code, out, _ = run(capsys, "check", together, "--size", "2", "--json", "-")
    assert code == 1 and "warning" not in json.loads(out)["claims"][0]
    if importlib.util.find_spec("z3") is not None:  # the solver engine's verdict warns too
        code, out, _ = run(capsys, "check", together, "--engine", "smt", "--json", "-")
        entry = json.loads(out)["claims"][0]
        assert code == 0 and entry["engine"] == "smt" and "no values together" in entry["warning"]


@pytest.mark.parametrize(("value", "traceback"), [("", False), ("0", False), ("1", True),
                                                   ("yes", True)])
def test_debug_traceback_only_when_asked(capsys, monkeypatch, value, traceback) -> None:
    """Family: the values of CALCSCOUT_DEBUG (unset or empty and 0 keep tracebacks off)."""
    import calcscout.obligations.commands.cli as cli_module

    def broken(path):
        raise RuntimeError("a planted bug")

    monkeypatch.setattr(cli_module, "load", broken)
    monkeypatch.setenv("CALCSCOUT_DEBUG", value)
    code, _, err = run(capsys, "check", BASICS)
    assert code == 70 and "a planted bug" in err
    assert ("Traceback" in err) == traceback
