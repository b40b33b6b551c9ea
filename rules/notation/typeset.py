"""Terms and patterns as LaTeX (math mode), with the calculus's notations.

A notation may carry a LaTeX form after the word ``typeset``::

    sort term M N ::= lam(x.M) "\\x. M" typeset "\\lambda x.\\, M" | app(M, N) "M N"

The LaTeX form is pasted as written, each placeholder (an identifier of the
notation's metavariables, not part of a control sequence) replaced by the
LaTeX of its operand.  Where an operand needs parentheses is decided by the
plain notation's precedence, exactly as the terminal printer decides it
(:mod:`calcscout.rules.notation.notation`), so the LaTeX reads the same way
as the text.  A notation without a LaTeX form is set from its tokens: words
in sans serif, symbol runs in typewriter type, names and metavariables in
italics with their digits as subscripts; a constructor without a notation in
its abstract form, ``\\mathsf{app}(M, N)``.

Everything produced is plain LaTeX that needs no package beyond ``amsmath``.
"""

from __future__ import annotations

import re
from collections.abc import Callable, Sequence
from dataclasses import dataclass

from calcscout.rules.core.spec import (
    AltCon,
    Calculus,
    Notation,
    PAbs,
    Pattern,
    PCall,
    PCon,
    PMeta,
    PName,
    PPlug,
    PSubst,
)
from calcscout.rules.core.terms import Bound, Name, Node, Term
from calcscout.rules.notation.notation import (
    ATOM,
    _bind,
    _Form,
    _form_of,
    _Namer,
    _Reading,
    _reading,
    form_arity,
    notation_tokens,
)

# An identifier that is not the name of a control sequence (``\lambda``) nor
# the tail of a longer word.
_IDENT = re.compile(r"(?<![\\A-Za-z0-9_])[A-Za-z_][A-Za-z0-9_]*'*(?![A-Za-z0-9_])")

# ---------------------------------------------------------------- escaping

_TEXT_ESCAPES = {
    "\\": r"\textbackslash{}", "{": r"\{", "}": r"\}", "$": r"\$", "&": r"\&",
    "#": r"\#", "%": r"\%", "_": r"\_", "^": r"\^{}", "~": r"\~{}",
}


def escape_text(text: str) -> str:
    """``text`` for LaTeX's text mode: the ten special characters escaped.

    >>> escape_text("a_b {c} 50% $x$ & #1 ~^ \\\\")
    'a\\\\_b \\\\{c\\\\} 50\\\\% \\\\$x\\\\$ \\\\& \\\\#1 \\\\~{}\\\\^{} \\\\textbackslash{}'
    """
    return "".join(_TEXT_ESCAPES.get(c, c) for c in text)


def tt(text: str) -> str:
    r"""``text`` in typewriter type (usable in text and math mode): ``\texttt{...}``."""
    return r"\texttt{" + escape_text(text) + "}"


def ident(name: str) -> str:
    """A name or metavariable in math italics: ``x1'`` is ``x_{1}'``, ``foo`` is
    ``\\mathit{foo}``.

    >>> ident("M1'"), ident("x"), ident("foo_2")
    ("M_{1}'", 'x', '\\\\mathit{foo\\\\_}_{2}')
    """
    m = re.fullmatch(r"([A-Za-z_][A-Za-z_]*?)([0-9]*)('*)", name)
    if m is None:  # not an identifier at all: safe typewriter text
        return tt(name)
    base, digits, primes = m.groups()
    head = base if len(base) == 1 and base != "_" else r"\mathit{" + escape_text(base) + "}"
    return head + (f"_{{{digits}}}" if digits else "") + primes


def word(text: str) -> str:
    r"""A literal word of a notation, or a constructor's name: ``\mathsf{let}``."""
    return r"\mathsf{" + escape_text(text) + "}"


def literal(tok: str) -> str:
    """One literal token of a plain notation."""
    if re.fullmatch(r"[A-Za-z_][A-Za-z0-9_]*'*", tok):
        return word(tok)
    if tok.isdigit():
        return tok
    return tt(tok)


# ---------------------------------------------------------------- the check `lint` makes


