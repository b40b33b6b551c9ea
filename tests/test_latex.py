"""``calcscout latex``: the document for a paper, and notations' ``typeset`` forms.

Golden files: one per library and demo example, in ``tests/data/latex/NAME.tex``,
made with ``--size 4`` (so that the claims are checked quickly).  After a
deliberate change of the output, regenerate them with

    CALCSCOUT_REGENERATE=1 .venv/bin/python -m pytest tests/test_latex.py -q

and read the diff before committing it.

Family: LaTeX's special characters (``\\ { } $ & # % _ ^ ~``) wherever user text
reaches the document: calculus, sort, rule and claim names, notation literals,
evidence text; all in one fixture (specials.calc), checked for balance and compiled.
"""

from __future__ import annotations

import json
import os
import re
import shutil
import subprocess
from pathlib import Path

import pytest
from conftest import DATA, DEMO, LIBRARY, ROOT

from calcscout.obligations.commands.cli import main
from calcscout.rules.notation.typeset import escape_text, ident, typeset_problems

GOLDEN = DATA / "latex"
EXAMPLES = sorted(LIBRARY.glob("*.calc")) + [DEMO / "resugar-v1.calc", DEMO / "resugar-v2.calc"]


def _write(invoke, source: Path, out: Path, *extra: str) -> str:
    rel = source.relative_to(ROOT)
    r = invoke("latex", str(rel), *extra, "-o", str(out))
    assert r.exit_code == 0, r.output
    return out.read_text()


@pytest.fixture
def at_root(monkeypatch):
    monkeypatch.chdir(ROOT)  # the document names the rule file as given, relative to here


@pytest.mark.parametrize("source", EXAMPLES, ids=lambda p: p.stem)
def test_golden(invoke, at_root, tmp_path, source):
    text = _write(invoke, source, tmp_path / "out.tex", "--size", "4")
    golden = GOLDEN / f"{source.stem}.tex"
    if os.environ.get("CALCSCOUT_REGENERATE"):
        golden.write_text(text)
    assert golden.exists(), f"no golden file {golden}; see this module's docstring"
    assert text == golden.read_text()
    _balanced(text)


def _balanced(text: str) -> None:
    """Braces balance (escaped ones aside), environments nest, and no special
    character stands unescaped outside the few places LaTeX needs it."""
    body = "\n".join(line for line in text.splitlines() if not line.startswith("%"))
    depth = 0
    i = 0
    while i < len(body):
        c = body[i]
        if c == "\\":
            i += 2
            continue
        if c == "{":
            depth += 1
        elif c == "}":
            depth -= 1
            assert depth >= 0, f"a closing brace too many near {body[max(0, i - 60):i + 1]!r}"
        elif c in "#%~":
            raise AssertionError(f"unescaped {c} near {body[max(0, i - 60):i + 1]!r}")
        elif c == "$":
            pass  # inline math: counted below
        i += 1
    assert depth == 0
    stack = []
    for kind, env in re.findall(r"\\(begin|end)\{([^}]*)\}", body):
        if kind == "begin":
            stack.append(env)
        else:
            assert stack and stack.pop() == env, f"\\end{{{env}}} does not close what is open"
    assert not stack
    unescaped_dollars = len(re.findall(r"(?<!\\)\$", body))
    assert unescaped_dollars % 2 == 0
    assert body.startswith("\\documentclass{article}\n\\usepackage{amsmath}\n")
    assert re.findall(r"\\usepackage\{([^}]*)\}", body) == ["amsmath"]


