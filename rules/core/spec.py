"""The objects a rule file describes: calculi, sorts, rules, translations, claims.

All are frozen dataclasses built once by :mod:`calcscout.rules.loading.load` and never changed.
Every object that came from a file carries a :class:`Pos` (not part of its
equality).  Patterns keep the user's binder names (``lam(x.M)``); matching
turns them into the locally nameless world of :mod:`calcscout.rules.core.terms`.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property
from typing import Union


@dataclass(frozen=True)
class Pos:
    file: str
    line: int
    column: int
    end_column: int | None = None

    def __str__(self) -> str:
        return f"{self.file}:{self.line}:{self.column}"


NOWHERE = Pos("<built-in>", 0, 0)


def _pos() -> Pos:
    return field(default=NOWHERE, compare=False, repr=False)


# ---------------------------------------------------------------- grammar


@dataclass(frozen=True)
class NamesSort:
    name: str
    metas: tuple[str, ...]
    pos: Pos = _pos()

    def canonical_name(self, i: int) -> str:
        """The i-th name of this sort: its metavariables, then with digits.

        ``x, y, z, x1, y1, z1, x2, ...`` for ``names var x y z``; the digits go
        before a metavariable's primes (``x1'``), so that the name is an identifier.
        """
        k = len(self.metas)
        if i < k:
            return self.metas[i]
        meta = self.metas[i % k]
        stem = meta.rstrip("'")
        return f"{stem}{i // k}{meta[len(stem):]}"


@dataclass(frozen=True)
class Arg:
    """One argument of a constructor alternative: ``x.y.M`` is binder_sorts (var, var), sort term."""

    binder_sorts: tuple[str, ...]  # names sorts of the bound names, outermost first
    sort: str
    binder_metas: tuple[str, ...] = ()  # the names metavariables as written (x, y)
    meta: str = ""  # the argument's metavariable as written (M)


@dataclass(frozen=True)
class Notation:
    """A user notation such as ``"\\x. M"``: tokens, placeholders among them."""

    text: str
    tokens: tuple[str, ...]
    placeholders: tuple[str, ...]  # the metavariables used, in token order
    assoc: str | None = None  # 'left', 'right', 'nonassoc' or None (default rules)
    prec: int | None = None
    pos: Pos = _pos()
    typeset: str | None = None  # the LaTeX form (math mode) given after `typeset`


@dataclass(frozen=True)
class AltNames:
    names_sort: str
    pos: Pos = _pos()


@dataclass(frozen=True)
class AltSort:
    sort: str
    pos: Pos = _pos()


@dataclass(frozen=True)
class AltCon:
    con: str
    args: tuple[Arg, ...]
    notation: Notation | None = None
    pos: Pos = _pos()


@dataclass(frozen=True)
class AltHole:
    pos: Pos = _pos()


Alt = Union[AltNames, AltSort, AltCon, AltHole]


@dataclass(frozen=True)
class Sort:
    name: str
    metas: tuple[str, ...]
    alts: tuple[Alt, ...]
    is_context: bool = False
    pos: Pos = _pos()


@dataclass(frozen=True)
class Shape:
    """A constructor's shape: how many names each argument binds, and their sorts."""

    con: str
    binder_sorts: tuple[tuple[str, ...], ...]

    @cached_property  # read at every node a rule or translation builds
    def arity(self) -> int:
        return len(self.binder_sorts)

    @cached_property
    def binders(self) -> tuple[int, ...]:
        return tuple(len(b) for b in self.binder_sorts)


# ---------------------------------------------------------------- patterns


@dataclass(frozen=True)
class PMeta:
    """A metavariable of a sort (``M``, ``V1``), possibly a context (``E``)."""

    name: str
    sort: str
    pos: Pos = _pos()


@dataclass(frozen=True)
class PName:
    """A names metavariable (``x``) in a variable or binder position."""

    name: str
    names_sort: str
    pos: Pos = _pos()


@dataclass(frozen=True)
class PAbs:
    """An argument under binders: ``x.y.M`` (names as written)."""

    names: tuple[str, ...]
    body: Pattern
    pos: Pos = _pos()


@dataclass(frozen=True)
class PCon:
    con: str
    args: tuple[Pattern, ...]  # an argument that binds is a PAbs
    pos: Pos = _pos()


@dataclass(frozen=True)
class PPlug:
    """``E[P]``: plug a pattern into the hole of a context metavariable."""

    context: PMeta
    arg: Pattern
    pos: Pos = _pos()


