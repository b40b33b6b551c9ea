"""Printing terms and parsing object terms (rules/notation/notation.py; LANGUAGE.md §3, §4).

The conformance lines of tests/data/conformance/notation.txt are checked one by
one against the calculus ``arith`` of every-construct.calc; the other tests pin
down the precedence rules, the choice of bound names, and the error messages a
user sees on the command line.
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from calcscout.rules.core.errors import TermError
from calcscout.rules.core.spec import AltCon, Calculus
from calcscout.rules.core.terms import Node, bound, name, node
from calcscout.rules.loading.load import load_file
from calcscout.rules.notation.notation import notation_tokens, parse_term, print_abstract, print_term

DATA = Path(__file__).parent / "data"
CONFORMANCE = DATA / "conformance"


def _arith() -> Calculus:
    return load_file(CONFORMANCE / "every-construct.calc").calculi["arith"]


ARITH = _arith()


def _conformance(part: int) -> list[tuple[str, str]]:
    lines = []
    current = 0
    for line in (CONFORMANCE / "notation.txt").read_text().splitlines():
        if line.startswith("# Part"):
            current = int(line.split()[2])
            continue
        if not line.strip() or line.startswith("#"):
            continue
        left, right = (s.strip() for s in line.split("=>"))
        if current == part:
            lines.append((left, right))
    return lines


PART1 = _conformance(1)
PART2 = _conformance(2)


def test_the_conformance_file_has_both_parts():
    assert len(PART1) == 13 and len(PART2) == 8


def _open_ended_cons(calc: Calculus) -> set[str]:
    """Constructors whose first notation begins with a literal, ends with a
    placeholder and has no precedence (LANGUAGE.md §3: "extends as far right as
    possible")."""
    out: set[str] = set()
    seen: set[str] = set()
    for sort in calc.sorts.values():
        for alt in sort.alts:
            if not isinstance(alt, AltCon) or alt.notation is None or alt.con in seen:
                continue
            seen.add(alt.con)
            n = alt.notation
            if (n.tokens[0] not in n.placeholders and n.tokens[-1] in n.placeholders
                    and n.prec is None):
                out.add(alt.con)
    return out


def _paren_pairs(text: str) -> list[tuple[int, int]]:
    stack, pairs = [], []
    for i, c in enumerate(text):
        if c == "(":
            stack.append(i)
        elif c == ")":
            pairs.append((stack.pop(), i))
    assert not stack
    return pairs


def droppable_parentheses(calc: Calculus, text: str) -> list[str]:
    """The pairs of parentheses of ``text`` that could be dropped: without them
    the text still parses to the same term.  An open-ended notation standing
    as an operand may keep its parentheses (LANGUAGE.md §3)."""
    term = parse_term(calc, text)
    open_ended = _open_ended_cons(calc)
    out = []
    for i, j in _paren_pairs(text):
        without = text[:i] + " " + text[i + 1 : j] + " " + text[j + 1 :]
        try:
            same = parse_term(calc, without) is term
        except TermError:
            same = False
        if not same:
            continue
        try:
            inner = parse_term(calc, text[i + 1 : j])
        except TermError:
            inner = None
        if isinstance(inner, Node) and inner.con in open_ended:
            continue
        out.append(text[i : j + 1])
    return out


def _spaceless(text: str) -> str:
    return re.sub(r"\s+", "", text)


# ---------------------------------------------------------------- conformance, part 1


@pytest.mark.parametrize(("written", "abstract"), PART1, ids=[a for a, _ in PART1])
def test_notation_parses_to_the_abstract_form(written, abstract):
    assert parse_term(ARITH, written) is parse_term(ARITH, abstract)


def test_part1_terms_built_by_hand():
    # The abstract forms above are read by the same parser; pin a few down directly.
    x, y = name("x"), name("y")
    lam = node("lam", [node("app", [bound(0), y])], [1])
    assert parse_term(ARITH, "\\x. x y") is lam
    assert parse_term(ARITH, "let x = y in x x") is node(
        "let", [y, node("app", [bound(0), bound(0)])], [0, 1])
    assert parse_term(ARITH, "S S 0") is node("succ", [node("succ", [node("zero")])])
    assert parse_term(ARITH, "x + y z") is node("add", [x, node("app", [y, name("z")])])


# ---------------------------------------------------------------- conformance, part 2


@pytest.mark.parametrize(("abstract", "shown"), PART2, ids=[a for a, _ in PART2])
def test_printer_shows_the_notation(abstract, shown):
    term = parse_term(ARITH, abstract)
    printed = print_term(ARITH, term)
    assert _spaceless(printed) == _spaceless(shown)
    assert parse_term(ARITH, printed) is term
    assert droppable_parentheses(ARITH, printed) == []


@pytest.mark.parametrize(("abstract", "shown"), PART2, ids=[a for a, _ in PART2])
def test_abstract_printing_gives_back_the_abstract_form(abstract, shown):
    term = parse_term(ARITH, abstract)
    assert print_abstract(ARITH, term) == abstract  # these are already canonical
    assert parse_term(ARITH, print_abstract(ARITH, term)) is term


def test_the_paren_checker_finds_droppable_parentheses():
    # The checker itself must be able to fail.
    assert droppable_parentheses(ARITH, "(x y) z") == ["(x y)"]
    assert droppable_parentheses(ARITH, "x + (y z)") == ["(y z)"]
    assert droppable_parentheses(ARITH, "x (\\y. y)") == []  # allowed to stay


# ---------------------------------------------------------------- bound names


def test_bound_names_avoid_free_names_and_enclosing_binders():
    # lam(_.app(_, x)) with x free: the binder cannot print as x
    t = node("lam", [node("app", [bound(0), name("x")])], [1])
    assert print_abstract(ARITH, t) == "lam(y.app(y, x))"
    assert print_term(ARITH, t) == "\\y. y x"
    # siblings may reuse a name; nested binders may not
    sib = node("app", [node("lam", [bound(0)], [1]), node("lam", [bound(0)], [1])])
    assert print_abstract(ARITH, sib) == "app(lam(x.x), lam(x.x))"
    nest = node("lam", [node("lam", [node("lam", [bound(2)], [1])], [1])], [1])
    assert print_abstract(ARITH, nest) == "lam(x.lam(y.lam(z.x)))"
    deeper = node("lam", [nest], [1])
    assert print_abstract(ARITH, deeper) == "lam(x.lam(y.lam(z.lam(x1.y))))"


def test_bound_names_of_a_double_binder():
    t = node("split", [name("x"), node("app", [bound(1), bound(0)])], [0, 2])
    assert print_abstract(ARITH, t) == "split(x, y.z.app(y, z))"
    assert print_term(ARITH, t) == "split(x, y.z.y z)"


def test_free_names_keep_their_spelling():
    t = node("app", [name("foo'"), name("x1")])
    assert print_term(ARITH, t) == "foo' x1"
    assert print_abstract(ARITH, t) == "app(foo', x1)"


def test_alpha_equivalent_inputs_are_the_same_term():
    assert parse_term(ARITH, "\\a. \\b. b a") is parse_term(ARITH, "lam(x.lam(y.app(y, x)))")
    assert parse_term(ARITH, "split(q, a.b.b)") is parse_term(ARITH, "split(q, x.y.y)")


def test_an_inner_binder_shadows_an_outer_one():
    assert parse_term(ARITH, "\\x. \\x. x") is node("lam", [node("lam", [bound(0)], [1])], [1])
    assert parse_term(ARITH, "split(w, x.x.x)") is node("split", [name("w"), bound(0)], [0, 2])


# ---------------------------------------------------------------- precedence


@pytest.mark.parametrize(("written", "abstract"), [
    ("x ; y ; z", "seq(x, seq(y, z))"),              # right 10
    ("x + y ; z", "seq(add(x, y), z)"),
    ("x == y + z", "eq(x, add(y, z))"),              # 40 below 50
    ("x \\y. y", "app(x, lam(y.y))"),                # an open-ended last operand
    ("x + \\y. y + z", "add(x, lam(y.add(y, z)))"),  # ... extends as far right as possible
    ("let x = \\y. y in x", "let(lam(y.y), x.x)"),
    ("S 0 x", "succ(app(zero, x))"),
    ("(S 0) x", "app(succ(zero), x)"),
    ("\\x.\\y. x", "lam(x.lam(y.x))"),               # `.\` splits into `.` and `\`
    ("\\ x . x", "lam(x.x)"),
    ("unit", "unit()"),
    ("zero", "0"),
    ("tt x", "app(tt, x)"),
    ("tt (x)", "app(tt, x)"),                       # a space before `(`: juxtaposition
    ("f (x)", "app(f, x)"),
    ("pair(\\x. x, y)", "pair(lam(x.x), y)"),
    ("let(x, y.y) z", "app(let(x, y.y), z)"),
    ("((x))", "x"),
])
def test_precedence_and_mixing(written, abstract):
    assert parse_term(ARITH, written) is parse_term(ARITH, abstract)


@pytest.mark.parametrize(("abstract", "shown"), [
    ("seq(seq(x, y), z)", "(x ; y) ; z"),
    ("seq(x, seq(y, z))", "x ; y ; z"),
    ("eq(eq(x, y), z)", "(x == y) == z"),
    ("eq(x, eq(y, z))", "x == (y == z)"),
    ("add(x, add(y, z))", "x + (y + z)"),
    ("app(x, lam(y.y))", "x (\\y. y)"),
    ("app(app(x, lam(y.y)), z)", "x (\\y. y) z"),
    ("add(lam(x.x), y)", "(\\x. x) + y"),
    ("lam(x.let(x, y.lam(z.y)))", "\\x. let y = x in \\z. y"),
    ("let(lam(x.x), y.y)", "let x = \\x. x in x"),  # the binders do not nest
    ("app(succ(zero), x)", "(S 0) x"),
    ("succ(succ(zero))", "S S 0"),
    ("num(succ(zero))", "num(S 0)"),
    ("unit()", "unit"),
    ("pair(tt, ff)", "pair(tt, ff)"),
    ("handle(raise(x), y.app(y, y))", "handle(raise(x), y.y y)"),
    ("eq(seq(x, y), z)", "(x ; y) == z"),
    ("app(x, let(y, z.z))", "x (let z = y in z)"),
])
def test_printer_parenthesises_only_where_needed(abstract, shown):
    term = parse_term(ARITH, abstract)
    printed = print_term(ARITH, term)
    assert printed == shown
    assert parse_term(ARITH, printed) is term
    assert droppable_parentheses(ARITH, printed) == []


# ---------------------------------------------------------------- errors


def _error(text: str) -> TermError:
    with pytest.raises(TermError) as info:
        parse_term(ARITH, text)
    return info.value


@pytest.mark.parametrize(("text", "column", "words"), [
    ("", 1, "expected a term"),
    ("   ", 1, "expected a term"),
    ("(x", 3, "expected a term, ')'"),
    ("x)", 2, "unexpected ')'"),
    ("x + ", 4, "expected a term"),
    ("let x = y x", 12, "'in'"),
    ("foo(x)", 1, "unknown constructor foo"),
    ("app(x)", 1, "app takes 2 arguments, app(M, N); 1 given"),
    ("zero(x)", 1, "zero takes 0 arguments"),
    ("lam(x)", 5, "argument 1 of lam binds 1 name, lam(x.M); 0 given"),
    ("split(x, y.y)", 10, "binds 2 names, split(M, x.y.N)"),
    ("lam", 1, "lam takes arguments: lam(x.M)"),
    ("x == y == z", 8, "unexpected '=='"),
    ("x @ y", 3, "unexpected '@'"),
    ("5", 1, "unexpected number 5"),
    ("\\S. x", 2, "expected a name"),      # a literal is never a name
    ("let", 4, "expected a name"),
    ("x y ,", 5, "unexpected ','"),
])
def test_errors_say_where_and_what_was_expected(text, column, words):
    err = _error(text)
    problem = err.problems[0]
    assert problem.pos is not None
    assert (problem.pos.file, problem.pos.line, problem.pos.column) == ("<command line>", 1, column)
    assert words in problem.message
    rendered = err.render()
    assert rendered.startswith(f"<command line>:1:{column}: error:")
    if text.strip():
        assert text in rendered
        caret_line = rendered.splitlines()[2]
        assert caret_line.index("^") == column - 1 + 2  # two spaces of indentation


def test_error_names_the_file_it_is_given():
    with pytest.raises(TermError) as info:
        parse_term(ARITH, "x +", file="<argument 3>")
    assert str(info.value.problems[0].pos) == "<argument 3>:1:4"


def test_unknown_constructor_lists_the_known_ones():
    err = _error("foo(x)")
    assert "app" in (err.problems[0].hint or "")


# ---------------------------------------------------------------- without notations


def test_a_calculus_without_notations_reads_the_abstract_form_only():
    from calcscout.rules.core.spec import AltNames, Arg, NamesSort, Shape, Sort

    plain = Calculus(
        "plain", {"var": NamesSort("var", ("x", "y"))},
        {"term": Sort("term", ("M", "N"), (
            AltNames("var"),
            AltCon("lam", (Arg(("var",), "term", ("x",), "M"),)),
            AltCon("app", (Arg((), "term", (), "M"), Arg((), "term", (), "N"))),
        ))},
        {"lam": Shape("lam", (("var",),)), "app": Shape("app", ((), ()))}, (),
    )
    t = parse_term(plain, "app(lam(x.x), y)")
    assert print_term(plain, t) == print_abstract(plain, t) == "app(lam(x.x), y)"
    with pytest.raises(TermError) as info:
        parse_term(plain, "x y")
    assert info.value.problems[0].pos.column == 3
    assert "end of the term" in info.value.problems[0].message
    # no juxtaposition: a space before `(` still applies a constructor
    assert parse_term(plain, "lam (x.app (x, x))") is parse_term(plain, "lam(x.app(x, x))")
    with pytest.raises(TermError, match="unknown constructor f"):
        parse_term(plain, "f (x)")


def test_notation_tokens_split_as_the_language_says():
    assert notation_tokens("\\x. M") == ("\\", "x", ".", "M")
    assert notation_tokens("let x = M in N") == ("let", "x", "=", "M", "in", "N")
    assert notation_tokens("< M , N >") == ("<", "M", ",", "N", ">")
    assert notation_tokens("M==N") == ("M", "==", "N")


def test_printing_refuses_a_term_with_loose_indices():
    with pytest.raises(ValueError):
        print_term(ARITH, bound(0))


# ---------------------------------------------------------------- every kind of notation

OPS = load_file(DATA / "notation" / "ops.calc").calculi["ops"]


@pytest.mark.parametrize(("written", "abstract"), [
    ("x - - y", "sub(x, neg(y))"),          # `-` infix (50) and prefix (right 90)
    ("- x - y", "sub(neg(x), y)"),
    ("- x y", "neg(app(x, y))"),            # juxtaposition binds tighter than 90
    ("x * y !", "fact(mul(x, y))"),         # postfix at 50, below `*` at 70
    ("x ! !", "fact(fact(x))"),
    ("- x !", "fact(neg(x))"),
    ("x - y !", "fact(sub(x, y))"),         # both 50, left
    ("fun x => x !", "lam(x.fact(x))"),     # open-ended: extends to the right
    ("x ^ y ^ z", "pow(x, pow(y, z))"),     # right 75
    ("x * y ^ z", "mul(x, pow(y, z))"),
    ("[] []", "app(nil, nil)"),
    ("< x , fun y => y >", "tuple(x, lam(y.y))"),
    ("if x then fun y => y else z w", "ite(x, lam(y.y), app(z, w))"),
    ("if x then y else z !", "ite(x, y, fact(z))"),
    ("catch l. throw l x", "catch(l.throw(l, x))"),
    ("throw l x y", "throw(l, app(x, y))"),
    ("pack a b. a b", "pack(x.y.app(x, y))"),
    ("wrap(x) !", "fact(wrap(x))"),
    ("~ x - ~ y", "sub(neg(x), neg(y))"),   # a refinement's notation is read too
])
def test_every_kind_of_notation_parses(written, abstract):
    assert parse_term(OPS, written) is parse_term(OPS, abstract)


@pytest.mark.parametrize(("abstract", "shown"), [
    ("app(x, neg(y))", "x (- y)"),
    ("app(neg(x), y)", "(- x) y"),
    ("neg(app(x, y))", "- x y"),
    ("app(fact(x), y)", "(x !) y"),
    ("fact(throw(l, x))", "throw l x !"),
    ("throw(l, fact(x))", "throw l (x !)"),
    ("app(ite(x, y, z), w)", "(if x then y else z) w"),
    ("pow(x, lam(y.y))", "x ^ (fun y => y)"),
    ("catch(m.l)", "catch m. l"),           # the bound label avoids the free one
    ("pack(x.y.app(y, x))", "pack x y. y x"),
    ("neg(neg(x))", "- - x"),               # the first notation declared for neg
    ("wrap(fact(x))", "wrap(x !)"),
])
def test_every_kind_of_notation_prints(abstract, shown):
    term = parse_term(OPS, abstract)
    printed = print_term(OPS, term)
    assert printed == shown
    assert parse_term(OPS, printed) is term
    assert droppable_parentheses(OPS, printed) == []


def test_the_parser_is_built_once_per_calculus():
    from calcscout.rules.notation import notation

    assert notation._parser(OPS) is notation._parser(OPS)


# ---------------------------------------------------------------- notations refused at load time


def _load_calc(alts: str, extra: str = ""):
    from calcscout.rules.loading.load import load_text

    return load_text("calculus t {\n  names var x y\n  names kvar k\n"
                     f"  sort term M N ::= x | k | {alts}\n}}\n{extra}", "n.calc")


@pytest.mark.parametrize("alts, message", [
    ('add(M, N) "M + N" | sub(M, N) "M + N"', 'reads like the notation "M + N" of add'),
    ('add(M, N) "M + N" left 50 | sub(M, N) "M + N" right 60', "reads like"),
    ('add(M, N) "M + N" | add2(M, N) "N + M"', "reads like"),
    ('lam(x.M) "\\x. M" | lam2(y.M) "\\y. M"', "reads like"),
    ('pr(M, N) "( M N"', "('(' is not closed)"),
    ('pr(M, N) "M ) N ("', "(')' closes nothing)"),
    ('pr(M, N) "[ M , N )"', "(')' closes nothing)"),
    ('pr(M, N) "M y N"', "the literal y of the notation \"M y N\" spells a name of var"),
    ('pr(M, N) "M k1 N"', "spells a name of kvar"),
    ('pr(M, N) "M ` N"', "backquote"),
    ('big(M) "' + " ".join(f"w{i}" for i in range(64)) + ' M"', "at most 64"),
])
def test_notations_that_cannot_be_read_back_are_refused(alts: str, message: str) -> None:
    """Issue 9, item 16 (notation-*.calc in tests/data/bad): two constructors with one
    notation crashed the term parser, add/sub with "M + N" printed alike, "( M N" was
    accepted, a literal spelling a name broke check.  Family: notations whose terms do
    not read back; checked same pattern with other precedences, swapped operands,
    binders of one names sort, brackets closed wrongly or in the wrong order, literals
    spelling names with digits, the backquote, too many tokens; and that the position
    is the notation string's."""
    from calcscout.rules.core.errors import CalcError

    with pytest.raises(CalcError) as info:
        _load_calc(alts)
    rendered = info.value.render()
    assert message in rendered, rendered
    assert rendered.startswith("n.calc:4:")
    p = info.value.problems[0]
    line = "  sort term M N ::= x | k | " + alts
    assert p.pos is not None and line[p.pos.column - 1] == '"'  # at the notation string
    if "reads like" in message:  # at the later of the two
        assert p.pos.column - 1 == line.rindex('"', 0, line.rindex('"'))


def test_an_extension_reports_an_inherited_clash_once_and_a_new_one_at_itself() -> None:
    from calcscout.rules.core.errors import CalcError

    ok = _load_calc('lam(x.M) "\\x. M" | klam(k.M) "\\k. M"',
                    "calculus u extends t {\n  sort term M N ::= pr(M, N) \"< M , N >\"\n}\n")
    assert set(ok.calculi) == {"t", "u"}
    with pytest.raises(CalcError) as info:
        _load_calc('add(M, N) "M + N"',
                   "calculus u extends t {\n  sort term M N ::= sub(M, N) \"M + N\"\n}\n")
    assert [p.pos.line for p in info.value.problems] == [7]


def test_an_extension_whose_new_name_a_base_literal_spells_is_refused() -> None:
    from calcscout.rules.core.errors import CalcError
    from calcscout.rules.loading.load import load_text

    base = 'calculus t {\n  names var x\n  sort term M N ::= x | pr(M, N) "M y N"\n}\n'
    assert set(load_text(base).calculi) == {"t"}
    with pytest.raises(CalcError) as info:
        load_text(base + "calculus u extends t {\n  names var y\n}\n")
    assert "the literal y of the notation \"M y N\" spells a name of var" in info.value.render()


def test_abstract_printing_memo_depends_on_the_free_names():
    """print_abstract memoises printed subterms per calculus (for speed); the
    same subterm must still get other binder names where the whole term has
    other free names.

    Family: the memo's key must hold everything a printed name depends on
    (enclosing binders, free names); checked with a binder under a binder
    and a free name equal to the first canonical name."""
    import conftest

    from calcscout.rules.core.terms import bound, name, node
    from calcscout.rules.loading.load import load_file
    from calcscout.rules.notation.notation import print_abstract

    calc = load_file(conftest.LIBRARY / "lambda.calc").calculi["lambda"]
    ident = node("lam", (bound(0),), (1,))
    k = node("lam", (node("lam", (bound(1),), (1,)),), (1,))
    assert print_abstract(calc, node("app", (ident, k))) == "app(lam(x.x), lam(x.lam(y.x)))"
    with_x = node("app", (name("x"), node("app", (ident, k))))
    assert print_abstract(calc, with_x) == "app(x, app(lam(y.y), lam(y.lam(z.y))))"
    assert print_abstract(calc, node("app", (ident, k))) == "app(lam(x.x), lam(x.lam(y.x)))"