def test_demo_document_has_everything(invoke, at_root, tmp_path):
    text = (GOLDEN / "resugar-v1.tex").read_text()
    # the grammar, one line per sort, with the typeset form of lam
    assert r"\mathit{term} \ni M, N, P &::= V \mid M\ N \mid \mathsf{if}\ M\ \mathsf{then}\ N" \
        r"\ \mathsf{else}\ P" in text
    assert r"{\lambda x.\, M}" in text
    # a rule, an equation (the planted slip swaps the branches), a counterexample
    assert r"\text{(if\_t)} \quad & \mathsf{if}\ \mathsf{true}\ \mathsf{then}\ N\ \mathsf{else}\ " \
        r"P \longrightarrow N" in text
    assert (r"\mathit{resugar}(\mathsf{if}\ M\ \mathsf{then}\ N\ \mathsf{else}\ P) &= "
            r"\mathsf{when}\ \mathit{resugar}(M)\ \mathsf{then}\ \mathit{resugar}(P)\ "
            r"\mathsf{else}\ \mathit{resugar}(N)") in text
    assert r"\subsection*{Counterexample to \texttt{connection.mono(G)}}" in text
    assert r"M &= \mathsf{if}\ \mathsf{true}\ \mathsf{then}\ x\ \mathsf{else}\ \mathsf{true}" in text
    assert "Evidence: M -> N (first step by rule if\\_t at position root)" in text


def test_items_choose_what_is_included(invoke, at_root, tmp_path):
    text = _write(invoke, DEMO / "resugar-v1.calc", tmp_path / "o.tex", "core", "keeps_values")
    assert r"\section*{Calculus \texttt{core}}" in text
    assert "surface" not in text.split(r"\section*{Claims}")[0]
    assert "Translation" not in text
    assert r"\texttt{keeps\_values}: \textbf{holds}" in text
    assert "connection" not in text
    _balanced(text)


def _main(capsys, *args: str) -> tuple[int, str]:
    """The command line as a user runs it (errors become messages and exit codes)."""
    with pytest.raises(SystemExit) as info:
        main(list(args))
    out, err = capsys.readouterr()
    return info.value.code, out + err


def test_unknown_item_is_a_usage_error(capsys, at_root, tmp_path):
    code, out = _main(capsys, "latex", "rules/demo/resugar-v1.calc", "nosuch", "-o",
                      str(tmp_path / "o.tex"))
    assert code == 2
    assert "no calculus, translation or claim nosuch" in out
    assert not (tmp_path / "o.tex").exists()


def test_special_characters_are_escaped(invoke, tmp_path):
    text = _write(invoke, DATA / "latex" / "specials.calc", tmp_path / "s.tex")
    _balanced(text)
    for needle in (r"\mathit{t\_1}", r"\texttt{\%}", r"\texttt{\$}", r"\texttt{\&}", r"\texttt{\#}",
                   r"\texttt{\~{}}", r"\texttt{\^{}}", r"\texttt{\{}", r"\texttt{\}}",
                   r"\texttt{\textbackslash{}}", r"\mathsf{a\_b}", r"\text{(r\_1)}",
                   r"{\langle M, N \rangle}", r"\texttt{back\_again}"):
        assert needle in text, needle
    # the counterexample, printed with the notations
    assert r"M &= \texttt{\#}\ x" in text


def test_escape_text_every_special():
    assert escape_text("\\{}$&#%_^~") == (r"\textbackslash{}\{\}\$\&\#\%\_\^{}\~{}")
    assert ident("x1'") == "x_{1}'" and ident("foo") == r"\mathit{foo}"


NO_PDFLATEX = pytest.mark.skipif(shutil.which("pdflatex") is None,
                                 reason="pdflatex is not installed")


def _pdflatex(folder: Path) -> None:
    run = subprocess.run(["pdflatex", "-interaction=nonstopmode", "-halt-on-error", "doc.tex"],
                         cwd=folder, capture_output=True, text=True, timeout=120)
    assert run.returncode == 0, run.stdout[-2000:]
    assert (folder / "doc.pdf").stat().st_size > 0


@NO_PDFLATEX
def test_special_characters_compile_with_pdflatex(invoke, tmp_path):
    _write(invoke, DATA / "latex" / "specials.calc", tmp_path / "doc.tex", "--size", "4")
    _pdflatex(tmp_path)


@NO_PDFLATEX
@pytest.mark.parametrize("source", EXAMPLES, ids=lambda p: p.stem)
def test_golden_files_compile_with_pdflatex(tmp_path, source):
    shutil.copy(GOLDEN / f"{source.stem}.tex", tmp_path / "doc.tex")
    _pdflatex(tmp_path)


# ---------------------------------------------------------------- the typeset form


