"""User notations: splitting a notation string into tokens, printing, parsing.

Printing (:func:`print_abstract`, :func:`print_term`) and the command-line
parser of object terms (:func:`parse_term`) share one reading of a calculus's
notations, :class:`_Form`, so that what is printed parses back to the very
same interned term.

Precedence (LANGUAGE.md §3).  Every notation gets a *level*; higher binds
tighter.

- A notation that begins with a literal and ends with a placeholder and has no
  precedence (``"\\x. M"``, ``"let x = M in N"``, ``"S n"``) is *open-ended*:
  its last operand extends as far right as possible, and it may stand as the
  last operand of anything (``x \\y. y``, ``x + \\y. y``) but never before an
  operator (``(\\x. x) y``).
- Juxtaposition (``"M N"``) with no precedence binds tightest (level 101) and
  is left-associative; any other notation that begins with a placeholder and
  has no precedence gets 50, left.
- An operand enclosed between two literals (the ``M`` of ``let x = M in N``)
  is a whole term.

Choices where the language is silent:

- ``c(`` with no space applies a constructor; ``f (x)`` with a space is
  juxtaposition where the calculus has one (``tt (x)`` is ``app(tt, x)``), and
  a constructor applied where it has none.  An identifier glued to ``(`` that
  is not a constructor is an error.
- A notation with a precedence that begins with a literal and ends with a
  placeholder (``"- M" right 90``) is an ordinary prefix operator at that level;
  only one without a precedence is open-ended.
- The printer parenthesises an open-ended notation standing as the last operand
  of an operator (``x (\\y. y)``, ``x + (\\y. y)``), which the language allows,
  but not as the body of another open-ended one (``\\x. \\y. x``).
- Bound names skip the calculus's literals and constructor names, which the
  parser would not read back as names.

The parser is an Earley parser generated with lark from the calculus, one per
calculus (cached); its grammar has, for every level, a nonterminal for terms
that may end with an open-ended notation and one for terms that may not, which
keeps the grammar unambiguous.  The tokens come from our own lexer: a run of
symbol characters is split into the calculus's literals by longest match (so
``.\\`` in ``\\x.\\y. x`` is ``.`` then ``\\``), which lark's lexers cannot do.
"""

from __future__ import annotations

import re
import weakref
from collections.abc import Iterator, Sequence
from dataclasses import dataclass

from lark import Lark, Token, Tree
from lark.exceptions import UnexpectedEOF, UnexpectedInput, UnexpectedToken
from lark.lexer import Lexer

from calcscout.rules.core.errors import Problem, TermError
from calcscout.rules.core.spec import AltCon, Calculus, Notation, Pos
from calcscout.rules.core.terms import Bound, Name, Node, Term, close, name, node

_TOKEN = re.compile(
    r"\s*(?:([A-Za-z_][A-Za-z0-9_]*'*)|([0-9]+)|([()\[\]{},])|([^\sA-Za-z0-9_()\[\]{},]+))"
)


def notation_tokens(text: str) -> tuple[str, ...]:
    """Split a notation string as LANGUAGE.md §3 says: identifiers, numbers,
    runs of symbol characters, and single brackets, parentheses and commas.

    >>> notation_tokens("\\\\x. M")
    ('\\\\', 'x', '.', 'M')
    >>> notation_tokens("let x = M in N")
    ('let', 'x', '=', 'M', 'in', 'N')
    """
    return tuple(tok for tok, _ in _token_spacing(text))


def _token_spacing(text: str) -> list[tuple[str, bool]]:
    """The tokens of a notation, each with whether whitespace stood before it."""
    out: list[tuple[str, bool]] = []
    pos = 0
    text = text.strip()
    while pos < len(text):
        m = _TOKEN.match(text, pos)
        if m is None or m.end() == pos:
            raise ValueError(f"cannot split notation {text!r} at {pos}")
        tok = next(g for g in m.groups() if g is not None)
        out.append((tok, m.end() - len(tok) > pos))
        pos = m.end()
    return out


# ---------------------------------------------------------------- notations read once

TOP = -1  # the level of a whole term
JUXTAPOSITION = 101  # above every declared precedence (0-100): binds tightest
ATOM = 1000  # names, abstract forms, parenthesised terms, closed notations
DEFAULT_PREC = 50


