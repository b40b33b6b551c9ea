"""Printing then parsing gives back the very same interned term (rules/notation/notation.py).

Random terms are built from a calculus's constructor shapes, with bound indices
in scope and a few free names, and need not be well sorted: the printer and the
command-line parser work on raw terms.  Checked for ``arith`` of
every-construct.calc and for tests/data/notation/ops.calc, which has a notation
of every kind (prefix with a precedence, postfix, closed, mixfix, binders of two
names sorts).
"""

from __future__ import annotations

import itertools
import re
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from calcscout.rules.core.errors import TermError
from calcscout.rules.core.spec import Calculus
from calcscout.rules.core.terms import Term, bound, name, node
from calcscout.rules.loading.load import load_file
from calcscout.rules.notation.notation import parse_term, print_abstract, print_term

DATA = Path(__file__).parent / "data"
ARITH = load_file(DATA / "conformance" / "every-construct.calc").calculi["arith"]
OPS = load_file(DATA / "notation" / "ops.calc").calculi["ops"]
CLASH = load_file(DATA / "notation" / "clash.calc").calculi["clash"]

# Free names: canonical ones (which bound names must then avoid), others, primes.
FREE = ("x", "y", "z", "x1", "a", "k'")

SETTINGS = settings(max_examples=150, deadline=None,
                    suppress_health_check=[HealthCheck.too_slow])


def raw_terms(calc: Calculus, max_size: int = 14) -> st.SearchStrategy[Term]:
    """Locally closed terms of ``calc``'s constructors, up to about ``max_size`` nodes."""
    shapes = sorted(calc.shapes.values(), key=lambda s: s.con)
    nullary = [s.con for s in shapes if s.arity == 0]
    inner = [s for s in shapes if s.arity > 0]

    @st.composite
    def term(draw, scope: int, budget: int) -> Term:
        if budget <= 1 or draw(st.integers(0, 4)) == 0:
            leaves = [name(n) for n in FREE] + [node(c) for c in nullary]
            leaves += [bound(i) for i in range(scope)] * 2  # bound names often
            return draw(st.sampled_from(leaves))
        shape = draw(st.sampled_from(inner))
        left = budget - 1
        args = []
        for i, k in enumerate(shape.binders):
            share = left if i == shape.arity - 1 else draw(st.integers(1, max(1, left)))
            left = max(1, left - share)
            args.append(draw(term(scope + k, share)))
        return node(shape.con, args, shape.binders)

    return st.integers(1, max_size).flatmap(lambda n: term(0, n))


@pytest.mark.parametrize("calc", [ARITH, OPS, CLASH], ids=["arith", "ops", "clash"])
def test_abstract_printing_round_trips(calc):
    @SETTINGS
    @given(raw_terms(calc))
    def check(t):
        assert parse_term(calc, print_abstract(calc, t)) is t

    check()


@pytest.mark.parametrize("calc", [ARITH, OPS, CLASH], ids=["arith", "ops", "clash"])
def test_notation_printing_round_trips(calc):
    @SETTINGS
    @given(raw_terms(calc))
    def check(t):
        printed = print_term(calc, t)
        assert parse_term(calc, printed) is t, printed

    check()


@pytest.mark.parametrize("calc", [ARITH, OPS, CLASH], ids=["arith", "ops", "clash"])
def test_printed_terms_carry_no_droppable_parentheses(calc):
    from test_notation import droppable_parentheses

    @settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
    @given(raw_terms(calc, max_size=10))
    def check(t):
        printed = print_term(calc, t)
        assert droppable_parentheses(calc, printed) == [], printed

    check()


# ---------------------------------------------------------------- bad inputs


def _column(calc: Calculus, text: str) -> int:
    with pytest.raises(TermError) as info:
        parse_term(calc, text)
    problem = info.value.problems[0]
    assert problem.pos is not None and problem.pos.line == 1
    # the line is quoted (a long one cut around the caret, with ellipses)
    quoted = info.value.render().splitlines()[1][2:]
    assert quoted.removeprefix("...").removesuffix("...") in text or not text.strip()
    assert len(quoted) >= min(len(text), 100)
    return problem.pos.column