@pytest.mark.parametrize("name, where, message", [
    ("typeset-twice", "3:51", "the LaTeX form uses M twice; each placeholder exactly once (M, N)"),
    ("typeset-brace", "3:61", "the LaTeX form leaves 1 brace(s) open"),
    ("typeset-dollar", "3:48", "the LaTeX form may not contain $"),
])
def test_lint_checks_the_typeset_form(capsys, at_root, name, where, message):
    path = f"tests/data/latex/bad/{name}.calc"
    code, out = _main(capsys, "lint", str(path))
    assert code == 2
    assert f"{path}:{where}: error: {message}" in out
    assert "^" in out  # the line and a caret under the place


def test_typeset_problems_missing_placeholder_and_escapes():
    assert typeset_problems(r"\lambda x.\, M", ["x", "M"]) == []
    assert typeset_problems(r"\{ M \} \% \$", ["M"]) == []  # escaped characters are fine
    assert [m for m, _ in typeset_problems(r"\lambda x.\, N", ["x", "M"])] == [
        "the LaTeX form does not use M; each placeholder exactly once (x, M)"]
    # `\mathit{M}` uses M; `\Mfoo` and `MM` do not
    assert typeset_problems(r"\mathit{M} \Mfoo MM", ["M"]) == []


def test_typeset_keyword_keeps_constructors_named_like_it(invoke, tmp_path):
    f = tmp_path / "k.calc"
    f.write_text('calculus c {\n  names var x\n  sort t M ::= x | typeset(M) "T M" typeset "T\\, M"\n}\n')
    r = invoke("lint", str(f))
    assert r.exit_code == 0, r.output


# ---------------------------------------------------------------- notations in the terminal


def test_terminal_counterexample_has_notations_json_keeps_abstract(capsys):
    with pytest.raises(SystemExit):
        main(["check", str(DEMO / "resugar-v1.calc"), "connection", "--size", "4"])
    out = capsys.readouterr().out
    block = out.split("refuted: connection.mono(G)")[1].split("evidence:")[0]
    assert "    M          = if(tt, x, tt)\n                 if true then x else true\n" in block
    assert "    N          = x\n    resugar(M)" in block  # a name has no second line
    with pytest.raises(SystemExit):
        main(["check", str(DEMO / "resugar-v1.calc"), "connection", "--size", "4", "--json", "-"])
    report = json.loads(capsys.readouterr().out)
    mono = next(c for c in report["claims"] if c["name"] == "connection.mono(G)")
    assert mono["counterexample"]["terms"]["M"] == "if(tt, x, tt)"


def test_latex_culprits_go_under_the_counterexample(invoke, at_root, tmp_path):
    text = _write(invoke, DEMO / "resugar-v1.calc", tmp_path / "c.tex", "connection",
                  "--culprits", "--size", "4")
    _balanced(text)
    block = text.split(r"\subsection*{Counterexample to \texttt{connection.mono(G)}}")[1]
    block = block.split(r"\subsection*")[0]
    assert "Equations that translated the redex of the premise's step: " \
        "resugar: resugar(if(M, N, P))." in block
    assert r"A minimal set of rules that keeps the claim refuted: core.if\_t." in block


def test_long_sorts_go_on_over_several_lines():
    text = (GOLDEN / "resugar-v1.tex").read_text()
    # surface's expr has five alternatives: four on the first line, the fifth below
    assert "\\\\\n  &\\phantom{::=} \\mid \\mathsf{let}\\ x\\ \\texttt{=}\\ E\\ \\mathsf{in}\\ F" in text


def test_rewriting_counterexamples_are_terms_too(invoke, tmp_path):
    """``confluent``/``terminating`` counterexamples (``term``, ``left``, ``right``,
    ``cycle``) are read back in their calculus; a cycle is a chain of steps."""
    text = _write(invoke, DATA / "culprits" / "toyama.calc", tmp_path / "t.tex", "union_stops")
    _balanced(text)
    assert (r"\mathit{term} &= \mathsf{f}(\mathsf{a}, \mathsf{b}, \mathsf{g}(\mathsf{a}, "
            r"\mathsf{b}))") in text
    assert r"\mathsf{b})) \longrightarrow \mathsf{f}(\mathsf{g}(" in text