@dataclass(frozen=True)
class _Item:
    """One token of a notation: a literal, an operand, or the name of a binder."""

    kind: str  # "lit", "arg" or "binder"
    text: str
    arg: int = -1  # "arg": which argument of the constructor
    binds: tuple[tuple[int, int], ...] = ()  # "binder": (argument, index among its binders)
    space_before: bool = True


@dataclass(frozen=True)
class _Slot:
    """Where an operand stands: the least level it may have, and whether it may
    end with an open-ended notation (only a last operand, or an enclosed one)."""

    level: int
    may_be_open: bool
    trailing: bool
    enclosed: bool


@dataclass(frozen=True)
class _Form:
    con: str
    items: tuple[_Item, ...]
    kind: str  # "closed", "prefix", "postfix" or "infix"
    level: int
    assoc: str
    open_ended: bool

    def slot(self, j: int) -> _Slot:
        n = len(self.items)
        lit = [it.kind == "lit" for it in self.items]
        if 0 < j < n - 1:
            if lit[j - 1] and lit[j + 1]:
                return _Slot(TOP, True, False, True)
            return _Slot(ATOM, False, False, False)
        if j == 0 and n > 1:
            level = self.level if self.assoc == "left" else self.level + 1
            return _Slot(level, False, False, False)
        if self.open_ended:
            return _Slot(TOP, True, True, False)
        level = self.level if self.assoc == "right" else self.level + 1
        return _Slot(level, True, True, False)


def _form_of(alt: AltCon, notation: Notation) -> _Form | None:
    """The reading of one notation, or None when it cannot stand for its
    constructor (an argument or a binder missing, or no literal and no
    juxtaposition: such a notation would be invisible)."""
    try:
        spaced = _token_spacing(notation.text)
    except ValueError:
        return None
    if [t for t, _ in spaced] != list(notation.tokens):
        spaced = [(t, True) for t in notation.tokens]
    placeholders = set(notation.placeholders)
    arg_of = {a.meta: i for i, a in enumerate(alt.args) if a.meta}
    binder_of: dict[str, list[tuple[int, int]]] = {}
    for i, a in enumerate(alt.args):
        for j, b in enumerate(a.binder_metas):
            binder_of.setdefault(b, []).append((i, j))
    items: list[_Item] = []
    seen_args: set[int] = set()
    seen_binders: set[tuple[int, int]] = set()
    for tok, space in spaced:
        if tok in placeholders and tok in arg_of:
            i = arg_of[tok]
            if i in seen_args:
                return None
            seen_args.add(i)
            items.append(_Item("arg", tok, arg=i, space_before=space))
        elif tok in placeholders and tok in binder_of:
            binds = tuple(binder_of[tok])
            if seen_binders & set(binds):
                return None
            seen_binders.update(binds)
            items.append(_Item("binder", tok, binds=binds, space_before=space))
        else:
            items.append(_Item("lit", tok, space_before=space))
    every_binder = {(i, j) for i, a in enumerate(alt.args) for j in range(len(a.binder_sorts))}
    if seen_args != set(range(len(alt.args))) or seen_binders != every_binder:
        return None
    lead = items[0].kind == "arg"
    trail = items[-1].kind == "arg"
    juxtaposition = len(items) == 2 and lead and trail
    if not any(it.kind == "lit" for it in items) and not juxtaposition:
        return None
    if not lead and not trail:
        return _Form(alt.con, tuple(items), "closed", ATOM, "nonassoc", False)
    if not lead:
        if notation.prec is None:
            return _Form(alt.con, tuple(items), "prefix", ATOM, "right", True)
        return _Form(alt.con, tuple(items), "prefix", notation.prec, notation.assoc or "right",
                     False)
    if notation.prec is not None:
        level = notation.prec
    else:
        level = JUXTAPOSITION if juxtaposition else DEFAULT_PREC
    return _Form(alt.con, tuple(items), "infix" if trail else "postfix", level,
                 notation.assoc or "left", False)


