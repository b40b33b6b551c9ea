"""Printing then parsing gives back the very same interned term (rules/notation/notation.py).

Random terms are built from a calculus's constructor shapes, with bound indices
in scope and a few free names, and need not be well sorted: the printer and the
command-line parser work on raw terms.  Checked for ``arith`` of
every-construct.calc and for tests/data/notation/ops.calc, which has a notation
of every kind (prefix with a precedence, postfix, closed, mixfix, binders of two
names sorts).
"""

from __future__ import annotations

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


@pytest.mark.parametrize("calc", [ARITH, OPS], ids=["arith", "ops"])
def test_abstract_printing_round_trips(calc):
    @SETTINGS
    @given(raw_terms(calc))
    def check(t):
        assert parse_term(calc, print_abstract(calc, t)) is t

    check()


@pytest.mark.parametrize("calc", [ARITH, OPS], ids=["arith", "ops"])
def test_notation_printing_round_trips(calc):
    @SETTINGS
    @given(raw_terms(calc))
    def check(t):
        printed = print_term(calc, t)
        assert parse_term(calc, printed) is t, printed

    check()


@pytest.mark.parametrize("calc", [ARITH, OPS], ids=["arith", "ops"])
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
    assert text in info.value.render() or not text.strip()
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


@pytest.mark.parametrize("calc", [ARITH, OPS], ids=["arith", "ops"])
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
