"""Reading rule files: bytes -> text -> lark tree -> raw items with positions.

The raw items are what the file says, names not yet resolved; :mod:`calcscout.rules.loading.load`
resolves them into :mod:`calcscout.rules.core.spec` objects.  Lark trees stay inside this
module.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import cache
from pathlib import Path

from lark import Lark, Token, Tree
from lark.exceptions import UnexpectedCharacters, UnexpectedEOF, UnexpectedInput, UnexpectedToken

from calcscout.rules.core.errors import FileError, Problem, remember_source
from calcscout.rules.core.spec import Pos
from calcscout.rules.loading.files import read_bounded

MAX_FILE_BYTES = 4 * 1024 * 1024
# The deepest nesting of constructors, pluggings, substitutions and calls in one
# rule, equation or claim.  Patterns are taken apart by recursive functions; rules
# on paper nest a handful of levels.
MAX_NESTING = 500
_NESTING = frozenset({"p_app", "p_plug", "p_subst", "e_call"})


# ---------------------------------------------------------------- raw items


@dataclass
class RawPattern:
    """``x`` (kind 'ident'), ``c(args)`` ('app'), ``E[P]`` ('plug'), ``P[x := Q]`` ('subst')."""

    kind: str
    name: str
    pos: Pos
    args: list[RawArg] = field(default_factory=list)
    base: RawPattern | None = None  # the plugged context or the substituted body
    pairs: list[tuple[str, Pos, RawPattern]] = field(default_factory=list)

    def text(self) -> str:
        if self.kind == "ident":
            return self.name
        if self.kind == "app":
            return f"{self.name}({', '.join(a.text() for a in self.args)})"
        assert self.base is not None
        if self.kind == "plug":
            return f"{self.base.text()}[{self.args[0].pattern.text()}]"
        inner = ", ".join(f"{n} := {p.text()}" for n, _, p in self.pairs)
        return f"{self.base.text()}[{inner}]"


@dataclass
class RawArg:
    binders: list[tuple[str, Pos]]
    pattern: RawPattern

    def text(self) -> str:
        return "".join(f"{b}." for b, _ in self.binders) + self.pattern.text()


@dataclass
class RawNotation:
    text: str
    pos: Pos
    assoc: str | None = None
    assoc_pos: Pos | None = None
    prec: int | None = None
    typeset: str | None = None  # the LaTeX form after `typeset`
    typeset_pos: Pos | None = None


@dataclass
class RawAlt:
    kind: str  # 'hole', 'ident', 'con'
    name: str
    pos: Pos
    args: list[tuple[list[tuple[str, Pos]], str, Pos]] = field(default_factory=list)
    explicit_parens: bool = False
    notation: RawNotation | None = None


@dataclass
class RawSortDecl:
    name: str
    metas: list[str]
    alts: list[RawAlt]
    is_context: bool
    pos: Pos


@dataclass
class RawRule:
    name: str
    groups: list[str]
    lhs: RawPattern
    rhs: RawPattern
    conditions: list[tuple[str, str, Pos, RawPattern]]  # kind, name, pos, term
    pos: Pos


@dataclass
class RawCalculus:
    name: str
    extends: str | None
    names: list[tuple[str, list[str], Pos]]
    sorts: list[RawSortDecl]
    rules: list[RawRule]
    drops: list[tuple[str, Pos]]
    reduce: tuple[str | None, Pos] | None  # (context sort or None for anywhere, pos)
    pos: Pos
    extends_pos: Pos | None = None


@dataclass
class RawSignature:
    fn: str
    params: list[tuple[str, Pos]]
    result: tuple[str, Pos]
    pos: Pos


@dataclass
class RawEquation:
    fn: str
    args: list[RawArg]
    rhs: RawPattern
    pos: Pos


@dataclass
class RawTranslation:
    name: str
    source: tuple[str, Pos]
    target: tuple[str, Pos]
    extends: tuple[str, Pos] | None
    signatures: list[RawSignature]
    equations: list[RawEquation]
    normalize: tuple[str, Pos] | None
    pos: Pos


@dataclass
class RawExpr:
    name: str
    pos: Pos
    args: list[RawExpr] | None = None  # None: a bare identifier

    def text(self) -> str:
        if self.args is None:
            return self.name
        return f"{self.name}({', '.join(a.text() for a in self.args)})"


@dataclass
class RawSubst:
    """``A[x := B, ...]`` in a claim: a substitution for names metavariables."""

    body: RawExpr | RawSubst
    pairs: list[tuple[str, Pos, RawExpr | RawSubst]]
    pos: Pos
    name: str = ""  # never a metavariable or a function: see ``args``
    args: None = None

    def text(self) -> str:
        pairs = ", ".join(f"{x} := {v.text()}" for x, _, v in self.pairs)
        return f"{self.body.text()}[{pairs}]"


@dataclass
class RawAtom:
    left: RawExpr
    pos: Pos
    relation: tuple[str, tuple[str, str | None] | None, Pos] | None = None
    right: RawExpr | None = None
    member_of: tuple[str, str | None, Pos] | None = None


@dataclass
class RawClaim:
    name: str
    quantifiers: list[tuple[list[tuple[str, Pos]], str, str, Pos]]  # metas, calc, sort, pos
    kind: str  # 'atom', 'implies', 'confluent', 'terminating'
    atoms: list[RawAtom]
    subject: tuple[str, str | None, Pos] | None  # for confluent/terminating
    within: list[tuple[str, int, Pos]]
    text: str
    file: str
    pos: Pos
    lemma: bool = False
    needs: list[tuple[str, Pos]] = field(default_factory=list)


@dataclass
class RawFile:
    path: str
    includes: list[tuple[str, Pos]] = field(default_factory=list)
    calculi: list[RawCalculus] = field(default_factory=list)
    translations: list[RawTranslation] = field(default_factory=list)
    bounds: list[tuple[str, int, Pos]] = field(default_factory=list)
    claims: list[RawClaim] = field(default_factory=list)
    bounds_lines: list[Pos] = field(default_factory=list)  # where each `bounds` item starts


# ---------------------------------------------------------------- reading


@cache
def _parser() -> Lark:
    grammar = (Path(__file__).with_name("grammar.lark")).read_text(encoding="utf-8")
    options = dict(parser="lalr", lexer="basic", propagate_positions=True,
                   maybe_placeholders=True)
    # Building the parser tables took about 60 ms of every process; lark keeps
    # them in a file it checks against the grammar and options.  The file is a
    # pickle, so only in a folder of the user's own that no one else can write.
    where = _cache_file(grammar)
    if where is not None:
        try:
            return Lark(grammar, cache=str(where), **options)
        except Exception:  # noqa: BLE001 - a damaged cache file: build afresh
            pass
    return Lark(grammar, **options)


def _cache_file(grammar: str) -> Path | None:
    """``~/.cache/calcscout/grammar-HASH.lark`` (or under ``XDG_CACHE_HOME``), or
    None where that folder cannot be made private to this user
    (``CALCSCOUT_NO_CACHE=1`` turns the cache off)."""
    import hashlib
    import os
    import sys

    import lark

    if os.environ.get("CALCSCOUT_NO_CACHE") or not hasattr(os, "getuid"):
        return None
    base = os.environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"), ".cache")
    folder = Path(base) / "calcscout"
    try:
        folder.mkdir(mode=0o700, parents=True, exist_ok=True)
        st = folder.stat()
        if st.st_uid != os.getuid() or st.st_mode & 0o022:
            return None
    except OSError:
        return None
    key = hashlib.sha256(
        f"{lark.__version__}|{sys.version_info[:2]}|{grammar}".encode()
    ).hexdigest()[:24]
    return folder / f"grammar-{key}.lark"


def read_text_file(path: str | Path, shown: str | None = None) -> str:
    """The file's text, or a FileError that says why it is not a rule file."""
    shown = shown or str(path)
    p = Path(path)
    try:
        size = p.stat().st_size
    except FileNotFoundError:
        raise FileError(
            f"no such file: {shown}",
            hint="check the path; include paths are relative to the including file",
        ) from None
    except OSError as e:
        raise FileError(f"cannot read {shown}: {e.strerror}") from None
    if p.is_dir():
        raise FileError(f"{shown} is a folder, not a rule file")
    if size > MAX_FILE_BYTES:
        raise FileError(
            f"{shown} is {size / 1e6:.1f} MB; a rule file may be at most "
            f"{MAX_FILE_BYTES // (1024 * 1024)} MiB",
            hint="is this the file you meant? rule files are small text files",
        )
    # the stated size is 0 for a device or a FIFO: the bounded reader refuses those
    data = read_bounded(p, shown, MAX_FILE_BYTES, "rule file")
    nul = data.find(b"\0")
    if nul >= 0:
        raise FileError(f"{shown} is not a text file (a NUL byte at offset {nul})",
                        hint="give a .calc rule file")
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as e:
        raise FileError(
            f"{shown} is not UTF-8 text (byte 0x{data[e.start]:02x} at offset {e.start})",
            hint="save the file as UTF-8") from None
    if text.startswith("\ufeff"):
        text = text[1:]
    return text