class _Reading:
    """Everything the printer and the parser need to know of one calculus."""

    def __init__(self, calc: Calculus):
        self.calc = calc
        self.forms: list[_Form] = []  # every usable notation, in declaration order
        self.printed: dict[str, _Form] = {}  # con -> the first notation declared for it
        self.alt_of: dict[str, AltCon] = {}  # con -> its first alternative (for messages)
        sorts = sorted(calc.sorts.values(), key=lambda s: s.is_context)
        for sort in sorts:
            for alt in sort.alts:
                if not isinstance(alt, AltCon):
                    continue
                self.alt_of.setdefault(alt.con, alt)
                if alt.notation is None or sort.is_context:
                    continue
                form = _form_of(alt, alt.notation)
                if form is None:
                    continue
                shape = calc.shapes.get(alt.con)
                if shape is not None and shape.binders != tuple(len(a.binder_sorts) for a in alt.args):
                    continue
                if all(f.items != form.items or f.con != form.con for f in self.forms):
                    self.forms.append(form)
                self.printed.setdefault(alt.con, form)
        self.literals: frozenset[str] = frozenset(
            it.text for f in self.forms for it in f.items if it.kind == "lit"
        )
        self.cons = frozenset(calc.shapes) | frozenset(self.alt_of)
        # Can a term be followed directly by an operand (as in `M N`)?
        self.juxtaposes = any(
            a.kind == "arg" and b.kind == "arg"
            for f in self.forms for a, b in zip(f.items, f.items[1:], strict=False)
        )
        # The punctuation of the abstract form is always a token.
        self.symbols = tuple(sorted(
            {t for t in self.literals if _is_symbol_run(t)} | {"."}, key=len, reverse=True
        ))

    def arity(self, con: str) -> tuple[int, ...] | None:
        shape = self.calc.shapes.get(con)
        if shape is not None:
            return shape.binders
        alt = self.alt_of.get(con)
        return None if alt is None else tuple(len(a.binder_sorts) for a in alt.args)

    def shape_text(self, con: str) -> str:
        """``let(M, x.N)``: a constructor's shape as the calculus declares it."""
        alt = self.alt_of.get(con)
        if alt is None:
            binders = self.arity(con) or ()
            parts = [".".join(["_"] * k + ["_"]) for k in binders]
        else:
            parts = [
                ".".join([*a.binder_metas, a.meta or a.sort]) if a.binder_metas
                else (a.meta or a.sort)
                for a in alt.args
            ]
        return f"{con}({', '.join(parts)})" if parts else con

    def binder_sort(self, con: str, arg: int, j: int) -> str | None:
        shape = self.calc.shapes.get(con)
        if shape is not None and arg < shape.arity and j < len(shape.binder_sorts[arg]):
            return shape.binder_sorts[arg][j]
        alt = self.alt_of.get(con)
        if alt is not None and arg < len(alt.args) and j < len(alt.args[arg].binder_sorts):
            return alt.args[arg].binder_sorts[j]
        return next(iter(self.calc.names_sorts), None)


def _is_symbol_run(tok: str) -> bool:
    return bool(re.fullmatch(r"[^\sA-Za-z0-9_()\[\]{},]+", tok))


_readings: weakref.WeakKeyDictionary[Calculus, _Reading] = weakref.WeakKeyDictionary()


def _reading(calc: Calculus) -> _Reading:
    got = _readings.get(calc)
    if got is None:
        got = _Reading(calc)
        _readings[calc] = got
    return got


# ---------------------------------------------------------------- printing


class _Namer:
    """Chooses printed names for binders as LANGUAGE.md §4 says: the first name
    of the binder's names sort that is neither free in the whole term nor bound
    by an enclosing binder.  Names the parser would not read back as names (a
    literal such as ``S``, a constructor) are skipped as well."""

    def __init__(self, reading: _Reading, term: Term):
        if term.loose:
            raise ValueError("cannot print a term with loose bound indices")
        self.reading = reading
        self.free = frozenset(term.free)
        self.reserved = reading.literals | reading.cons

    def choose(self, con: str, arg: int, j: int, enclosing: Sequence[str]) -> str:
        sort = self.reading.binder_sort(con, arg, j)
        ns = self.reading.calc.names_sorts.get(sort) if sort else None
        taken = set(enclosing)
        i = 0
        while True:
            if ns is not None and ns.metas:
                candidate = ns.canonical_name(i)
            else:
                candidate = f"x{i}" if i else "x"
            if candidate not in self.free and candidate not in taken \
                    and candidate not in self.reserved:
                return candidate
            i += 1