@SETTINGS
@given(raw_terms(ARITH))
def test_an_extra_closing_parenthesis_is_an_error_at_it(t):
    text = print_term(ARITH, t)
    assert _column(ARITH, text + " )") == len(text) + 2


@SETTINGS
@given(raw_terms(ARITH))
def test_an_unclosed_parenthesis_is_an_error_at_the_end(t):
    text = "(" + print_term(ARITH, t)
    assert _column(ARITH, text) == len(text) + 1


@SETTINGS
@given(raw_terms(ARITH))
def test_an_unknown_constructor_is_an_error_at_its_name(t):
    text = print_term(ARITH, t)
    assert _column(ARITH, f"x + nosuch({text})") == 5


@SETTINGS
@given(raw_terms(ARITH), st.sampled_from([",", ")", "in", "."]))
def test_trailing_junk_is_an_error_at_the_junk(t, junk):
    text = print_term(ARITH, t)
    column = _column(ARITH, f"{text} {junk}")
    assert column == len(text) + 2


@pytest.mark.parametrize("text", ["", " ", "\t"])
def test_an_empty_term_is_an_error_at_column_1(text):
    assert _column(ARITH, text) == 1


# ---------------------------------------------------------------- no ambiguity


@pytest.mark.parametrize("calc", [ARITH, OPS, CLASH], ids=["arith", "ops", "clash"])
def test_the_generated_grammar_is_unambiguous_on_printed_terms(calc):
    # The parser resolves ambiguities silently; this makes sure there are none
    # to resolve.  (The generated grammar and lexer are internals: a test of
    # how the grammar is built.)
    from lark import Lark, Tree

    from calcscout.rules.notation import notation

    inner = notation._parser(calc)
    explicit = Lark(inner.grammar, parser="earley", lexer=notation._TokenList,
                    keep_all_tokens=True, start="start", ambiguity="explicit")

    @settings(max_examples=80, deadline=None, suppress_health_check=[HealthCheck.too_slow])
    @given(raw_terms(calc, max_size=10))
    def check(t):
        for printed in (print_term(calc, t), print_abstract(calc, t)):
            tokens = notation._lex(inner.reading, inner.terminals, printed, "<test>")
            tree = explicit.parse(tokens)
            assert not any(isinstance(s, Tree) and s.data == "_ambig"
                           for s in tree.iter_subtrees()), printed

    check()


# ---------------------------------------------------------------- every library calculus

ROOT = Path(__file__).parent.parent
LIBRARY_FILES = sorted((ROOT / "rules" / "library").glob("*.calc")) + sorted(
    (ROOT / "rules" / "demo").glob("*.calc")) + [DATA / "notation" / "clash.calc"]


def _calculi():
    seen: set[tuple[str, str]] = set()
    for path in LIBRARY_FILES:
        spec = load_file(path)
        for calc in spec.calculi.values():
            # an included calculus is the same in every file that includes it
            key = (str(calc.pos.file), calc.name)
            if key not in seen:
                seen.add(key)
                yield pytest.param(calc, id=f"{path.stem}:{calc.name}")


def _clashing_spellings(calc: Calculus) -> list[str]:
    """Free-name spellings that the parser would read otherwise: the calculus's
    constructors and the literals of its notations that are identifiers."""
    from calcscout.rules.notation import notation

    reading = notation._reading(calc)
    words = sorted(w for w in reading.cons | reading.literals if re.fullmatch(r"[A-Za-z_]\w*'*", w))
    return words[:4]