def typeset_problems(text: str, placeholders: Sequence[str]) -> list[tuple[str, int]]:
    """What is wrong with a LaTeX form, each with the column (from the opening
    quote) where it is seen: every placeholder must stand exactly once, braces
    must balance, and nothing may leave math mode or end the line (``$``,
    ``%``, ``#``, ``&`` unescaped).

    >>> typeset_problems("\\\\lambda x.\\\\, M", ["x", "M"])
    []
    >>> [(message.split(";")[0], column) for message, column in typeset_problems("M M", "MN")]
    [('the LaTeX form uses M twice', 3), ('the LaTeX form does not use N', 0)]
    """
    problems: list[tuple[str, int]] = []
    wanted = list(dict.fromkeys(placeholders))
    every = ", ".join(wanted)
    seen: dict[str, int] = {}
    for m in _IDENT.finditer(text):
        if m.group() in wanted:
            if m.group() in seen:
                problems.append((f"the LaTeX form uses {m.group()} twice; each placeholder "
                                 f"exactly once ({every})", m.start() + 1))
            seen.setdefault(m.group(), m.start())
    for p in wanted:
        if p not in seen:
            problems.append((f"the LaTeX form does not use {p}; each placeholder exactly once "
                             f"({every})", 0))
    depth = 0
    i = 0
    while i < len(text):
        c = text[i]
        if c == "\\":
            i += 2  # a control symbol such as \{ or \% or \\ stands for itself
            continue
        if c == "{":
            depth += 1
        elif c == "}":
            depth -= 1
            if depth < 0:
                problems.append(("the LaTeX form closes a brace it never opened", i + 1))
                depth = 0
        elif c in "$%#&":
            problems.append((f"the LaTeX form may not contain {c} (write \\{c} for the "
                             "character; the form is set in math mode)", i + 1))
        i += 1
    if depth > 0:
        problems.append((f"the LaTeX form leaves {depth} brace(s) open", len(text) + 1))
    return problems


# ---------------------------------------------------------------- display trees


@dataclass(frozen=True)
class _Leaf:
    text: str  # LaTeX, an atom


@dataclass(frozen=True)
class _Con:
    con: str
    args: tuple[tuple[tuple[str, ...], Display], ...]  # (binder names, operand)


Display = _Leaf | _Con


@dataclass(frozen=True)
class _Out:
    text: str
    level: int
    right_open: bool
    open_ended: bool