def parse_text(text: str, file: str) -> RawFile:
    # Lines end with \n, \r\n or a lone \r: one form, so that positions count lines
    # the way an editor does.
    text = text.replace("\r\n", "\n").replace("\r", "\n")
    remember_source(file, text)
    try:
        tree = _parser().parse(text)
    except UnexpectedInput as e:
        raise FileError([_syntax_problem(e, text, file)]) from None
    _check_nesting(tree, file)
    return _Builder(file, text).file(tree)


def _check_nesting(tree: Tree, file: str) -> None:
    """A FileError at the first pattern or expression nested deeper than
    :data:`MAX_NESTING` (walked without recursion, so any depth is safe here)."""
    todo: list[tuple[Tree, int]] = [(tree, 0)]
    while todo:
        t, depth = todo.pop()
        if t.data in _NESTING:
            depth += 1
            if depth > MAX_NESTING:
                meta = t.meta
                raise FileError(
                    f"this is nested more than {MAX_NESTING} levels deep",
                    Pos(file, meta.line, meta.column, meta.column + 1),
                    hint=f"a rule, equation or claim may nest at most {MAX_NESTING} "
                         "constructors, pluggings, substitutions and calls")
        todo.extend((c, depth) for c in t.children if isinstance(c, Tree))


# ---------------------------------------------------------------- syntax errors

