"""The first-order view of a rule set, for termination proofs.

A rule set whose right-hand sides use no substitution is read as a
first-order term rewriting system: every constructor is a function symbol of
its own arity (an argument under binders is just an argument), every name —
free or bound, in a pattern or in a term — is one constant :data:`NAME`, and
every metavariable is a variable (its sort is forgotten).  The map ``phi``
that sends a term to this view (drop the binders, send each name to
:data:`NAME`) turns every step ``s -> t`` of the calculus into a step
``phi(s) -> phi(t)`` of the view: matching with binders, α-equality of the
repeated metavariables of a non-left-linear rule and the instantiation of
the right-hand side all commute with ``phi``, and a step under a binder is a
step in an argument.  So a terminating view proves the calculus terminating.
Conditions (``x fresh in P``) and ``reduce in E`` only remove steps, so they
are ignored.  Not taken: a substitution ``P[x := Q]`` on a right-hand side
(``phi`` would have to see the substituted term) and a context ``E[P]`` on a
left-hand side (its instances have unbounded depth); :func:`view` says why.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from calcscout.rules.core.spec import Calculus, PAbs, Pattern, PCall, PCon, PMeta, PName, PPlug, PSubst

#: The constant every object name (free or bound) becomes.
NAME = "#name"


@dataclass(frozen=True)
class Var:
    name: str

    def __str__(self) -> str:
        return self.name


@dataclass(frozen=True)
class App:
    fn: str
    args: tuple[FTerm, ...] = ()
    _hash: int = field(default=0, compare=False, repr=False)

    def __post_init__(self) -> None:
        object.__setattr__(self, "_hash", hash((self.fn, self.args)))

    def __hash__(self) -> int:
        return self._hash

    def __str__(self) -> str:
        if not self.args:
            return self.fn
        return f"{self.fn}({', '.join(str(a) for a in self.args)})"


FTerm = Var | App


@dataclass(frozen=True)
class FRule:
    name: str
    lhs: FTerm
    rhs: FTerm

    def __str__(self) -> str:
        return f"{self.lhs} -> {self.rhs}"


@dataclass(frozen=True)
class FSystem:
    """A first-order rewriting system and its signature (symbol -> arity)."""

    rules: tuple[FRule, ...]
    signature: dict[str, int]


def variables(t: FTerm) -> list[str]:
    """The variables of ``t`` with repetitions, left to right."""
    if isinstance(t, Var):
        return [t.name]
    return [v for a in t.args for v in variables(a)]


def subterms(t: FTerm) -> list[FTerm]:
    """Every subterm of ``t``, ``t`` first."""
    out = [t]
    if isinstance(t, App):
        for a in t.args:
            out.extend(subterms(a))
    return out


def symbols(t: FTerm) -> set[str]:
    return {s.fn for s in subterms(t) if isinstance(s, App)}


class NotFirstOrder(Exception):
    """A rule the first-order view does not take (the message says why)."""


def _convert(p: Pattern, side: str) -> FTerm:
    if isinstance(p, PMeta):
        return Var(p.name)
    if isinstance(p, PName):
        return App(NAME)
    if isinstance(p, PAbs):
        return _convert(p.body, side)
    if isinstance(p, PCon):
        return App(p.con, tuple(_convert(a, side) for a in p.args))
    if isinstance(p, PSubst):
        raise NotFirstOrder("a substitution on the right-hand side")
    if isinstance(p, PPlug):
        raise NotFirstOrder(f"a context {p.context.name}[...] on the {side}-hand side")
    if isinstance(p, PCall):
        raise NotFirstOrder("a translation call")
    raise NotFirstOrder(f"unexpected pattern {p!r}")


def view(calc: Calculus, group: str | None = None) -> tuple[FSystem | None, str | None]:
    """``(system, None)``, or ``(None, why)`` when some rule is not taken.

    The signature is every constructor of the calculus and :data:`NAME`, so
    that an order found for it covers every term of the calculus.
    """
    rules = []
    for r in calc.rules_of(group):
        try:
            lhs = _convert(r.lhs, "left")
            rhs = _convert(r.rhs, "right")
        except NotFirstOrder as e:
            return None, f"rule {r.name} has {e}"
        if isinstance(lhs, Var):
            return None, f"rule {r.name} has a bare metavariable as its left-hand side"
        extra = set(variables(rhs)) - set(variables(lhs))
        if extra:
            return None, f"rule {r.name} has {sorted(extra)[0]} on the right only"
        rules.append(FRule(r.name, lhs, rhs))
    sig = {c: s.arity for c, s in calc.shapes.items()}
    sig[NAME] = 0
    return FSystem(tuple(rules), sig), None