def print_abstract(calc: Calculus, term: Term) -> str:
    """The abstract form of ``term``: ``lam(x.app(x, y))``, nullary constructors bare.

    >>> from calcscout.rules.core.terms import bound, name, node
    >>> from calcscout.rules.core.spec import Calculus
    >>> calc = Calculus("c", {}, {}, {}, ())
    >>> print_abstract(calc, node("lam", [node("app", [bound(0), name("y")])], [1]))
    'lam(x.app(x, y))'
    """
    if term.loose:
        raise ValueError("cannot print a term with loose bound indices")
    if type(term) is not Node:
        return term.name  # type: ignore[attr-defined]
    last = _last_root
    if last[0] is calc and last[1] == term.free and last[3].count[0] <= _MEMO_ENTRIES:
        reading, root = last[2], last[3]
    else:
        reading = _reading(calc)
        root = _abstract_root(reading, term.free)
        _last_root[:] = [calc, term.free, reading, root]
    # The printed text of a subterm depends only on it, the names of the
    # enclosing binders and the term's free names (the namer's state), and so
    # do the names chosen for a binder: both are memoised across calls, in a
    # tree of binder environments (an enumerated stream shares its subterms).
    namer: list[_Namer] = []

    def go(t: Node, env: _Env, store: bool) -> str:
        if store:
            got = env.texts.get(t)
            if got is not None:
                return got
        con = t.con
        if not t.args:
            return con
        parts = []
        i = 0
        for a, k in zip(t.args, t.binders, strict=True):
            inner = env
            prefix = ""
            if k:
                step = env.under.get((con, i))
                if step is None:
                    if not namer:
                        namer.append(_Namer(reading, term))
                    names = _bind(namer[0], con, i, k, list(env.names))
                    step = env.under[(con, i)] = (
                        "".join(f"{n}." for n in names), _Env((*env.names, *names), root.count))
                prefix, inner = step
            kind = type(a)
            if kind is Bound:
                parts.append(prefix + inner.names[-1 - a.index])  # type: ignore[attr-defined]
            elif kind is Name:
                parts.append(prefix + a.name)  # type: ignore[attr-defined]
            else:
                parts.append(prefix + go(a, inner, a.size <= _MEMO_SIZE))  # type: ignore[arg-type]
            i += 1
        text = f"{con}({', '.join(parts)})"
        if store:
            env.texts[t] = text
            root.count[0] += 1
        return text

    return go(term, root, False)


class _Env:
    """Printed subterms under one list of enclosing binder names, and the
    binder names (with their printed prefix ``x.``) chosen below it."""

    __slots__ = ("names", "texts", "under", "count")

    def __init__(self, names: tuple[str, ...], count: list[int]):
        self.names = names
        self.texts: dict[Term, str] = {}
        self.under: dict[tuple[str, int], tuple[str, _Env]] = {}
        self.count = count  # shared by the whole tree: entries stored


_last_root: list = [None, None, None, None]  # calc, free names, reading, memo: the last used
_MEMO_ENTRIES = 1 << 16  # printed subterms kept per calculus before the memo starts again
_MEMO_SIZE = 6  # larger subterms are rarely shared: not stored


def _abstract_root(reading: _Reading, free: tuple[str, ...]) -> _Env:
    """The memo of :func:`print_abstract` for terms with these free names.

    Kept on the calculus's reading, one tree per set of free names; a tree is
    dropped when it holds more than ``_MEMO_ENTRIES`` texts and all of them
    when there are more than 64 sets, so memory stays bounded.
    """
    roots: dict[tuple[str, ...], _Env] = reading.__dict__.setdefault("_abstract_roots", {})
    got = roots.get(free)
    if got is None or got.count[0] > _MEMO_ENTRIES:
        if len(roots) > 64:
            roots.clear()
        got = roots[free] = _Env((), [0])
    return got

def _bind(namer: _Namer, con: str, arg: int, k: int, env: list[str]) -> list[str]:
    names: list[str] = []
    for j in range(k):
        names.append(namer.choose(con, arg, j, env + names))
    return names