@pytest.mark.parametrize("calc", list(_calculi()))
def test_every_enumerated_term_reads_back(calc):
    """Issue 8, item 8: the printer wrote bound names the parser rejects (x'1 for
    `names var x x'`) and free names spelled as a constructor read back as it.
    The terms of every sort of every library and demo calculus, up to size 4 with
    two free names (the first 150 of each sort; all up to size 5 in the slow run),
    printed both ways then parsed, are the very same terms; then the same with
    their free names renamed to spellings that clash with a constructor or a
    literal (printed with a backquote).  Family: printed text that lexes as
    something else; checked names with primes and digits, bound names beside
    constructors and literals, nullary constructors spelled as literals, binder
    notations of one shape over two names sorts (clash.calc)."""
    _round_trip_enumerated(calc, 4, 150)


@pytest.mark.slow
@pytest.mark.parametrize("calc", list(_calculi()))
def test_every_enumerated_term_reads_back_up_to_size_5(calc):
    _round_trip_enumerated(calc, 5, None)


def _round_trip_enumerated(calc: Calculus, size: int, limit: int | None) -> None:
    from calcscout.rules.core.enumerate import enumerate_terms
    from calcscout.rules.core.terms import rename_free

    clashing = _clashing_spellings(calc)
    checked = 0
    for sort in calc.sorts.values():
        if sort.is_context:
            continue
        for t in itertools.islice(enumerate_terms(calc, sort.name, size, 2), limit):
            variants = [t]
            if clashing and t.free:
                renamed = {n: clashing[i % len(clashing)] for i, n in enumerate(t.free)}
                variants.append(rename_free(t, renamed))
            for v in variants:
                for printed in (print_term(calc, v), print_abstract(calc, v)):
                    assert parse_term(calc, printed) is v, printed
                    checked += 1
    assert checked > 0


def test_a_clashing_free_name_prints_with_a_backquote():
    clash = load_file(DATA / "notation" / "clash.calc").calculi["clash"]
    t = node("ap", [name("y"), name("x")])
    assert print_term(clash, t) == "`y x"
    assert print_abstract(clash, t) == "ap(`y, x)"
    assert parse_term(clash, "ap(y, x)") is node("ap", [node("y"), name("x")])
    # the i-th canonical name puts its digits before the primes
    assert clash.names_sorts["var"].canonical_name(3) == "x1'"


def test_binder_notations_of_one_shape_are_told_apart_by_the_names_sort():
    """Issue 8, item 7: `lam(x.M) "\\x. M"` beside `klam(k.M) "\\k. M"` passed lint and
    every term parse crashed.  Family: notations of one pattern; checked that the
    names sort of the bound name decides (k, k1 -> klam; x, x', z -> lam), and that
    two constructors of one pattern over one names sort are refused at load time
    (notation-same-text*.calc, binders in test_notation)."""
    clash = load_file(DATA / "notation" / "clash.calc").calculi["clash"]
    lam = node("lam", [node("klam", [node("ap", [bound(0), bound(1)])], [1])], [1])
    assert parse_term(clash, "\\x. \\k. k x") is lam
    assert parse_term(clash, "\\x'. \\k1. k1 x'") is lam
    assert parse_term(clash, "\\z. z") is node("lam", [bound(0)], [1])
    assert print_term(clash, lam) == "\\x. \\k. k x"


def test_a_binder_of_a_names_sort_no_notation_takes_is_named_in_the_error():
    from calcscout.rules.loading.load import load_text

    calc = load_text("calculus t {\n  names var x y\n  names kvar k\n  names avar m\n"
                     '  sort term M N ::= x | k | m | lam(x.M) "\\x. M" | klam(k.M) "\\k. M"'
                     ' | app(M, N) "M N"\n}\n').calculi["t"]
    with pytest.raises(TermError) as info:
        parse_term(calc, "x \\m1. m1")
    p = info.value.problems[0]
    assert "the name m1 belongs to the names sort avar; a name of kvar or var is expected" \
        in p.message
    assert p.pos is not None and p.pos.column == 4
    assert parse_term(calc, "lam(m.m)") is node("lam", [bound(0)], [1])  # abstract form: any
