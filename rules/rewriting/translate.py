"""Applying a translation to a term (LANGUAGE.md §5).

Equations are tried in order and the first whose pattern matches applies;
the right-hand side is built in the target calculus with calls evaluated
recursively.  Binders opened by matching and fresh binders of the right-hand
side are internal names that are closed again, so nothing is captured.
Results are memoised per (function, interned term, extra arguments), the recent ones.

A translation with ``then normalize GROUP`` gives, for a call from outside
(a claim, the command line), the unique normal form under the target's group
of what the equations built; when there is none within the bounds, or more
than one, the translation is undefined there and :class:`Undefined` says why.

>>> from calcscout.rules.loading.load import load_text
>>> spec = load_text('''
... calculus c { names var x y
...   sort term M N ::= x | lam(x.M) | app(M, N) }
... translation dup : c -> c { dup : term -> term
...   dup(x) = x
...   dup(lam(x.M)) = lam(x. dup(M))
...   dup(app(M, N)) = app(dup(M), app(dup(N), dup(N))) }''')
>>> from calcscout.rules.notation.notation import parse_term, print_abstract
>>> c = spec.calculi["c"]
>>> print_abstract(c, Translator(spec, spec.translations["dup"]).apply("dup", parse_term(c, "app(x, y)")))
'app(x, app(y, y))'
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

from calcscout.rules.core.errors import CalcError
from calcscout.rules.core.spec import Bounds, Calculus, Pos, Spec, Translation
from calcscout.rules.core.terms import Term, is_internal
from calcscout.rules.rewriting.instantiate import build
from calcscout.rules.rewriting.match import match
from calcscout.rules.rewriting.rewrite import normal_forms, reduction_graph

#: Entries per generation of a translator's memo tables (see :class:`_Memo`).
MEMO_LIMIT = 16_384


class _Memo:
    """A memo table that forgets what was not used lately: two generations of at most
    ``limit`` entries each; a hit in the old one moves the entry to the young one, and a
    full young generation becomes the old one (the older is dropped).

    An entry keeps its term and result alive, and with them their intern-table and
    sort-automaton entries: a table that only cleared itself at half a million entries
    held some 1.4 GB on an enumeration at size 11 (tests/bench/bench_claims.py measures
    it).  Enumeration meets the same small subterms over and over, so the recent ones
    are the ones worth keeping.
    """

    __slots__ = ("young", "old", "limit")

    def __init__(self, limit: int):
        self.young: dict = {}
        self.old: dict = {}
        self.limit = limit

    def get(self, key):
        got = self.young.get(key)
        if got is None:
            got = self.old.get(key)
            if got is not None:
                self.put(key, got)
        return got

    def put(self, key, value) -> None:
        if len(self.young) >= self.limit:
            self.old = self.young
            self.young = {}
        self.young[key] = value

    def __len__(self) -> int:
        return len(self.young) + len(self.old)


class TranslationFailure(CalcError):
    """A translation function failed on a term at run time: no equation matches it (a missing
    case), or an equation let a bound name escape."""

    def __init__(self, tr: Translation, fn: str, term_text: str, why: str | None = None,
                 hint: str | None = None, pos: Pos | None = None):
        super().__init__(
            f"translation {tr.name}: " + (why or f"no equation of {fn} matches {term_text}"),
            pos,
            hint=hint or "the term may lie outside the parameter sort of "
            f"{fn} ({tr.signatures[fn].params[0]}); add an equation or narrow the claim",
        )
        self.translation = tr
        self.fn = fn


@dataclass(frozen=True)
class Undefined:
    """Normalisation after the translation failed: ``reason`` is 'no-normal-form' (a bound cut
    the search: ``cut_by``) or 'several-normal-forms' (``normal_forms`` lists them)."""

    reason: str
    built: Term
    normal_forms: tuple[Term, ...] = ()
    cut_by: str | None = None


class Translator:
    """Applies the functions of one translation; one memo table per translator."""

    def __init__(self, spec: Spec, tr: Translation, bounds: Bounds | None = None):
        self.spec = spec
        self.tr = tr
        self.source: Calculus = spec.calculi[tr.source]
        self.target: Calculus = spec.calculi[tr.target]
        self.bounds = spec.effective_bounds(bounds or Bounds())
        self._memo = _Memo(MEMO_LIMIT)  # (function, term, extra arguments) -> result
        self._norm = _Memo(MEMO_LIMIT)  # built term -> its normal form, or Undefined
        self._by_fn = {fn: tr.equations_of(fn) for fn in tr.signatures}

    # ------------------------------------------------------------ equations

    def build(self, fn: str, term: Term, extra: Sequence[Term] = ()) -> Term:
        """What the equations build (before any normalisation)."""
        extra = tuple(extra)
        key = (fn, term, extra)
        got = self._memo.get(key)
        if got is not None:
            return got
        avoid = {n for e in extra for n in e.free}
        for eq in self._by_fn[fn]:
            for binding in match(self.source, eq.pattern, term, avoid=avoid):
                for p, v in zip(eq.extra, extra, strict=True):
                    binding[p.name] = v
                result = build(self.target, eq.rhs, binding, self._call)
                if result.free and any(is_internal(n) for n in result.free):
                    self._check_escape(eq, term, result, avoid)
                self._memo.put(key, result)
                return result
        from calcscout.rules.notation.notation import print_abstract

        raise TranslationFailure(self.tr, fn, print_abstract(self.source, term))

    def _check_escape(self, eq, term: Term, result: Term, avoid: set[str]) -> None:
        """A name this equation's match opened must not survive into its result."""
        from calcscout.rules.notation.notation import print_abstract

        outside = set(term.free) | avoid
        escaped = [n for n in result.free if is_internal(n) and n not in outside]
        if escaped:
            raise TranslationFailure(
                self.tr, eq.fn, print_abstract(self.source, term),
                f"the equation at line {eq.pos.line} lets a bound name of "
                f"{print_abstract(self.source, term)} escape into its result",
                "translate the metavariable under a binder for that name again, or add "
                "equations that map such names away", eq.pos)

    def _call(self, fn: str, args: Sequence[Term]) -> Term:
        return self.build(fn, args[0], args[1:])

    # ------------------------------------------------------------ from outside

    def apply(self, fn: str, term: Term, extra: Sequence[Term] = ()) -> Term:
        """The translation's result; raises :class:`NormalizeError` where it is undefined."""
        got = self.apply_or_undefined(fn, term, extra)
        if isinstance(got, Undefined):
            raise NormalizeError(self, got)
        return got

    def apply_or_undefined(self, fn: str, term: Term, extra: Sequence[Term] = ()) -> Term | Undefined:
        built = self.build(fn, term, extra)
        if self.tr.normalize is None:
            return built
        return self.normalize(built)

    def normalize(self, built: Term) -> Term | Undefined:
        got = self._norm.get(built)
        if got is not None:
            return got
        b = self.bounds
        assert b.steps is not None and b.nodes is not None
        graph = reduction_graph(self.target, built, b.steps, b.nodes, self.tr.normalize)
        nfs = normal_forms(graph)
        result: Term | Undefined
        if len(nfs) > 1:
            result = Undefined("several-normal-forms", built, tuple(nfs))
        elif not graph.graph["complete"]:
            result = Undefined("no-normal-form", built, tuple(nfs), graph.graph["cut_by"])
        elif not nfs:
            result = Undefined("no-normal-form", built, (), "cycle")
        else:
            result = nfs[0]
        self._norm.put(built, result)
        return result


class NormalizeError(CalcError):
    exit_code = 3

    def __init__(self, translator: Translator, why: Undefined):
        from calcscout.rules.notation.notation import print_term

        tr = translator.tr
        calc = translator.target
        shown = print_term(calc, why.built)
        if why.reason == "several-normal-forms":
            forms = ", ".join(print_term(calc, t) for t in why.normal_forms[:3])
            msg = (f"translation {tr.name} is undefined here: group {tr.normalize} of "
                   f"{calc.name} reaches several normal forms from {shown}: {forms}")
            hint = f"the rules of group {tr.normalize} are not confluent"
        elif why.cut_by == "cycle":
            msg = (f"translation {tr.name} is undefined here: group {tr.normalize} of {calc.name} "
                   f"has no normal form from {shown} (every path cycles)")
            hint = f"the rules of group {tr.normalize} do not terminate"
        else:
            msg = (f"translation {tr.name} is undefined here: no normal form under group "
                   f"{tr.normalize} within the bound on {why.cut_by} from {shown}")
            hint = f"raise --{why.cut_by}"
        super().__init__(msg, hint=hint)
        self.why = why