@dataclass(frozen=True)
class _Printed:
    text: str
    level: int
    right_open: bool  # ends with an open-ended notation that is not parenthesised
    open_ended: bool  # is itself an open-ended notation


def print_term(calc: Calculus, term: Term) -> str:
    """``term`` with the calculus's notations where declared, the abstract form
    elsewhere, and no parentheses that could be dropped, except around an
    open-ended notation standing as the last operand of an operator
    (``x (\\y. y)``)."""
    reading = _reading(calc)
    namer = _Namer(reading, term)

    def go(t: Term, env: list[str]) -> _Printed:
        if isinstance(t, Name):
            return _Printed(t.name, ATOM, False, False)
        if isinstance(t, Bound):
            return _Printed(env[-1 - t.index], ATOM, False, False)
        assert isinstance(t, Node)
        form = reading.printed.get(t.con)
        if form is not None and len(t.args) == len(form_arity(form)) and \
                t.binders == form_arity(form):
            return with_form(t, form, env)
        if not t.args:
            return _Printed(t.con, ATOM, False, False)
        parts = []
        for i, (a, k) in enumerate(zip(t.args, t.binders, strict=True)):
            names = _bind(namer, t.con, i, k, env)
            body = go(a, env + names).text
            parts.append("".join(f"{n}." for n in names) + body)
        return _Printed(f"{t.con}({', '.join(parts)})", ATOM, False, False)

    def with_form(t: Node, form: _Form, env: list[str]) -> _Printed:
        # Binder names first: an argument's body sees every binder of the notation.
        names: dict[tuple[int, int], str] = {}
        chosen: list[str] = []
        for it in form.items:
            if it.kind == "binder":
                arg, j = it.binds[0]
                n = namer.choose(t.con, arg, j, env + chosen)
                chosen.append(n)
                for b in it.binds:
                    names[b] = n
        pieces: list[tuple[str, bool]] = []
        right_open = form.open_ended
        for j, it in enumerate(form.items):
            if it.kind == "lit":
                pieces.append((it.text, it.space_before))
                continue
            if it.kind == "binder":
                pieces.append((names[it.binds[0]], it.space_before))
                continue
            i = it.arg
            inner = env + [names[(i, b)] for b in range(t.binders[i])]
            child = go(t.args[i], inner)
            slot = form.slot(j)
            paren = child.level < slot.level or (child.right_open and not slot.may_be_open)
            if not paren and child.open_ended and slot.trailing and not form.open_ended:
                paren = True  # `x (\y. y)`: allowed, and easier to read
            text = f"({child.text})" if paren else child.text
            if slot.trailing:
                right_open = form.open_ended or (child.right_open and not paren)
            pieces.append((text, it.space_before))
        return _Printed(_join(pieces), form.level, right_open, form.open_ended)

    return go(term, []).text


def form_arity(form: _Form) -> tuple[int, ...]:
    """The binder counts of a notation's constructor, as the notation spells them."""
    counts: dict[int, int] = {}
    for it in form.items:
        if it.kind == "arg":
            counts.setdefault(it.arg, 0)
        elif it.kind == "binder":
            for arg, _ in it.binds:
                counts[arg] = counts.get(arg, 0) + 1
    return tuple(counts[i] for i in range(len(counts)))


def _join(pieces: list[tuple[str, bool]]) -> str:
    """Join printed tokens, keeping the notation's own spacing where gluing two
    pieces cannot change how they lex (``\\x.`` yes, ``Sx`` or ``==`` no)."""
    out = ""
    for text, space in pieces:
        if out and (space or not _may_glue(out[-1], text[0])):
            out += " "
        out += text
    return out


def _may_glue(left: str, right: str) -> bool:
    def cls(c: str) -> str:
        if c.isalnum() or c in "_'":
            return "word"
        if c in "()[]{},":
            return "bracket"
        return "symbol"

    a, b = cls(left), cls(right)
    return a != b or a == "bracket"


# ---------------------------------------------------------------- lexing

_IDENT = re.compile(r"[A-Za-z_][A-Za-z0-9_]*'*")
_NUMBER = re.compile(r"[0-9]+")
_SYMBOLS = re.compile(r"[^\sA-Za-z0-9_()\[\]{},]+")
_PUNCT = {"(": "LPAR", ")": "RPAR", ",": "COMMA", ".": "DOT"}


