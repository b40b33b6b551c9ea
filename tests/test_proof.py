"""The proof engine: claims proved for every term by induction, open cases where it does not
go through, lemmas, the written proof, and soundness (no false claim is ever proved)."""

from __future__ import annotations

import json
import re
import shutil
import subprocess
from pathlib import Path

import pytest

from calcscout.obligations.commands.cli import main
from calcscout.obligations.runner import RunOptions, run_claims
from calcscout.rules.loading.load import load_file, load_text

ROOT = Path(__file__).resolve().parents[1]
DATA = ROOT / "tests" / "data"
LIB = ROOT / "rules" / "library"
DEMO = ROOT / "rules" / "demo"


def verdicts(path: Path, engine: str = "proof", **bounds) -> dict:
    from calcscout.rules.core.spec import Bounds, Confluent, Terminating

    spec = load_file(path)
    claims = [c for c in spec.claims if engine != "proof"
              or not isinstance(c.formula, Confluent | Terminating)]
    out, _ = run_claims(spec, claims, RunOptions(Bounds(**bounds), engine=engine))
    return {v.name: v for v in out}


def run(capsys, *args: str) -> tuple[int, str, str]:
    with pytest.raises(SystemExit) as info:
        main(list(args))
    out, err = capsys.readouterr()
    return info.value.code, out, err


def proved(v) -> bool:
    return v.verdict == "holds" and v.scope == "all" and v.engine == "proof"


# ---------------------------------------------------------------- known answers


def test_plotkin_cps_inverse_image_and_simulation_are_proved() -> None:
    """Plotkin, "Call-by-name, call-by-value and the lambda-calculus", TCS 1975: the
    substitution lemma cps(M[x := V]) == cps(M)[x := psi(V)] (his Lemma, exact) is proved by
    structural induction; with it, a beta_v step gives cps(M) ->+ cps(N) by induction on the
    step (derived in the library file's header); the inverse ds(cps(M)) == M (ours) and the
    image grammar are proved outright."""
    v = verdicts(LIB / "plotkin-cps.calc")
    for name in ("cps_subst", "cps_exact", "cps_image", "cps_sim", "cps_gc.mono(F)",
                 "cps_gc.unit"):
        assert proved(v[name]), (name, v[name].verdict, v[name].reason)
    assert v["cps_subst"].lemma and "structural induction on M" in v["cps_subst"].reason
    assert v["cps_sim"].lemmas == ["cps_subst"]
    assert "induction on M -> N" in v["cps_sim"].reason
    # the claims the bounded engine refutes there are never proved
    for name in ("cps_lockstep", "cps_grammar_exact", "cps_gc.mono(G)", "cps_gc.counit",
                 "cps_etav_beta"):
        assert v[name].verdict == "inconclusive" and v[name].engine == "proof", name


def test_substitution_lemma_of_a_name_to_name_translation() -> None:
    """Barendregt 1984, Lemma 2.1.16 is the lambda calculus's own substitution lemma; a
    structural translation that maps names to names has the same lemma by the same
    induction (computed here), and simulation follows from it."""
    v = verdicts(DATA / "proof" / "values.calc")
    assert proved(v["id_subst"]) and proved(v["sim"]) and proved(v["back"])
    assert v["sim"].lemmas == ["id_subst"]
    cases = [c["case"] for c in v["id_subst"].proof["cases"]]
    assert cases == ["M = app(M1, M2)", "M = lam(y.M3)", "M = x", "M is a name other than x"]


def test_bracket_abstraction_simulation_is_never_proved() -> None:
    """The bracket abstraction of the library is refuted by the bounded engine (the textbook
    case lambda x.(lambda y.y) x, Hindley and Seldin 2008, ch. 9, recalled from memory); the
    proof engine stops at the abstraction under a binder."""
    v = verdicts(LIB / "bracket.calc")
    sim = v["cl_sim"]
    assert sim.verdict == "inconclusive" and sim.engine == "proof"
    root = [c for c in sim.proof["open"] if c["case"].startswith("root step by beta")]
    assert root and re.search(r"abs\(\w\.cl\(M1\)\)", root[0]["detail"]), root


