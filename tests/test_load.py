"""Loading rule files: the conformance examples, and a catalogue of bad files
each with the message it must produce (first line: ``# expect LINE:COLUMN text``)."""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from calcscout.rules.core.errors import CalcError
from calcscout.rules.core.spec import Atom, Confluent, ECall, Implies, Shorthand, Terminating
from calcscout.rules.loading.load import load_file, load_text

DATA = Path(__file__).parent / "data"
BAD = sorted((DATA / "bad").glob("*.calc")) + sorted((DATA / "conformance" / "bad").glob("*.calc"))
EXPECT = re.compile(r"#\s*expect\s+(\d+):(\d+)\s+(.*)")


def _expectation(path: Path) -> tuple[int, int, str] | None:
    m = EXPECT.match(path.read_text(encoding="utf-8").splitlines()[0])
    return (int(m.group(1)), int(m.group(2)), m.group(3).strip()) if m else None


@pytest.mark.parametrize("path", [p for p in BAD if _expectation(p)], ids=lambda p: p.name)
def test_bad_file_is_reported_where_it_goes_wrong(path: Path) -> None:
    line, column, text = _expectation(path)  # type: ignore[misc]
    with pytest.raises(CalcError) as info:
        load_file(path)
    rendered = info.value.render()
    problems = [p for p in info.value.problems if p.pos is not None and p.pos.line == line]
    assert problems, f"no problem reported at line {line}:\n{rendered}"
    p = problems[0]
    # the conformance README allows the column to differ by the width of a token
    assert abs(p.pos.column - column) <= 12, rendered
    assert text in p.message, rendered
    assert f":{line}:" in rendered.splitlines()[0]
    assert "^" in rendered, "the message shows a caret under the place"
    assert "Traceback" not in rendered


def test_conformance_every_construct_loads() -> None:
    spec = load_file(DATA / "conformance" / "every-construct.calc")
    assert set(spec.calculi) == {"arith", "arith_noadmin", "arith_neg", "target", "small", "core"}
    assert set(spec.translations) == {"tr", "tr2", "same"}
    assert [c.name for c in spec.claims] == ["conf", "stops", "base", "iso", "sim", "sim2", "sim3",
                                             "sim4", "eta_only", "image", "det"]
    # the file's bounds line; the claims' own `within`
    assert (spec.bounds.size, spec.bounds.steps, spec.bounds.names, spec.bounds.nodes) == (5, 12, 1,
                                                                                          5000)
    claims = {c.name: c for c in spec.claims}
    assert claims["conf"].within.size == 4 and claims["det"].within.names == 0
    # claims of the included file's translation `same` resolve across files
    assert isinstance(claims["iso"].formula, Shorthand)
    assert isinstance(claims["conf"].formula, Confluent)
    assert isinstance(claims["stops"].formula, Terminating)


def test_extends_copies_and_changes() -> None:
    spec = load_file(DATA / "conformance" / "every-construct.calc")
    arith, noadmin, neg = (spec.calculi[n] for n in ("arith", "arith_noadmin", "arith_neg"))
    assert "assoc" in [r.name for r in arith.rules]
    assert "assoc" not in [r.name for r in noadmin.rules]
    assert noadmin.reduce_in == "E" == arith.reduce_in  # the reduce line is inherited
    assert "neg" in neg.shapes and "neg_z" in [r.name for r in neg.rules]
    assert any(getattr(a, "con", None) == "neg" for a in neg.sorts["term"].alts)
    assert arith.groups == ("admin",)
    # translation extends: own equations first, then the inherited ones
    tr, tr2 = spec.translations["tr"], spec.translations["tr2"]
    assert len(tr2.equations) == len(tr.equations) + 1
    first = tr2.equations[0]
    assert first.fn == "tk" and first.pattern.con == "app"
    assert tr2.entry == "tr" and tr2.normalize == "admin"


def test_claim_metavariables_are_inferred_from_functions() -> None:
    spec = load_file(DATA / "conformance" / "every-construct.calc")
    claims = {c.name: c for c in spec.claims}
    sim = claims["sim"]
    assert [(m.name, m.calculus, m.sort) for m in sim.quantified] == [("M", "small", "term")]
    assert isinstance(sim.formula, Implies)
    concl = sim.formula.conclusion
    assert isinstance(concl.left, ECall) and concl.relation.kind == "joins"
    assert concl.relation.calculus == "target"  # the calculus of tr(M)'s sort
    eta = claims["eta_only"]
    assert eta.formula.premise.relation.group == "admin"
    image = claims["image"].formula
    assert isinstance(image, Atom) and image.member_of == ("target", "term")
    det = claims["det"].formula
    assert det.left.translation == "tr" and det.right.translation == "tr2"


def test_several_problems_are_reported_at_once() -> None:
    text = """calculus c {
  names var x
  sort term M N ::= x | app(M, N)
  rule a: app(M, N) -> Q
  rule b: app(M, N) -> R
}"""
    with pytest.raises(CalcError) as info:
        load_text(text, "two.calc")
    lines = [p.pos.line for p in info.value.problems]
    assert lines == [4, 5]