def _terminal_names(reading: _Reading) -> dict[str, str]:
    """Literal -> lark terminal name; the abstract form's punctuation included."""
    out = dict(_PUNCT)
    for i, lit in enumerate(sorted(reading.literals)):
        out.setdefault(lit, f"L{i}")
    return out


def _lex(reading: _Reading, terminals: dict[str, str], text: str, file: str) -> list[Token]:
    tokens: list[Token] = []
    pos = 0
    n = len(text)

    def token(kind: str, value: str, start: int) -> Token:
        line, col = _line_col(text, start)
        return Token(kind, value, start_pos=start, line=line, column=col,
                     end_line=line, end_column=col + len(value), end_pos=start + len(value))

    while pos < n:
        c = text[pos]
        if c.isspace():
            pos += 1
            continue
        m = _IDENT.match(text, pos)
        if m:
            word = m.group()
            after = m.end()
            # `c(`: a constructor applied.  With a space, `f (x)` is juxtaposition
            # where the calculus has it, and a constructor applied where it has not.
            nxt = after
            if not reading.juxtaposes:
                while nxt < n and text[nxt].isspace():
                    nxt += 1
            glued = nxt < n and text[nxt] == "("
            if glued and word in reading.cons:
                tokens.append(token("CALLCON", word, pos))
            elif word in terminals:
                tokens.append(token(terminals[word], word, pos))
            elif word in reading.cons:
                tokens.append(token("CON", word, pos))
            elif glued:
                raise _error(text, file, pos, f"unknown constructor {word}",
                             len(word), hint=_known_cons_hint(reading))
            else:
                tokens.append(token("NAME", word, pos))
            pos = after
            continue
        m = _NUMBER.match(text, pos)
        if m:
            if m.group() not in terminals:
                raise _error(text, file, pos, f"unexpected number {m.group()}: names are "
                             "identifiers", len(m.group()))
            tokens.append(token(terminals[m.group()], m.group(), pos))
            pos = m.end()
            continue
        if c in "()[]{},":
            if c not in terminals:
                raise _error(text, file, pos, f"unexpected {c!r}")
            tokens.append(token(terminals[c], c, pos))
            pos += 1
            continue
        m = _SYMBOLS.match(text, pos)
        assert m is not None
        end = m.end()
        while pos < end:
            lit = next((s for s in reading.symbols if text.startswith(s, pos)
                        and pos + len(s) <= end), None)
            if lit is None:
                raise _error(text, file, pos, f"unexpected {text[pos:end]!r}",
                             end - pos, hint=_literals_hint(reading))
            tokens.append(token(terminals[lit], lit, pos))
            pos += len(lit)
    return tokens


def _line_col(text: str, offset: int) -> tuple[int, int]:
    line = text.count("\n", 0, offset) + 1
    start = text.rfind("\n", 0, offset) + 1
    return line, offset - start + 1


def _error(text: str, file: str, offset: int, message: str, width: int = 1,
           hint: str | None = None) -> TermError:
    line, col = _line_col(text, offset)
    lines = text.split("\n")
    source = lines[line - 1] if line <= len(lines) else ""
    pos = Pos(file, line, col, col + max(width, 1))
    return TermError([Problem(message, pos, hint, source_line=source)])


def _known_cons_hint(reading: _Reading) -> str:
    cons = sorted(reading.cons)
    if not cons:
        return f"calculus {reading.calc.name} declares no constructors"
    return f"the constructors of {reading.calc.name}: {', '.join(cons)}"


def _literals_hint(reading: _Reading) -> str | None:
    if not reading.symbols:
        return None
    return f"the symbols of {reading.calc.name}'s notations: " + " ".join(
        sorted(reading.symbols, key=lambda s: (len(s), s)))


class _TokenList(Lexer):
    """Hands lark the tokens :func:`_lex` made."""

    __future_interface__ = 2

    def __init__(self, conf):
        pass

    def lex(self, lexer_state, parser_state) -> Iterator[Token]:
        return iter(lexer_state.text)


# ---------------------------------------------------------------- parsing