def test_demo_variant_two_is_proved_where_structural() -> None:
    """Invented demo: the fixed resugaring pass; exact and structural parts are proved, the
    monotonicity parts need a substitution lemma, which the engine proposes."""
    v = verdicts(DEMO / "resugar-v2.calc")
    for name in ("exact.exact_counit", "exact.unit", "exact.counit", "keeps_values"):
        assert proved(v[name]), name
    mono = v["connection.mono(G)"]
    assert mono.verdict == "inconclusive"
    (case,) = [c for c in mono.proof["open"] if c["case"].startswith("root step by beta")]
    assert case["why"] == "needs-lemma"
    assert "resugar(M[x := V]) == resugar(M)[x := rv(V)]" in case["candidate_lemmas"]


def test_demo_variant_one_slip_is_the_open_case() -> None:
    """Invented demo: variant 1 swaps the branches of if; the open case of the exact part is
    the if case, with the swapped branches as its goal (the bounded counterexample's shape)."""
    v = verdicts(DEMO / "resugar-v1.calc")
    ex = v["exact.exact_counit"]
    assert ex.verdict == "inconclusive"
    (case,) = ex.proof["open"]
    assert case["case"].startswith("M = if(")
    assert case["goal"] == {"left": "if(M3, M5, M4)", "right": "if(M3, M4, M5)"}
    auto = verdicts(DEMO / "resugar-v1.calc", engine="auto")["exact.exact_counit"]
    assert auto.verdict == "refuted" and auto.proof["open"][0]["case"] == case["case"]
    assert auto.counterexample.terms["M"].startswith("if(")


def test_candidate_lemmas_are_checked_before_they_are_offered() -> None:
    """The candidates for a stuck call on a pending substitution are offered only when the
    bounded engine finds no counterexample; each offered one is then a true lemma up to the
    bounds, in claim syntax."""
    from calcscout.obligations.claims import plan
    from calcscout.obligations.engines.lemmas import ProofBook
    from calcscout.obligations.engines.proof import Prover
    from calcscout.rules.core.spec import Bounds

    text = (DATA / "proof" / "values.calc").read_text()
    text = text.replace("lemma id_subst: id(M[x := V]) == id(M)[x := idv(V)]\n", "")
    text = text.replace(" needs id_subst", "")
    spec = load_text(text, "no-lemma.calc")
    sim = next(c for c in spec.claims if c.name == "sim")
    ob = plan(spec, sim).head
    book = ProofBook(spec, Bounds())
    offered = book.result(sim).open[0].candidates
    assert "id(M[x := V]) == id(M)[x := idv(V)]" in offered
    for text_ in offered:  # each holds up to the bounds when written into the file
        s2 = load_text(text + f"\nlemma cand: {text_}\n", "cand.calc")
        out, _ = run_claims(s2, [c for c in s2.claims if c.name == "cand"], RunOptions())
        assert out[0].verdict == "holds", text_
    refusing = Prover(spec, Bounds(), [], check_candidate=lambda claim: False)
    assert refusing.prove(ob).open[0].candidates == []


# ---------------------------------------------------------------- reports and command line


def test_report_carries_the_proof(capsys, tmp_path) -> None:
    report = tmp_path / "r.json"
    code, out, _ = run(capsys, "check", str(DATA / "proof" / "values.calc"), "--engine",
                       "proof", "--json", str(report))
    assert code == 0
    assert "proved for all terms (structural induction on M, 4 case(s))  [proof]" in out
    data = json.loads(report.read_text())
    entry = {c["name"]: c for c in data["claims"]}["id_subst"]
    assert entry["lemma"] is True and entry["scope"] == "all" and entry["engine"] == "proof"
    assert entry["proof"]["cases"][0]["steps"][0]["by"].startswith("equation id.2")
    assert {c["name"]: c for c in data["claims"]}["sim"]["lemmas"] == ["id_subst"]