_EXPECT_WORDS = {
    "IDENT": "a name", "STRING": 'a string "..."', "NUMBER": "a number",
    "SIGNED_INT": "a number", "LPAR": "'('", "RPAR": "')'", "LBRACE": "'{'",
    "RBRACE": "'}'", "LSQB": "'['", "RSQB": "']'", "COMMA": "','", "COLON": "':'",
    "SEMICOLON": "';'",
    "DOT": "'.'", "VBAR": "'|'", "EQUAL": "'='", "ARROW": "'->'",
    "ARROW_STAR": "'->*'", "ARROW_PLUS": "'->+'",
    "ARROW_EQ": "'->='", "EQEQ": "'=='",
    "DEFINES": "'::='", "ASSIGN": "':='",
}


def _describe(term: str) -> str:
    if term.startswith("KW_"):
        return f"'{term[3:].lower()}'"
    return _EXPECT_WORDS.get(term, term.lower())


def _syntax_problem(e: UnexpectedInput, text: str, file: str) -> Problem:
    line = getattr(e, "line", 1) or 1
    column = getattr(e, "column", 1) or 1
    if isinstance(e, UnexpectedEOF) or (isinstance(e, UnexpectedToken) and e.token.type == "$END"):
        lines = text.splitlines() or [""]
        line = len(lines)
        column = len(lines[-1]) + 1
        expected = sorted({_describe(t) for t in e.expected})
        return Problem(f"the file ends in the middle of an item; expected {_join(expected)}",
                       Pos(file, line, column),
                       hint="an unclosed '{' or '(' or an unfinished rule or claim")
    if isinstance(e, UnexpectedCharacters):
        ch = text[e.pos_in_stream] if e.pos_in_stream < len(text) else ""
        if ch and ord(ch) > 127:
            msg = f"the character {ch!r} (U+{ord(ch):04X}) cannot stand here"
            hint = "names are ASCII letters, digits, '_' and trailing primes; other text goes in strings"
        elif ch == '"':
            msg = "a string that is not closed on its line"
            hint = 'close it with "'
        else:
            msg = f"unexpected character {ch!r}"
            allowed = sorted({_describe(t) for t in (e.allowed or ())})
            hint = f"expected {_join(allowed)}" if allowed else None
        return Problem(msg, Pos(file, line, column), hint=hint)
    assert isinstance(e, UnexpectedToken)
    tok = e.token
    expected = sorted({_describe(t) for t in e.expected if not t.startswith("__")} |
                      {_describe(t) for t in e.expected if t in _EXPECT_WORDS})
    shown = str(tok)
    end = column + len(shown)
    if tok.type.startswith("KW_") and "IDENT" in e.expected:
        return Problem(f"{shown!r} is a keyword; it cannot be a name here",
                       Pos(file, line, column, end), hint="choose another name")
    return Problem(f"unexpected {shown!r}; expected {_join(expected)}",
                   Pos(file, line, column, end), hint=_hint_for(tok, e.expected))