class _TermParser:
    def __init__(self, reading: _Reading):
        self.reading = reading
        self.terminals = _terminal_names(reading)
        self.display = {v: k for k, v in self.terminals.items()}
        self.grammar = self._grammar()
        self.lark = Lark(self.grammar, parser="earley", lexer=_TokenList,
                         keep_all_tokens=True, start="start", ambiguity="resolve")
        self.starters = {"NAME", "CON", "CALLCON", "LPAR"} | {
            self.terminals[f.items[0].text] for f in reading.forms if f.items[0].kind == "lit"
        }

    def _grammar(self) -> str:
        forms = self.reading.forms
        levels = sorted({f.level for f in forms if f.kind != "closed" and not f.open_ended})
        names = [f"e{i}" for i in range(len(levels))]

        def nt(family: str, level: int) -> str:
            for lv, n in zip(levels, names, strict=True):
                if lv >= level:
                    return f"{family}_{n}"
            return f"{family}_atom"

        top = nt("o", TOP)

        def expansion(k: int, form: _Form, family: str) -> str:
            symbols = []
            for j, it in enumerate(form.items):
                if it.kind == "lit":
                    symbols.append(self.terminals[it.text])
                elif it.kind == "binder":
                    symbols.append("NAME")
                else:
                    slot = form.slot(j)
                    if slot.enclosed:
                        symbols.append(top)
                    elif slot.trailing and family == "o":
                        symbols.append(nt("o", slot.level))
                    else:
                        symbols.append(nt("c", slot.level))
            return f"{' '.join(symbols)} -> f{k}"

        rules: dict[str, list[str]] = {}
        for i, n in enumerate(names):
            nxt = names[i + 1] if i + 1 < len(names) else "atom"
            rules[f"c_{n}"] = [f"c_{nxt}"]
            rules[f"o_{n}"] = [f"o_{nxt}"]
        rules["c_atom"] = [
            "NAME -> name", "CON -> bare", "CALLCON LPAR args? RPAR -> call",
            f"LPAR {top} RPAR -> paren",
        ]
        rules["o_atom"] = ["c_atom"]
        for k, form in enumerate(forms):
            if form.kind == "closed":
                rules["c_atom"].append(expansion(k, form, "c"))
            elif form.open_ended:
                rules["o_atom"].append(expansion(k, form, "o"))
            else:
                at = nt("c", form.level)[2:]
                rules[f"c_{at}"].append(expansion(k, form, "c"))
                # a postfix term is closed, and open-allowed terms include closed ones
                rules[f"o_{at}"].append(expansion(k, form, "o"))
        lines = [f"start: {top}", "args: arg (COMMA arg)*", f"arg: (NAME DOT)* {top}"]
        for lhs, alts in rules.items():
            lines.append(f"?{lhs}: " + "\n    | ".join(dict.fromkeys(alts)))
        declared = sorted({"NAME", "CON", "CALLCON", *self.terminals.values()})
        lines.append("%declare " + " ".join(declared))
        return "\n".join(lines) + "\n"

    # ------------------------------------------------------------ errors

    def describe(self, expected: set[str]) -> str:
        parts: list[str] = []
        rest = set(expected)
        if "NAME" in rest and rest & (self.starters - {"NAME"}):
            parts.append("a term")
            rest -= self.starters
        elif "NAME" in rest:
            parts.append("a name")
            rest.discard("NAME")
        shown = sorted(repr(self.display[t]) for t in rest if t in self.display)
        parts.extend(shown)
        if "$END" in rest:
            parts.append("the end of the term")
        if not parts:
            return "something else"
        return parts[0] if len(parts) == 1 else ", ".join(parts[:-1]) + " or " + parts[-1]

    # ------------------------------------------------------------ parse

    def parse(self, text: str, file: str) -> Term:
        tokens = _lex(self.reading, self.terminals, text, file)
        try:
            tree = self.lark.parse(tokens)
        except UnexpectedToken as e:
            tok = e.token
            if tok.type == "$END":
                raise self._eof(text, file, set(e.expected)) from None
            expected = set(e.expected)
            if self._complete(tokens[: tokens.index(tok)]):
                expected.add("$END")  # lark's Earley does not list it
            raise _error(text, file, tok.start_pos,
                         f"unexpected {tok.value!r}: expected {self.describe(expected)}",
                         len(tok.value)) from None
        except UnexpectedEOF as e:
            raise self._eof(text, file, set(e.expected)) from None
        except UnexpectedInput as e:  # pragma: no cover - the lexer is ours
            raise _error(text, file, 0, f"cannot read the term: {e}") from None
        return self._build(tree.children[0], text, file)

    def _complete(self, tokens: list[Token]) -> bool:
        try:
            self.lark.parse(tokens)
        except UnexpectedInput:
            return False
        return True

    def _eof(self, text: str, file: str, expected: set[str]) -> TermError:
        if not text.strip():
            return _error(text, file, 0, "empty term: expected a term")
        return _error(text, file, len(text.rstrip()),
                      f"unexpected end of the term: expected {self.describe(expected)}")

    def _build(self, t: Tree | Token, text: str, file: str) -> Term:
        if isinstance(t, Token):
            # `?` rules inline a lone token; only names and bare constructors get here
            return self._token(t, text, file)
        kind = t.data
        if kind == "name":
            return name(t.children[0].value)
        if kind == "bare":
            return self._token(t.children[0], text, file)
        if kind == "paren":
            return self._build(t.children[1], text, file)
        if kind == "call":
            return self._call(t, text, file)
        assert kind.startswith("f"), kind
        form = self.reading.forms[int(kind[1:])]
        args: dict[int, Term] = {}
        bound_names: dict[tuple[int, int], str] = {}
        for it, child in zip(form.items, t.children, strict=True):
            if it.kind == "arg":
                args[it.arg] = self._build(child, text, file)
            elif it.kind == "binder":
                for b in it.binds:
                    bound_names[b] = child.value
        binders = form_arity(form)
        closed = [
            close(args[i], [bound_names[(i, j)] for j in range(k)]) if k else args[i]
            for i, k in enumerate(binders)
        ]
        return node(form.con, closed, binders)

    def _token(self, tok: Token, text: str, file: str) -> Term:
        if tok.type == "NAME":
            return name(tok.value)
        con = tok.value
        if self.reading.arity(con):
            raise _error(text, file, tok.start_pos,
                         f"constructor {con} takes arguments: {self.reading.shape_text(con)}",
                         len(con))
        return node(con)

    def _call(self, t: Tree, text: str, file: str) -> Term:
        head = t.children[0]
        con = head.value
        given: list[Tree] = []
        for child in t.children:
            if isinstance(child, Tree) and child.data == "args":
                given = [a for a in child.children if isinstance(a, Tree)]
        expected = self.reading.arity(con) or ()
        shape = self.reading.shape_text(con)
        if len(given) != len(expected):
            want = f"{len(expected)} argument{'s' if len(expected) != 1 else ''}"
            raise _error(text, file, head.start_pos,
                         f"constructor {con} takes {want}, {shape}; {len(given)} given",
                         len(con))
        args = []
        for i, (arg, k) in enumerate(zip(given, expected, strict=True)):
            parts = arg.children
            binder_names = [p.value for p in parts[:-1] if p.type == "NAME"]
            if len(binder_names) != k:
                first = parts[0]
                while isinstance(first, Tree):
                    first = first.children[0]
                names = f"{k} name{'s' if k != 1 else ''}" if k else "no names"
                raise _error(text, file, first.start_pos,
                             f"argument {i + 1} of {con} binds {names}, {shape}; "
                             f"{len(binder_names)} given", len(first.value))
            body = self._build(parts[-1], text, file)
            args.append(close(body, binder_names) if k else body)
        return node(con, args, expected)


_parsers: weakref.WeakKeyDictionary[Calculus, _TermParser] = weakref.WeakKeyDictionary()


def _parser(calc: Calculus) -> _TermParser:
    got = _parsers.get(calc)
    if got is None:
        got = _TermParser(_reading(calc))
        _parsers[calc] = got
    return got


def parse_term(calc: Calculus, text: str, file: str = "<command line>") -> Term:
    """An object term of ``calc`` written on the command line, in abstract form,
    with the calculus's notations, or both mixed.

    Raises :class:`~calcscout.rules.core.errors.TermError` with the column of the offending
    token and what was expected there.
    """
    return _parser(calc).parse(text, file)
