"""Which rules and equations a refuted claim's failure depends on (``check --culprits``).

Two answers, both about one refuted relational obligation:

- **used**: the rules and translation equations the counterexample's evidence
  uses, recomputed on that one counterexample (the enumeration's loop is not
  instrumented): the rules by which the premise steps from ``M`` to ``N``;
  every rule that labels a step of the reduction graphs the conclusion
  explores (from its left side, and from both sides of ``joins``), within the
  claim's bounds; every equation that fires while the claim's translations are
  computed on the counterexample's terms.  Rules are named ``CALC.RULE``,
  equations ``TRANSLATION: FN(PATTERN)`` as written.  For ``confluent``: the
  rules that step from the peak; for ``terminating``: the rules of the cycle.
- **at_redex** (a claim with a premise ``M -> N``): the equations that
  translated the redex of the premise's step.  A smallest counterexample has
  little else in it, so these are the first suspects: in a ``mono`` part they
  are the equations whose result the step does not carry over.
- **minimal**: a 1-minimal set of rules such that keeping only them still
  refutes the claim within the same bounds, found by delta debugging (Zeller
  and Hildebrandt, "Simplifying and isolating failure-inducing input", IEEE
  TSE 2002) over a rule list.  For ``M -> N implies ...`` the list is the
  premise's rules and only the premise's step is restricted (the conclusion
  keeps every rule, so a rule the conclusion needs is never blamed for its
  absence); for a claim without premise, and for ``confluent`` and
  ``terminating``, it is the rules of the relation's calculus, dropped from
  the whole calculus.  "1-minimal": dropping any one rule of the set repairs
  the claim within the bounds; a smaller set of other rules may exist.  An
  empty set means the failure needs no rule at all: it lies in the
  translations (see *used*).  A claim with ``==`` only gets no minimal set.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable, Sequence
from typing import Any

from calcscout.obligations.analysis.keys import term_calculi
from calcscout.obligations.claims import Obligation
from calcscout.obligations.engines import enumeration
from calcscout.obligations.verdict import REFUTED, Counterexample, Verdict
from calcscout.rules.core.spec import (
    Atom,
    Bounds,
    Calculus,
    Confluent,
    ECall,
    Equation,
    Expr,
    Implies,
    PAbs,
    Pattern,
    PCall,
    PCon,
    PMeta,
    PName,
    PPlug,
    PSubst,
    Rule,
    Spec,
    Terminating,
)
from calcscout.rules.core.terms import Node, Term
from calcscout.rules.notation.notation import parse_term
from calcscout.rules.rewriting.match import match
from calcscout.rules.rewriting.rewrite import reduction_graph, reducts
from calcscout.rules.rewriting.translate import Translator

# ---------------------------------------------------------------- names


def pattern_text(p: Pattern) -> str:
    """A pattern in abstract form, as a rule file writes it."""
    if isinstance(p, PMeta | PName):
        return p.name
    if isinstance(p, PAbs):
        return "".join(f"{n}." for n in p.names) + pattern_text(p.body)
    if isinstance(p, PCon):
        return f"{p.con}({', '.join(pattern_text(a) for a in p.args)})" if p.args else p.con
    if isinstance(p, PPlug):
        return f"{p.context.name}[{pattern_text(p.arg)}]"
    if isinstance(p, PSubst):
        pairs = ", ".join(f"{n.name} := {pattern_text(q)}" for n, q in p.pairs)
        return f"{pattern_text(p.body)}[{pairs}]"
    assert isinstance(p, PCall)
    return f"{p.fn}({', '.join(pattern_text(a) for a in p.args)})"


def rule_label(calc: Calculus, rule: str) -> str:
    return f"{calc.name}.{rule}"


def equation_label(translation: str, eq: Equation) -> str:
    args = [pattern_text(eq.pattern), *(m.name for m in eq.extra)]
    return f"{translation}: {eq.fn}({', '.join(args)})"


# ---------------------------------------------------------------- used


class _Tracing(Translator):
    """A translator that records the equation each call is answered by."""

    def __init__(self, spec: Spec, tr, bounds: Bounds, seen: dict[str, None]):
        super().__init__(spec, tr, bounds)
        self.seen = seen
        self.calls: list[tuple[Term, str]] = []  # (the term a call translated, its equation)

    def build(self, fn: str, term: Term, extra: Sequence[Term] = ()) -> Term:
        avoid = {n for e in extra for n in e.free}
        for eq in self._by_fn[fn]:  # the first equation that matches is the one applied
            if next(iter(match(self.source, eq.pattern, term, avoid=avoid)), None) is not None:
                label = equation_label(self.tr.name, eq)
                self.seen.setdefault(label, None)
                self.calls.append((term, label))
                break
        return super().build(fn, term, extra)


def case_terms(spec: Spec, ob: Obligation, ce: Counterexample) -> dict[str, Term]:
    """The counterexample's terms read back, by the text the claim writes."""
    calc_of = term_calculi(spec, ob)
    out: dict[str, Term] = {}
    for key, text in ce.terms.items():
        calc = calc_of.get(key)
        if calc is not None and isinstance(text, str):
            out[key] = parse_term(spec.calculi[calc], text, "<counterexample>")
    return out