@dataclass(frozen=True)
class PSubst:
    """``P[x := Q, y := R]``: simultaneous capture-avoiding substitution."""

    body: Pattern
    pairs: tuple[tuple[PName, Pattern], ...]
    pos: Pos = _pos()


@dataclass(frozen=True)
class PCall:
    """A call of a translation function in an equation's right-hand side."""

    fn: str
    args: tuple[Pattern, ...]
    pos: Pos = _pos()


Pattern = Union[PMeta, PName, PAbs, PCon, PPlug, PSubst, PCall]


# ---------------------------------------------------------------- rules


@dataclass(frozen=True)
class Condition:
    """``x fresh in T`` (kind 'fresh') or ``x free in T`` (kind 'free')."""

    kind: str
    name: PName
    term: Pattern
    pos: Pos = _pos()


@dataclass(frozen=True)
class Rule:
    name: str
    lhs: Pattern
    rhs: Pattern
    groups: tuple[str, ...] = ()
    conditions: tuple[Condition, ...] = ()
    pos: Pos = _pos()


@dataclass(frozen=True)
class Calculus:
    name: str
    names_sorts: dict[str, NamesSort]
    sorts: dict[str, Sort]
    shapes: dict[str, Shape]
    rules: tuple[Rule, ...]
    reduce_in: str | None = None  # a context sort, or None for "reduce anywhere"
    metas: dict[str, str] = field(default_factory=dict)  # metavariable -> sort or names sort
    extends: str | None = None
    pos: Pos = _pos()

    def __hash__(self) -> int:
        return hash(self.name)

    def __eq__(self, other: object) -> bool:
        return self is other

    @property
    def groups(self) -> tuple[str, ...]:
        seen: dict[str, None] = {}
        for r in self.rules:
            for g in r.groups:
                seen.setdefault(g, None)
        return tuple(seen)

    def rules_of(self, group: str | None) -> tuple[Rule, ...]:
        if group is None:
            return self.rules
        return tuple(r for r in self.rules if group in r.groups)

    def names_sort_of(self, text: str) -> str | None:
        """The names sort a free name belongs to, read off its spelling.

        ``x``, ``x1``, ``x'`` belong to the names sort that declares ``x``; any
        other spelling belongs to the first names sort (a calculus with one
        names sort takes every name).  An internal fresh name ``#var:3``
        names its sort.
        """
        if text.startswith("#") and ":" in text:
            ns = text[1 : text.index(":")]
            if ns in self.names_sorts:
                return ns
        base = base_meta(text)
        owner = self.metas.get(base)
        if owner in self.names_sorts:
            return owner
        return next(iter(self.names_sorts), None)


def base_meta(text: str) -> str:
    """``M1'`` -> ``M``: metavariables may carry digits and primes."""
    return text.rstrip("'").rstrip("0123456789") or text


# ---------------------------------------------------------------- translations


@dataclass(frozen=True)
class Signature:
    fn: str
    params: tuple[str, ...]  # first: a source sort; the others: target sorts
    result: str
    pos: Pos = _pos()


@dataclass(frozen=True)
class Equation:
    fn: str
    pattern: Pattern  # a source pattern
    extra: tuple[PMeta, ...]  # the extra parameters, target metavariables
    rhs: Pattern
    pos: Pos = _pos()


@dataclass(frozen=True)
class Translation:
    name: str
    source: str
    target: str
    signatures: dict[str, Signature]
    equations: tuple[Equation, ...]
    entry: str = ""  # the function a claim means by the translation's name
    normalize: str | None = None  # a group of the target calculus
    extends: str | None = None
    pos: Pos = _pos()

    def __hash__(self) -> int:
        return hash(self.name)

    def __eq__(self, other: object) -> bool:
        return self is other

    def equations_of(self, fn: str) -> tuple[Equation, ...]:
        return tuple(e for e in self.equations if e.fn == fn)


# ---------------------------------------------------------------- claims


@dataclass(frozen=True)
class Relation:
    """``->``, ``->*``, ``->+``, ``->=``, ``joins`` or ``==``, with its calculus and group."""

    kind: str
    calculus: str | None = None  # None only for '=='
    group: str | None = None
    pos: Pos = _pos()

    def __str__(self) -> str:
        if self.kind == "==":
            return "=="
        return self.kind


@dataclass(frozen=True)
class EMeta:
    """A quantified metavariable of a claim, with the calculus and sort it ranges over."""

    name: str
    calculus: str
    sort: str
    pos: Pos = _pos()


@dataclass(frozen=True)
class ECall:
    """A translation function applied in a claim: ``cps(M)``, ``tk(M, N)``."""

    translation: str
    fn: str
    args: tuple[Expr, ...]
    calculus: str  # the calculus of the result
    sort: str  # the result sort
    pos: Pos = _pos()