def test_open_cases_are_listed_with_their_goal(capsys, tmp_path) -> None:
    junit = tmp_path / "j.xml"
    code, out, _ = run(capsys, "check", str(DEMO / "resugar-v1.calc"), "exact", "--engine",
                       "proof", "--junit", str(junit))
    assert code == 3
    assert "case M = if(M3, M4, M5)" in out and "goal:  if(M3, M5, M4)" in out
    assert "goal:  if(M3, M5, M4)" in junit.read_text()  # JUnit carries the open cases too


def test_proof_engine_refuses_confluence_claims(capsys) -> None:
    code, _, err = run(capsys, "check", str(LIB / "lambda.calc"), "beta_confluent", "--engine",
                       "proof")
    assert code == 2 and "not proved by induction" in err


def test_terminating_under_the_proof_engine_is_the_orders_alone(capsys) -> None:
    """Issue-level contract: with --engine proof a terminating claim gets the termination
    orders only, and says why it is not proved (beta substitutes on its right side)."""
    code, out, _ = run(capsys, "check", str(LIB / "lambda.calc"), "beta_terminates", "--engine",
                       "proof")
    assert code == 3 and "substitution on the right-hand side" in out


def test_written_proof_markdown_and_latex(capsys, tmp_path) -> None:
    md, tex = tmp_path / "p.md", tmp_path / "p.tex"
    for path in (md, tex):
        code, _, _ = run(capsys, "check", str(DATA / "proof" / "values.calc"), "--engine",
                         "proof", "--proof", str(path))
        assert code == 0
    text = md.read_text()
    assert "## Lemma `id_subst`" in text and "**Case 1** (proved): `M = app(M1, M2)`" in text
    assert "— lemma id_subst" in text or "lemma id_subst" in text
    latex = tex.read_text()
    assert latex.count(r"\begin{proof}") == latex.count(r"\end{proof}") == 3
    body = re.sub(r"\\[{}_#%&$^~]", "", latex)
    assert body.count("{") == body.count("}")
    assert not re.search(r"(?<!\\)[_#%&]", latex.replace(r"\_", "")), "unescaped specials"
    if shutil.which("pdflatex"):
        r = subprocess.run(["pdflatex", "-interaction=nonstopmode", "-halt-on-error",
                            tex.name], cwd=tmp_path, capture_output=True, text=True, timeout=120)
        assert r.returncode == 0, r.stdout[-2000:]


def test_proof_option_needs_a_known_ending_and_engine(capsys, tmp_path) -> None:
    code, _, err = run(capsys, "check", str(DATA / "proof" / "values.calc"), "--engine",
                       "proof", "--proof", str(tmp_path / "p.txt"))
    assert code == 2 and ".md or .tex" in err and not (tmp_path / "p.txt").exists()
    code, _, err = run(capsys, "check", str(DATA / "proof" / "values.calc"), "--proof",
                       str(tmp_path / "p.md"))
    assert code == 2 and "--engine proof" in err
    code, _, err = run(capsys, "check", str(DATA / "proof" / "values.calc"), "--engine", "proof",
                       "--proof", str(tmp_path / "missing" / "p.md"))
    assert code == 2 and not (tmp_path / "missing").exists()  # an unwritable path


def test_bounded_engines_check_lemmas_and_substitutions(capsys) -> None:
    v = verdicts(DATA / "proof" / "values.calc", engine="enum")
    assert v["id_subst"].verdict == "holds" and v["id_subst"].lemma
    false = (DATA / "proof" / "values.calc").read_text().replace(
        "== id(M)[x := idv(V)]", "== id(M)")
    s = load_text(false, "false.calc")
    out, _ = run_claims(s, [c for c in s.claims if c.name == "id_subst"], RunOptions())
    assert out[0].verdict == "refuted"
    assert out[0].counterexample.terms["M"] == "x"