def _hint_for(tok: Token, expected: set[str]) -> str | None:
    if tok.type == "RBRACE" and "ARROW" in expected:
        return "a rule needs '->' and a right-hand side"
    if tok.type == "IDENT" and tok.value in ("rule", "sort", "claim"):
        return None
    if "DEFINES" in expected:
        return "a sort declaration reads: sort NAME METAVARS ::= alternative | ..."
    return None


def _join(words: list[str]) -> str:
    if len(words) > 6:
        words = words[:6] + ["..."]
    return ", ".join(words) if words else "something else"


# ---------------------------------------------------------------- tree -> raw


class _Builder:
    def __init__(self, file: str, text: str):
        self.path = file
        self.text = text

    def pos(self, node: Tree | Token) -> Pos:
        if isinstance(node, Token):
            return Pos(self.path, node.line or 0, node.column or 0,
                       (node.column or 0) + len(str(node)))
        meta = node.meta
        if getattr(meta, "empty", True):
            return Pos(self.path, 0, 0)
        end = meta.end_column if meta.line == meta.end_line else None
        return Pos(self.path, meta.line, meta.column, end)

    def source(self, node: Tree) -> str:
        meta = node.meta
        return " ".join(self.text[meta.start_pos:meta.end_pos].split())

    def file(self, tree: Tree) -> RawFile:
        out = RawFile(self.path)
        for item in tree.children:
            kind = item.data
            if kind == "include":
                s = item.children[1]
                out.includes.append((_unquote(str(s)), self.pos(s)))
            elif kind == "calculus":
                out.calculi.append(self.calculus(item))
            elif kind == "translation":
                out.translations.append(self.translation(item))
            elif kind == "bounds_item":
                out.bounds_lines.append(self.pos(item.children[0]))
                out.bounds.extend(self.bound(b) for b in item.children[1:] if isinstance(b, Tree))
            elif kind == "claim":
                out.claims.append(self.claim(item))
        return out

    # ---- calculi

    def calculus(self, t: Tree) -> RawCalculus:
        _, name, _, base, *items = t.children
        calc = RawCalculus(str(name), str(base) if base else None, [], [], [], [], None,
                           self.pos(name), self.pos(base) if base else None)
        for it in items:
            if not isinstance(it, Tree):
                continue
            k = it.data
            if k == "names_decl":
                ids = [c for c in it.children[1:] if isinstance(c, Token)]
                calc.names.append((str(ids[0]), [str(i) for i in ids[1:]], self.pos(ids[0])))
            elif k in ("sort_decl", "context_decl"):
                calc.sorts.append(self.sort_decl(it, k == "context_decl"))
            elif k == "rule_decl":
                calc.rules.append(self.rule(it))
            elif k == "reduce_anywhere":
                calc.reduce = (None, self.pos(it))
            elif k == "reduce_in":
                calc.reduce = (str(it.children[2]), self.pos(it.children[2]))
            elif k == "drop_decl":
                calc.drops.append((str(it.children[2]), self.pos(it.children[2])))
        return calc

    def sort_decl(self, t: Tree, is_context: bool) -> RawSortDecl:
        ids = [c for c in t.children[1:] if isinstance(c, Token)]
        alts = [self.alt(c) for c in t.children if isinstance(c, Tree)]
        return RawSortDecl(str(ids[0]), [str(i) for i in ids[1:]], alts, is_context,
                           self.pos(ids[0]))

    def alt(self, t: Tree) -> RawAlt:
        if t.data == "alt_hole":
            return RawAlt("hole", "[]", self.pos(t))
        if t.data == "alt_ident":
            name, note = t.children
            return RawAlt("ident", str(name), self.pos(name), notation=self.notation(note))
        name, *rest = t.children
        note = rest[-1] if rest and isinstance(rest[-1], Tree) and rest[-1].data == "notation" else None
        args = []
        for a in rest:
            if isinstance(a, Tree) and a.data == "alt_arg":
                toks = list(a.children)
                binders = [(str(b), self.pos(b)) for b in toks[:-1]]
                args.append((binders, str(toks[-1]), self.pos(toks[-1])))
        return RawAlt("con", str(name), self.pos(name), args, True, self.notation(note))

    def notation(self, t: Tree | None) -> RawNotation | None:
        if t is None:
            return None
        s, assoc, prec, *typeset = t.children
        where = assoc or prec
        tex = typeset[-1] if typeset else None
        return RawNotation(_unquote(str(s)), self.pos(s), str(assoc) if assoc else None,
                           self.pos(where) if where else None,
                           int(prec) if prec is not None else None,
                           _unquote(str(tex)) if tex is not None else None,
                           self.pos(tex) if tex is not None else None)

    def rule(self, t: Tree) -> RawRule:
        _, name, groups, lhs, rhs, *rest = t.children
        conds = []
        for c in rest:
            if isinstance(c, Tree):
                n, _, _, term = c.children
                conds.append(("fresh" if c.data == "cond_fresh" else "free", str(n),
                              self.pos(n), self.pattern(term)))
        gs = [str(g) for g in groups.children] if groups is not None else []
        return RawRule(str(name), gs, self.pattern(lhs), self.pattern(rhs), conds,
                       self.pos(name))

    def pattern(self, t: Tree) -> RawPattern:
        k = t.data
        if k == "p_ident":
            tok = t.children[0]
            return RawPattern("ident", str(tok), self.pos(tok))
        if k == "p_app":
            name, *args = t.children
            return RawPattern("app", str(name), self.pos(name),
                              [self.arg(a) for a in args if a is not None])
        if k == "p_plug":
            base, arg = t.children
            b = self.pattern(base)
            return RawPattern("plug", b.name, b.pos, [RawArg([], self.pattern(arg))], base=b)
        base, *pairs = t.children
        b = self.pattern(base)
        out = []
        for p in pairs:
            n, val = p.children
            out.append((str(n), self.pos(n), self.pattern(val)))
        return RawPattern("subst", b.name, b.pos, base=b, pairs=out)

    def arg(self, t: Tree) -> RawArg:
        *binders, body = t.children
        bs = [(str(b.children[0]), self.pos(b.children[0])) for b in binders]
        return RawArg(bs, self.pattern(body))

    # ---- translations

    def translation(self, t: Tree) -> RawTranslation:
        _, name, src, dst, _, base, *rest = t.children
        norm = None
        sigs: list[RawSignature] = []
        eqs: list[RawEquation] = []
        for it in rest:
            if not isinstance(it, Tree):
                continue
            if it.data == "normalize":
                g = it.children[2]
                norm = (str(g), self.pos(g))
            elif it.data == "signature":
                toks = [c for c in it.children if isinstance(c, Token)]
                params = [(str(p), self.pos(p)) for p in toks[1:-1]]
                sigs.append(RawSignature(str(toks[0]), params, (str(toks[-1]), self.pos(toks[-1])),
                                         self.pos(toks[0])))
            elif it.data == "equation":
                fn, *args, rhs = it.children
                eqs.append(RawEquation(str(fn), [self.arg(a) for a in args], self.pattern(rhs),
                                       self.pos(fn)))
        return RawTranslation(str(name), (str(src), self.pos(src)), (str(dst), self.pos(dst)),
                              (str(base), self.pos(base)) if base else None, sigs, eqs, norm,
                              self.pos(name))

    # ---- bounds and claims

    def bound(self, t: Tree) -> tuple[str, int, Pos]:
        key, value = t.children
        return (str(key), int(str(value)), self.pos(key))

    def qualified(self, t: Tree) -> tuple[str, str | None, Pos]:
        a, b = t.children
        return (str(a), str(b) if b else None, self.pos(a))

    def claim(self, t: Tree) -> RawClaim:
        kw, name, forc, body, _, *rest = t.children
        within = [b for b in rest if isinstance(b, Tree) and b.data == "bound"]
        needs = [(str(n), self.pos(n)) for b in rest if isinstance(b, Tree) and b.data == "needs"
                 for n in b.children if isinstance(n, Token) and n.type == "IDENT"]
        lemma = str(kw) == "lemma"
        quants = []
        if forc is not None:
            for g in forc.children:
                if isinstance(g, Tree):
                    toks = [c for c in g.children if isinstance(c, Token) and c.type == "IDENT"]
                    metas = [(str(m), self.pos(m)) for m in toks[:-2]]
                    quants.append((metas, str(toks[-2]), str(toks[-1]), self.pos(toks[-2])))
        bounds = [self.bound(b) for b in within if isinstance(b, Tree)]
        text_from = forc if forc is not None else body
        text = self.source(body) if forc is None else self.source_span(text_from, body)
        pos = self.pos(name)
        if body.data == "b_atom":
            first, _, second = body.children
            atoms = [self.atom(first)] + ([self.atom(second)] if second is not None else [])
            kind = "implies" if second is not None else "atom"
            return RawClaim(str(name), quants, kind, atoms, None, bounds, text, self.path, pos,
                            lemma, needs)
        kind = "confluent" if body.data == "b_confluent" else "terminating"
        subject = self.qualified(body.children[1])
        return RawClaim(str(name), quants, kind, [], subject, bounds, text, self.path, pos,
                        lemma, needs)

    def source_span(self, a: Tree, b: Tree) -> str:
        return " ".join(self.text[a.meta.start_pos:b.meta.end_pos].split())

    def atom(self, t: Tree) -> RawAtom:
        if t.data == "a_member":
            left, q = t.children
            return RawAtom(self.expr(left), self.pos(t), member_of=self.qualified(q))
        left, rel, right = t.children
        if rel is None:
            return RawAtom(self.expr(left), self.pos(t))
        tok, qual = rel.children
        q = None
        if qual is not None:
            a, b = qual.children
            q = (str(a), str(b) if b else None)
        return RawAtom(self.expr(left), self.pos(t), (str(tok), q, self.pos(tok)),
                       self.expr(right))

    def expr(self, t: Tree) -> RawExpr | RawSubst:
        if t.data == "e_subst":
            body, *pairs = t.children
            out = []
            for p in pairs:
                x, value = p.children
                out.append((str(x), self.pos(x), self.expr(value)))
            return RawSubst(self.expr(body), out, self.pos(t))
        if t.data == "e_ident":
            tok = t.children[0]
            return RawExpr(str(tok), self.pos(tok))
        name, *args = t.children
        return RawExpr(str(name), self.pos(name), [self.expr(a) for a in args])


def _unquote(s: str) -> str:
    """A string literal's text: ``\\\\`` and ``\\"`` are escapes; any other
    backslash stands for itself."""
    body = s[1:-1]
    out = []
    i = 0
    while i < len(body):
        c = body[i]
        if c == "\\" and i + 1 < len(body) and body[i + 1] in '\\"':
            out.append(body[i + 1])
            i += 2
            continue
        out.append(c)
        i += 1
    return "".join(out)