def _subterm(t: Term, position: Sequence[int]) -> Term | None:
    """The subterm at ``position``, or None under a binder (its body has loose indices)."""
    for i in position:
        if not isinstance(t, Node) or t.binders[i]:
            return None
        t = t.args[i]
    return t


def used(spec: Spec, ob: Obligation, ce: Counterexample, bounds: Bounds
         ) -> tuple[list[str], list[str]]:
    """The rules and equations the evidence of ``ce`` uses (see the module's docstring), and
    the equations that translated the premise step's redex (empty without a premise, or when
    the redex lies under a binder)."""
    f = ob.formula
    assert isinstance(f, Atom | Implies)
    terms = case_terms(spec, ob, ce)
    rules: dict[str, None] = {}
    equations: dict[str, None] = {}
    tracers: dict[str, _Tracing] = {}

    def value(e: Expr) -> Term | None:
        if isinstance(e, ECall):
            args = [value(a) for a in e.args]
            if any(a is None for a in args):
                return None
            tr = tracers.get(e.translation)
            if tr is None:
                tr = _Tracing(spec, spec.translations[e.translation], bounds, equations)
                tracers[e.translation] = tr
            return tr.build(e.fn, args[0], args[1:])  # type: ignore[arg-type]
        return terms.get(e.name)

    redexes: list[Term] = []
    if isinstance(f, Implies):
        rel = f.premise.relation
        m, n = value(f.premise.left), value(f.premise.right)  # type: ignore[arg-type]
        if rel is not None and rel.calculus is not None and m is not None and n is not None:
            calc = spec.calculi[rel.calculus]
            for step in reducts(calc, m, rel.group):
                if step.result is n:
                    rules.setdefault(rule_label(calc, step.rule), None)
                    sub = _subterm(m, step.position)
                    if sub is not None:
                        redexes.append(sub)
        atom = f.conclusion
    else:
        atom = f
    left = value(atom.left)
    right = value(atom.right) if atom.right is not None else None
    rel = atom.relation
    if rel is not None and rel.calculus is not None and rel.kind != "==":
        calc = spec.calculi[rel.calculus]
        roots = [left, right] if rel.kind == "joins" else [left]
        assert bounds.steps is not None and bounds.nodes is not None
        for root in roots:
            if root is None:
                continue
            g = reduction_graph(calc, root, bounds.steps, bounds.nodes, rel.group)
            for _, _, data in g.edges(data=True):
                for rule, _pos in data["steps"]:
                    rules.setdefault(rule_label(calc, rule), None)
    at_redex: dict[str, None] = {}
    for tracer in tracers.values():
        for term, label in tracer.calls:
            if any(term is r for r in redexes):
                at_redex.setdefault(label, None)
    return [*rules, *equations], list(at_redex)


def used_rewriting(spec: Spec, ob: Obligation, ce: Counterexample) -> list[str]:
    """For ``terminating``: the rules of the cycle's steps; for ``confluent``: the rules of
    the two diverging reductions (every step from the peak to each side)."""
    f = ob.formula
    calc = spec.calculi[f.calculus]  # type: ignore[union-attr]
    group = f.group  # type: ignore[union-attr]
    read = {k: v for k, v in ce.terms.items()}
    rules: dict[str, None] = {}
    if isinstance(read.get("cycle"), list):
        cycle = [parse_term(calc, x, "<counterexample>") for x in read["cycle"]]
        for a, b in zip(cycle, cycle[1:] + cycle[:1], strict=True):
            for step in reducts(calc, a, group):
                if step.result is b:
                    rules.setdefault(rule_label(calc, step.rule), None)
    elif isinstance(read.get("term"), str):
        peak = parse_term(calc, read["term"], "<counterexample>")
        for step in reducts(calc, peak, group):
            rules.setdefault(rule_label(calc, step.rule), None)
    return list(rules)


# ---------------------------------------------------------------- minimal