@dataclass(frozen=True)
class ESubst:
    """``A[x := B, y := C]`` in a claim: simultaneous capture-avoiding substitution for
    the names metavariables ``x``, ``y`` (quantified over names) in the value of ``A``."""

    body: Expr
    pairs: tuple[tuple[EMeta, Expr], ...]
    pos: Pos = _pos()

    @property
    def calculus(self) -> str:
        return self.body.calculus

    @property
    def sort(self) -> str:
        return self.body.sort


Expr = Union[EMeta, ECall, ESubst]


@dataclass(frozen=True)
class Atom:
    left: Expr
    relation: Relation | None  # None for a membership atom
    right: Expr | None = None
    member_of: tuple[str, str] | None = None  # (calculus, sort) for ``A : S``
    pos: Pos = _pos()


@dataclass(frozen=True)
class Implies:
    premise: Atom
    conclusion: Atom
    pos: Pos = _pos()


@dataclass(frozen=True)
class Confluent:
    calculus: str
    group: str | None = None
    pos: Pos = _pos()


@dataclass(frozen=True)
class Terminating:
    calculus: str
    group: str | None = None
    pos: Pos = _pos()


@dataclass(frozen=True)
class Shorthand:
    """``galois(F, G)``, ``reflection(F, G)`` or ``isomorphism(F, G)``."""

    kind: str
    forward: str  # a translation
    backward: str
    pos: Pos = _pos()


Formula = Union[Atom, Implies, Confluent, Terminating, Shorthand]


@dataclass(frozen=True)
class Bounds:
    size: int | None = None
    steps: int | None = None
    names: int | None = None
    nodes: int | None = None

    def over(self, base: Bounds) -> Bounds:
        """These bounds where set, ``base`` elsewhere (the precedence of §7)."""
        return Bounds(
            self.size if self.size is not None else base.size,
            self.steps if self.steps is not None else base.steps,
            self.names if self.names is not None else base.names,
            self.nodes if self.nodes is not None else base.nodes,
        )

    def as_dict(self) -> dict[str, int | None]:
        return {"size": self.size, "steps": self.steps, "names": self.names, "nodes": self.nodes}


DEFAULT_BOUNDS = Bounds(size=6, steps=10, names=1, nodes=20000)


@dataclass(frozen=True)
class Claim:
    name: str
    formula: Formula
    quantified: tuple[EMeta, ...]  # in order of first occurrence
    text: str  # the formula as written
    within: Bounds = Bounds()
    file: str = ""
    pos: Pos = _pos()
    lemma: bool = False  # a `lemma` item: a claim that later proofs may use
    needs: tuple[str, ...] = ()  # the lemmas it names with `needs`


def functions_named(translations: dict[str, Translation], fn: str
                    ) -> list[tuple[Translation, str]]:
    """Where a claim's ``fn(...)`` can point: (translation, function) pairs.

    A translation's own name means its entry function and wins; otherwise
    every translation that defines a function ``fn``.
    """
    tr = translations.get(fn)
    if tr is not None:
        return [(tr, tr.entry)]
    return [(t, fn) for t in translations.values() if fn in t.signatures]


@dataclass(frozen=True)
class Spec:
    """Everything one rule file and its includes declare."""

    file: str
    calculi: dict[str, Calculus]
    translations: dict[str, Translation]
    claims: tuple[Claim, ...]
    bounds: Bounds = Bounds()  # the file's `bounds` line (over the defaults)
    files: tuple[str, ...] = ()
    file_bounds: dict[str, Bounds] = field(default_factory=dict)  # each file's `bounds` line

    def effective_bounds(self, *layers: Bounds) -> Bounds:
        """Command line over ``within`` over the file over the defaults: pass the
        layers highest first."""
        b = self.bounds.over(DEFAULT_BOUNDS)
        for layer in reversed(layers):
            b = layer.over(b)
        return b

    def claim_bounds(self, claim: Claim, command_line: Bounds = Bounds()) -> Bounds:
        """A claim's bounds: command line over its `within` over the `bounds` line of the file
        it was written in (an included file's own) over the defaults."""
        own = self.file_bounds.get(claim.file, self.bounds)
        return command_line.over(claim.within.over(own.over(DEFAULT_BOUNDS)))

    def functions_named(self, fn: str) -> list[tuple[Translation, str]]:
        return functions_named(self.translations, fn)

    def is_empty(self) -> bool:
        return not (self.calculi or self.translations or self.claims)