def test_no_items_declares_nothing() -> None:
    spec = load_file(DATA / "bad" / "no-items.calc")
    assert spec.is_empty()


def test_empty_binary_and_huge_files(tmp_path: Path) -> None:
    empty = tmp_path / "empty.calc"
    empty.write_text("")
    assert load_file(empty).is_empty()
    binary = tmp_path / "binary.calc"
    binary.write_bytes(b"calculus c {\x00\x01\x02}")
    with pytest.raises(CalcError, match="not a text file"):
        load_file(binary)
    latin = tmp_path / "latin1.calc"
    latin.write_bytes("# caf\xe9\n".encode("latin-1"))
    with pytest.raises(CalcError, match="not UTF-8"):
        load_file(latin)
    huge = tmp_path / "huge.calc"
    huge.write_text("# padding\n" * 500_000)  # 5 MB
    with pytest.raises(CalcError, match="5.0 MB"):
        load_file(huge)
    with pytest.raises(CalcError, match="no such file"):
        load_file(tmp_path / "missing.calc")


def test_unicode_in_strings_is_fine() -> None:
    spec = load_text('calculus c { names var x\n sort term M N ::= x | lam(x.M) "λx. M" }')
    note = spec.calculi["c"].sorts["term"].alts[1].notation
    assert note.tokens == ("λ", "x", ".", "M")


def test_include_is_read_once_and_relative(tmp_path: Path) -> None:
    (tmp_path / "sub").mkdir()
    (tmp_path / "sub" / "base.calc").write_text(
        "calculus b { names var x\n sort term M ::= x | app(M, M) }")
    (tmp_path / "sub" / "mid.calc").write_text('include "base.calc"')
    (tmp_path / "top.calc").write_text('include "sub/base.calc"\ninclude "sub/mid.calc"\n'
                                       "calculus t extends b { }")
    spec = load_file(tmp_path / "top.calc")
    assert set(spec.calculi) == {"b", "t"}  # base.calc once, though included twice
    assert len(spec.files) == 3


def test_keyword_before_parenthesis_is_an_identifier() -> None:
    spec = load_text("calculus c { names var x\n sort term M N P ::= x | if(M, N, P) | "
                     "tt\n rule r: if(tt, N, P) -> N }")
    assert "if" in spec.calculi["c"].shapes


def test_string_escapes() -> None:
    spec = load_text('calculus c { names var x\n sort term M ::= x | q(M) "\\\\ M \\"" }')
    note = spec.calculi["c"].sorts["term"].alts[1].notation
    assert note.text == '\\ M "'


def test_bounds_precedence_command_line_within_file_defaults() -> None:
    """LANGUAGE.md §7: command-line flags over `within`, `within` over the file's `bounds`,
    and that over the built-in defaults (size 6, names 1, steps 10, nodes 20000)."""
    from calcscout.rules.core.spec import Bounds

    base = "calculus c { names var x\n sort term M ::= x | s(M) }\n"
    plain = load_text(base + "claim k: M ->* M")
    claim = plain.claims[0]
    assert plain.effective_bounds(Bounds(), claim.within) == Bounds(6, 10, 1, 20000)
    filed = load_text(base + "bounds size 3, nodes 7\nclaim k: M ->* M within size 4, steps 2")
    claim = filed.claims[0]
    assert filed.effective_bounds(Bounds(), claim.within) == Bounds(4, 2, 1, 7)
    assert filed.effective_bounds(Bounds(size=9, names=0), claim.within) == Bounds(9, 2, 0, 7)
    with pytest.raises(CalcError, match="unknown bound 'depth'"):
        load_text(base + "bounds depth 3")


def test_an_included_files_claims_keep_that_files_bounds(tmp_path: Path) -> None:
    from calcscout.rules.core.spec import Bounds

    (tmp_path / "base.calc").write_text(
        "calculus b { names var x\n sort term M ::= x | s(M) }\n"
        "bounds size 3\nclaim inner: M ->* M\n")
    (tmp_path / "top.calc").write_text('include "base.calc"\nbounds size 9, steps 4\n'
                                       "claim outer: for M in b.term: M ->* M\n")
    spec = load_file(tmp_path / "top.calc")
    claims = {c.name: c for c in spec.claims}
    assert spec.claim_bounds(claims["inner"]) == Bounds(3, 10, 1, 20000)
    assert spec.claim_bounds(claims["outer"]) == Bounds(9, 4, 1, 20000)
    assert spec.claim_bounds(claims["inner"], Bounds(size=5)).size == 5


def test_a_name_matched_outside_every_binder_may_be_returned() -> None:
    # Issue 8, item 2: bound names that escape are refused at load time (the bad files
    # rule-bound-name-escapes and rule-name-under-binder-escapes); a name the left also
    # matches outside every binder is free in the redex, so returning it is accepted.
    spec = load_file(DATA / "rule-free-name-kept.calc")
    assert not spec.is_empty()