def ddmin(items: Sequence[Any], fails: Callable[[list[Any]], bool]) -> list[Any]:
    """A 1-minimal sublist of ``items`` on which ``fails`` holds (Zeller and Hildebrandt
    2002, the ddmin algorithm), given that it holds on ``items``; the empty list first.

    >>> ddmin(list(range(8)), lambda s: 3 in s and 6 in s)
    [3, 6]
    >>> ddmin([1, 2, 3], lambda s: True)
    []
    """
    memo: dict[tuple, bool] = {}

    def test(s: list[Any]) -> bool:
        key = tuple(s)
        if key not in memo:
            memo[key] = fails(s)
        return memo[key]

    items = list(items)
    if test([]):
        return []
    n = 2
    while len(items) >= 2:
        size = -(-len(items) // n)
        chunks = [items[i:i + size] for i in range(0, len(items), size)]
        for c in chunks:
            if test(c):
                items, n = c, 2
                break
        else:
            for i in range(len(chunks)):
                rest = [x for j, c in enumerate(chunks) if j != i for x in c]
                if test(rest):
                    items, n = rest, max(n - 1, 2)
                    break
            else:
                if n >= len(items):
                    break
                n = min(len(items), 2 * n)
    return items


def culprit_calculus(ob: Obligation) -> str | None:
    """The calculus whose rules ``minimal`` ranges over: the premise's, else the relation's
    (for ``confluent`` and ``terminating``: the calculus itself)."""
    f = ob.formula
    if isinstance(f, Confluent | Terminating):
        return f.calculus
    rel = f.premise.relation if isinstance(f, Implies) else getattr(f, "relation", None)
    return rel.calculus if rel is not None else None


def with_rules(spec: Spec, calc: str, rules: Sequence[Rule]) -> Spec:
    """``spec`` with calculus ``calc`` keeping only ``rules``."""
    new = dataclasses.replace(spec.calculi[calc], rules=tuple(rules))
    return dataclasses.replace(spec, calculi={**spec.calculi, calc: new})


KEPT = "culprits(kept)"  # a group no rule file can name


def restrict(spec: Spec, ob: Obligation, rules: Sequence[Rule]) -> tuple[Spec, Obligation]:
    """The claim with only ``rules`` of the culprit calculus: on the premise side only for
    ``M -> N implies ...`` (the premise steps by these rules, the conclusion keeps every
    rule), in the whole calculus otherwise."""
    f = ob.formula
    if not isinstance(f, Implies):
        name = culprit_calculus(ob)
        assert name is not None
        return with_rules(spec, name, rules), ob
    rel = f.premise.relation
    assert rel is not None and rel.calculus is not None
    calc = spec.calculi[rel.calculus]
    keep = {r.name for r in rules}
    tagged = tuple(dataclasses.replace(r, groups=(*r.groups, KEPT)) if r.name in keep else r
                   for r in calc.rules)
    spec2 = dataclasses.replace(spec, calculi={**spec.calculi,
                                               calc.name: dataclasses.replace(calc, rules=tagged)})
    premise = dataclasses.replace(f.premise, relation=dataclasses.replace(rel, group=KEPT))
    return spec2, dataclasses.replace(ob, formula=Implies(premise, f.conclusion, f.pos))


def still_refuted(spec: Spec, ob: Obligation, bounds: Bounds) -> bool:
    """Whether the bounded check of ``ob`` (by the engine that decides it) finds a failure."""
    if isinstance(ob.formula, Confluent | Terminating):
        from calcscout.obligations.engines import confluence

        decide = (confluence.decide_terminating if isinstance(ob.formula, Terminating)
                  else confluence.decide_confluent)
        return decide(spec, ob, bounds).verdict == REFUTED
    return bool(enumeration.run_shard(spec, ob, bounds).failures)


def minimal(spec: Spec, ob: Obligation, bounds: Bounds) -> list[str] | None:
    """A 1-minimal set of rules of the culprit calculus that keeps ``ob`` refuted."""
    name = culprit_calculus(ob)
    if name is None:
        return None
    calc = spec.calculi[name]
    f = ob.formula
    group = f.premise.relation.group if isinstance(f, Implies) and f.premise.relation else None
    keep = ddmin(list(calc.rules_of(group)),
                 lambda rules: still_refuted(*restrict(spec, ob, rules), bounds))
    return [rule_label(calc, r.name) for r in keep]


# ---------------------------------------------------------------- the check command


def annotate(spec: Spec, verdicts: Sequence[Verdict], obligations: dict[str, Obligation],
             command_line: Bounds) -> None:
    """Add ``culprits`` to the details of every refuted relational counterexample."""
    for v in verdicts:
        ce = v.counterexample
        ob = obligations.get(v.name)
        if v.verdict != REFUTED or ce is None or ob is None or ob.normalizes is not None \
                or not isinstance(ob.formula, Atom | Implies | Confluent | Terminating):
            continue  # a normalize(T) part's failure is the translation's, not a rule set's
        bounds = spec.claim_bounds(ob.claim, command_line)
        found: dict[str, Any] = {}
        if isinstance(ob.formula, Atom | Implies):
            found["used"], at_redex = used(spec, ob, ce, bounds)
            if at_redex:
                found["at_redex"] = at_redex
        else:
            found["used"] = used_rewriting(spec, ob, ce)
        least = minimal(spec, ob, bounds)
        if least is not None:
            found["minimal"] = least
        ce.details["culprits"] = found
