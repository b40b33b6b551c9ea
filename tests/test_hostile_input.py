"""Hostile input is a user error (exit 2 with a message), never an internal one.

Issue 9, item 13: a rule nested 6000 levels deep (tests/data/bad/deep-nesting.calc),
a command-line term of 50,000 parentheses, non-UTF-8 bytes in a file read.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

from calcscout.rules.core.errors import CalcError, TermError
from calcscout.rules.loading.load import load_file, load_text
from calcscout.rules.loading.syntax import MAX_NESTING
from calcscout.rules.notation.notation import MAX_TERM_DEPTH, MAX_TERM_TOKENS, parse_term

ROOT = Path(__file__).parent.parent
LAMBDA = load_file(ROOT / "rules" / "library" / "lambda.calc").calculi["lambda"]


@pytest.mark.parametrize("text, message", [
    ("(" * 50_000 + "x" + ")" * 50_000, f"nests more than {MAX_TERM_DEPTH} parentheses"),
    ("lam(x." * 50_000 + "x" + ")" * 50_000, f"more than {MAX_TERM_TOKENS} tokens"),
    ("(" * (MAX_TERM_DEPTH + 1) + "x", f"nests more than {MAX_TERM_DEPTH} parentheses"),
    ("x " * 50_000, f"more than {MAX_TERM_TOKENS} tokens"),
    ("\\x. " * 50_000 + "x", f"more than {MAX_TERM_TOKENS} tokens"),
])
def test_a_huge_command_line_term_is_refused_before_parsing(text: str, message: str) -> None:
    """Family: input whose size makes a recursive or superlinear step blow up; checked
    nested parentheses, nested constructor calls, a long flat application and a long
    chain of binders (no parentheses) on the command line, and in rule files nested
    constructors, calls in a claim and a right-hand side (below)."""
    with pytest.raises(TermError) as info:
        parse_term(LAMBDA, text)
    assert message in info.value.render()


def test_terms_within_the_limits_parse() -> None:
    depth = MAX_TERM_DEPTH
    n = (MAX_TERM_TOKENS - 1) // 5  # lam ( x . and ) per level
    t = parse_term(LAMBDA, "lam(x." * n + "x" + ")" * n)
    assert t is parse_term(LAMBDA, "\\x. " * n + "x")
    assert parse_term(LAMBDA, "x " * MAX_TERM_TOKENS) is not None
    assert parse_term(LAMBDA, "(" * depth + "x" + ")" * depth) is parse_term(LAMBDA, "x")


@pytest.mark.parametrize("where", ["rule", "rhs", "claim"])
def test_deep_nesting_in_a_rule_file_is_a_user_error(where: str) -> None:
    d = 6000
    deep = "s(" * d + "M" + ")" * d
    calc = "calculus c {\n names var x\n sort term M ::= x | s(M)\n"
    text = {
        "rule": calc + f" rule r: {deep} -> M\n}}\n",
        "rhs": calc + f" rule r: s(M) -> {deep}\n}}\n",
        "claim": calc + "}\ntranslation t : c -> c {\n t : term -> term\n t(x) = x\n"
                        " t(s(M)) = s(t(M))\n}\n" + f"claim k: {'t(' * d}M{')' * d} ->* M\n",
    }[where]
    with pytest.raises(CalcError) as info:
        load_text(text)
    assert f"nested more than {MAX_NESTING} levels deep" in info.value.render()


def test_nesting_up_to_the_limit_loads() -> None:
    d = MAX_NESTING - 1
    spec = load_text("calculus c {\n names var x\n sort term M ::= x | s(M)\n"
                     f" rule r: s({'s(' * d}M{')' * d}) -> M\n}}\n")
    assert spec.calculi["c"].rules


def test_a_report_that_is_not_utf8_is_a_user_error(tmp_path: Path) -> None:
    report = tmp_path / "r.json"
    report.write_bytes(b'{"claims": ["caf\xe9"]}')
    cli = "calcscout.obligations.commands.cli"
    run = subprocess.run([sys.executable, "-m", cli, "explain", str(report), "k"],
                         capture_output=True, text=True, cwd=ROOT)
    assert run.returncode == 2, run.stderr
    assert "is not UTF-8 text" in run.stdout + run.stderr