class Typesetter:
    """Prints one calculus's terms and patterns as LaTeX."""

    def __init__(self, calc: Calculus):
        self.calc = calc
        self.reading: _Reading = _reading(calc)
        self.notation: dict[str, Notation] = {}
        # The notation behind the form the text printer uses for each constructor.
        for sort in sorted(calc.sorts.values(), key=lambda s: s.is_context):
            if sort.is_context:
                continue
            for alt in sort.alts:
                if not isinstance(alt, AltCon) or alt.notation is None \
                        or alt.con in self.notation:
                    continue
                form = _form_of(alt, alt.notation)
                printed = self.reading.printed.get(alt.con)
                if form is not None and printed is not None and form.items == printed.items:
                    self.notation[alt.con] = alt.notation

    # ------------------------------------------------------------ terms

    def term(self, t: Term) -> str:
        """A closed-or-open interned term (binder names as the text printer chooses them)."""
        namer = _Namer(self.reading, t)

        def go(t: Term, env: list[str]) -> Display:
            if isinstance(t, Name):
                return _Leaf(ident(t.name))
            if isinstance(t, Bound):
                return _Leaf(ident(env[-1 - t.index]))
            assert isinstance(t, Node)
            form = self._form(t.con, t.binders)
            names_of: list[list[str]] = [[] for _ in t.args]
            if form is not None:
                chosen: list[str] = []
                got: dict[tuple[int, int], str] = {}
                for it in form.items:
                    if it.kind == "binder":
                        arg, j = it.binds[0]
                        n = namer.choose(t.con, arg, j, env + chosen)
                        chosen.append(n)
                        for b in it.binds:
                            got[b] = n
                names_of = [[got[(i, b)] for b in range(k)] for i, k in enumerate(t.binders)]
            else:
                for i, k in enumerate(t.binders):
                    names_of[i] = _bind(namer, t.con, i, k, env)
            args = tuple((tuple(names_of[i]), go(a, env + names_of[i]))
                         for i, a in enumerate(t.args))
            return _Con(t.con, args)

        return self._render(go(t, [])).text

    # ------------------------------------------------------------ patterns

    def pattern(self, p: Pattern, call: Callable[[PCall], str] | None = None) -> str:
        """A rule's or an equation's side; ``call`` prints a translation call."""
        return self._render(self._display(p, call)).text

    def _display(self, p: Pattern, call: Callable[[PCall], str] | None) -> Display:
        if isinstance(p, PMeta | PName):
            return _Leaf(ident(p.name))
        if isinstance(p, PCon):
            args = []
            for a in p.args:
                names: tuple[str, ...] = ()
                while isinstance(a, PAbs):
                    names += tuple(a.names)
                    a = a.body
                args.append((tuple(ident(n) for n in names), self._display(a, call)))
            return _Con(p.con, tuple(args))
        if isinstance(p, PPlug):
            return _Leaf(f"{ident(p.context.name)}[{self.pattern(p.arg, call)}]")
        if isinstance(p, PSubst):
            body = self._render(self._display(p.body, call))
            inner = body.text if body.level >= ATOM and not body.right_open else f"({body.text})"
            pairs = ", ".join(f"{ident(n.name)} := {self.pattern(q, call)}" for n, q in p.pairs)
            return _Leaf(f"{inner}[{pairs}]")
        if isinstance(p, PCall):
            if call is not None:
                return _Leaf(call(p))
            return _Leaf(r"\mathit{" + escape_text(p.fn) + "}("
                         + ", ".join(self.pattern(a, call) for a in p.args) + ")")
        assert isinstance(p, PAbs)  # not under a constructor: its names, then its body
        return _Leaf("".join(f"{ident(n)}.\\," for n in p.names) + self.pattern(p.body, call))

    # ------------------------------------------------------------ printing

    def _form(self, con: str, binders: tuple[int, ...]) -> _Form | None:
        form = self.reading.printed.get(con)
        if form is None or form_arity(form) != binders:
            return None
        return form

    def _render(self, d: Display) -> _Out:
        if isinstance(d, _Leaf):
            return _Out(d.text, ATOM, False, False)
        binders = tuple(len(n) for n, _ in d.args)
        form = self._form(d.con, binders)
        if form is None:
            if not d.args:
                return _Out(word(d.con), ATOM, False, False)
            parts = []
            for names, a in d.args:
                parts.append("".join(f"{n}.\\," for n in names) + self._render(a).text)
            return _Out(f"{word(d.con)}({', '.join(parts)})", ATOM, False, False)
        pieces: dict[str, str] = {}  # placeholder -> LaTeX
        ordered: list[tuple[str, bool, str]] = []  # (LaTeX, space before, kind)
        right_open = form.open_ended
        for j, it in enumerate(form.items):
            if it.kind == "lit":
                ordered.append((literal(it.text), it.space_before, "lit"))
                continue
            if it.kind == "binder":
                arg, b = it.binds[0]
                text = d.args[arg][0][b]
                pieces[it.text] = text
                ordered.append((text, it.space_before, "binder"))
                continue
            child = self._render(d.args[it.arg][1])
            slot = form.slot(j)
            paren = child.level < slot.level or (child.right_open and not slot.may_be_open)
            if not paren and child.open_ended and slot.trailing and not form.open_ended:
                paren = True
            text = f"({child.text})" if paren else child.text
            if slot.trailing:
                right_open = form.open_ended or (child.right_open and not paren)
            pieces[it.text] = text
            ordered.append((text, it.space_before, "arg"))
        notation = self.notation.get(d.con)
        if notation is not None and notation.typeset is not None:
            text = _IDENT.sub(lambda m: pieces.get(m.group(), m.group()), notation.typeset)
            text = "{" + text + "}"
        else:
            text = ""
            for k, (piece, space, kind) in enumerate(ordered):
                if k and (space or kind == "arg" and ordered[k - 1][2] == "arg"):
                    text += r"\ "
                text += piece
        return _Out(text, form.level, right_open, form.open_ended)


def placeholders_of(notation: Notation) -> list[str]:
    """The placeholders of a notation, in the order the text uses them."""
    return [t for t in notation_tokens(notation.text) if t in notation.placeholders]
