"""Deciding ``confluent C`` and ``terminating C`` (LANGUAGE.md §6, §8).

``confluent C``
  - *proved for all terms* where a published theorem applies, its side
    conditions checked (:func:`confluence_theorem`): an orthogonal system is
    confluent (Rosen 1973 for first-order systems, Klop 1980 for systems with
    binders); a left-linear system whose critical pairs are all
    parallel-closed is confluent (Huet 1980; van Oostrom 1997 with binders);
  - otherwise checked case by case: every term of every sort up to ``size``
    with at most ``names`` free names, smallest first.  A case fails
    definitely when its reduction graph reaches two distinct normal forms, or
    two terms whose complete graphs share none (two bottom strongly connected
    components that no bound cut); it is undecided when a bound cut the
    graph before that could be settled.  When no case fails, the critical
    pairs are tried on instances (:mod:`calcscout.rules.critical_pairs.critical`): a concrete peak
    whose two reducts do not join is a counterexample too (this is what
    catches a failure that needs a term larger than ``size``).

``terminating C``
  case by case as well: a reduction cycle reachable from the term fails it
  definitely; a graph cut by ``steps`` or ``nodes`` leaves it undecided; a
  complete acyclic graph settles it.

Every counterexample is re-checked on a fresh copy of the calculus (so no
memo table of the search is reused) before it is reported.
"""

from __future__ import annotations

import dataclasses
import time
from collections import Counter as Tally
from dataclasses import dataclass

import networkx as nx

from calcscout.obligations.verdict import HOLDS, INCONCLUSIVE, REFUTED, Counterexample, Verdict
from calcscout.rules.core.enumerate import enumerate_terms
from calcscout.rules.core.sorts import grammar
from calcscout.rules.core.spec import (
    Bounds,
    Calculus,
    Confluent,
    PAbs,
    Pattern,
    PCon,
    PMeta,
    PName,
    PPlug,
    Rule,
    Spec,
    Terminating,
)
from calcscout.rules.core.terms import Term
from calcscout.rules.critical_pairs import critical
from calcscout.rules.notation.notation import print_abstract
from calcscout.rules.rewriting.rewrite import (
    Graph,
    find_cycle,
    join,
    normal_forms,
    path_steps,
    paused_gc,
    position_text,
    reaches,
    reduction_graph,
    reducts,
)

# ---------------------------------------------------------------- the claim


@dataclass(frozen=True)
class _Target:
    name: str
    file: str
    text: str
    calc: Calculus
    group: str | None


def _target(spec: Spec, what, kind: type) -> _Target:
    """Accept an obligation, a claim, a formula, a calculus or its name."""
    name, file, text = "", spec.file, ""
    formula = what
    if hasattr(what, "formula") and hasattr(what, "claim"):  # an Obligation
        name, file, text = what.name, what.claim.file or spec.file, what.text
        formula = what.formula
    elif hasattr(what, "formula"):  # a Claim
        name, file, text = what.name, what.file or spec.file, what.text
        formula = what.formula
    if isinstance(formula, Calculus):
        return _Target(name or formula.name, file, text, formula, None)
    if isinstance(formula, str):
        formula = kind(formula)
    if not isinstance(formula, kind):
        raise TypeError(f"not a {kind.__name__} claim: {formula!r}")
    calc = spec.calculi[formula.calculus]
    word = "confluent" if kind is Confluent else "terminating"
    shown = formula.calculus + (f".{formula.group}" if formula.group else "")
    return _Target(name or f"{word} {shown}", file, text or f"{word} {shown}", calc,
                   formula.group)


def _bounds(b: Bounds) -> Bounds:
    for k in ("size", "steps", "nodes"):
        v = getattr(b, k)
        if v is None or v < 1:
            raise ValueError(f"bound {k} must be at least 1, not {v}")
    if b.names is None or b.names < 0:
        raise ValueError(f"bound names must be at least 0, not {b.names}")
    return b


# ---------------------------------------------------------------- cases


def case_terms(calc: Calculus, bounds: Bounds):
    """Every term of every (non-context) sort, by increasing size, each once:
    a term of several sorts is taken with the first of them, and a sort
    included in an earlier one is skipped."""
    g = grammar(calc)
    sorts = [s for s in g.sort_names if not g.is_empty(s)]
    sorts.sort(key=lambda s: -len(g.states_with(s)))
    kept: list[str] = []
    for s in sorts:
        if not any(g.included(s, k) for k in kept):
            kept.append(s)
    for n in range(1, bounds.size + 1):
        for i, s in enumerate(kept):
            for t in enumerate_terms(calc, s, n, bounds.names, min_size=n):
                if i and any(k in g.state(t) for k in kept[:i]):
                    continue
                yield t


def _settled(g: Graph, t: Term) -> bool:
    d = g.nodes[t]
    return bool(d.get("expanded")) and not d.get("cut")


def bottom_components(g: Graph) -> list[list[Term]]:
    """The bottom strongly connected components no bound cut: from one of them
    nothing else is reachable, in any graph however large.  In BFS order."""
    order = {t: i for i, t in enumerate(g.nodes)}
    out = []
    for comp in nx.strongly_connected_components(g):
        if all(_settled(g, t) for t in comp) and \
                not any(s not in comp for t in comp for s in g.successors(t)):
            out.append(sorted(comp, key=order.__getitem__))
    out.sort(key=lambda c: order[c[0]])
    return out


def _path_text(calc: Calculus, g: Graph, target: Term) -> str:
    path = reaches(g, target)
    assert path is not None
    steps = path_steps(g, path)
    if not steps:
        return print_abstract(calc, path[0])
    parts = [print_abstract(calc, path[0])]
    for s in steps:
        parts.append(f"->[{s.rule} at {s.where}] {print_abstract(calc, s.result)}")
    return " ".join(parts)


# ---------------------------------------------------------------- re-checks


def _fresh(calc: Calculus) -> Calculus:
    """A copy of the calculus: the rewriting engine's memo tables are per
    calculus object, so a re-check on the copy recomputes everything."""
    return dataclasses.replace(calc)


def _recheck_fork(calc: Calculus, group, t: Term, a: Term, b: Term, bounds: Bounds) -> bool:
    c = _fresh(calc)
    g = reduction_graph(c, t, bounds.steps, bounds.nodes, group)
    if a not in g or b not in g:
        return False
    j = join(c, a, b, max(bounds.steps, g.number_of_nodes()), bounds.nodes, group)
    return j.status == "not-joinable"


def _recheck_peak(calc: Calculus, group, t: Term, a: Term, b: Term, bounds: Bounds) -> bool:
    c = _fresh(calc)
    results = {s.result for s in reducts(c, t, group)}
    if a not in results or b not in results:
        return False
    return join(c, a, b, bounds.steps, bounds.nodes, group).status == "not-joinable"


def _recheck_cycle(calc: Calculus, group, t: Term, cycle: list[Term], bounds: Bounds) -> bool:
    c = _fresh(calc)
    g = reduction_graph(c, t, bounds.steps, bounds.nodes, group)
    if cycle[0] not in g:
        return False
    for x, y in zip(cycle, cycle[1:] + cycle[:1], strict=True):
        if y not in {s.result for s in reducts(c, x, group)}:
            return False
    return True


# ---------------------------------------------------------------- theorems


def _lhs_ok(calc: Calculus, rule: Rule, full: set[str]) -> str | None:
    """Why ``rule``'s left-hand side breaks the hypotheses of the orthogonality
    theorems, or None: they are about left-linear pattern rules over
    unrestricted metavariables in the compatible closure."""
    metas: list[str] = []
    problem: list[str] = []

    def walk(p: Pattern, above: frozenset[str]) -> None:
        if isinstance(p, PMeta):
            metas.append(p.name)
            if p.sort not in full:
                problem.append(f"metavariable {p.name} ranges over sort {p.sort}, not every term")
        elif isinstance(p, PName):
            if p.name not in above:
                problem.append(f"name {p.name} is matched as a free name")
        elif isinstance(p, PAbs):
            walk(p.body, above | set(p.names))
        elif isinstance(p, PCon):
            for a in p.args:
                walk(a, above)
        elif isinstance(p, PPlug):
            problem.append(f"context {p.context.name} in the left-hand side")

    walk(rule.lhs, frozenset())
    if problem:
        return problem[0]
    repeated = [m for m in dict.fromkeys(metas) if metas.count(m) > 1]
    if repeated:
        return f"not left-linear ({repeated[0]} occurs twice)"
    binders = _binders(rule.lhs)
    for c in rule.conditions:
        if c.kind != "fresh" or c.name.name not in binders:
            return f"condition `{c.name.name} {c.kind} in ...` is not a pattern restriction"
    return None


def _binders(p: Pattern) -> set[str]:
    if isinstance(p, PAbs):
        return set(p.names) | _binders(p.body)
    if isinstance(p, PCon):
        return {n for a in p.args for n in _binders(a)}
    return set()


def confluence_theorem(calc: Calculus, group: str | None = None) -> tuple[str | None, str | None]:
    """``(reason, None)`` when a published theorem proves ``calc`` (its
    ``group``) confluent, with its side conditions checked; otherwise
    ``(None, why_not)``.

    The hypotheses checked: the compatible closure (``reduce anywhere``);
    left-hand sides without contexts, left-linear, every metavariable over a
    sort of every term (a restricted sort could be left by a reduct or a
    substitution, destroying a redex) and every name bound by the left-hand
    side; conditions only ``x fresh in T`` for such a name (which is the
    pattern's own restriction, ``T``'s metavariables not seeing ``x``).  Then
    orthogonality (no critical pair) or parallel-closed critical pairs.  For
    systems with binders the parallel-closed case rests on van Oostrom's
    development-closed theorem for pattern rewriting (recalled from memory:
    V. van Oostrom, "Developing developments", TCS 175, 1997), a parallel step
    being a development of disjoint redexes.

    >>> from calcscout.rules.loading.load import load_text
    >>> calc = load_text('''calculus c { sort t M N ::= a | b | f(M)
    ...   rule r1: f(a) -> b
    ...   rule r2: a -> b }''').calculi["c"]
    >>> confluence_theorem(calc)[1]
    'critical pair of r1 and r2 at 0 is not parallel-closed'
    """
    if calc.reduce_in is not None:
        return None, f"reduction only in context {calc.reduce_in}, not the compatible closure"
    g = grammar(calc)
    every = set(g.reachable)
    full = {s for s in g.sort_names if set(g.states_with(s)) == every}
    rules = calc.rules_of(group)
    for r in rules:
        why = _lhs_ok(calc, r, full)
        if why is not None:
            return None, f"rule {r.name}: {why}"
    ov = critical.overlaps(calc, group)
    if ov.dropped:
        return None, "some overlap's sides could not be computed symbolically"
    first_order = all(not any(s.binders) for s in calc.shapes.values())
    if not ov.pairs:
        if first_order:
            return ("orthogonal (left-linear, no critical pairs): confluent by Rosen, "
                    "'Tree-manipulating systems and Church-Rosser theorems', J. ACM 1973"), None
        return ("orthogonal (left-linear pattern rules, no critical pairs): confluent by Klop, "
                "'Combinatory reduction systems', 1980"), None
    closed = [p for p in ov.pairs if not ov.parallel_closed(p)]
    if not closed:
        n = len(ov.pairs)
        text = (f"left-linear and each of its {n} critical pair(s) is parallel-closed: "
                "confluent by Huet, 'Confluent reductions', J. ACM 1980")
        if not first_order:
            text += ("; with binders, by van Oostrom, 'Developing developments', "
                     "TCS 1997 (development-closed pattern rewriting)")
        return text, None
    p = closed[0]
    return None, (f"critical pair of {p.outer} and {p.inner} at {p.where} is not "
                  "parallel-closed")


# ---------------------------------------------------------------- confluent


def decide_confluent(spec: Spec, what, bounds: Bounds, prove: bool = True) -> Verdict:
    """The verdict on ``confluent C`` (``what``: an obligation, a claim, a
    :class:`~calcscout.rules.core.spec.Confluent` formula, a calculus or its name).

    With ``prove`` False the theorems are not tried (the bounded search alone).
    """
    start = time.perf_counter()
    tg = _target(spec, what, Confluent)
    b = _bounds(bounds)
    calc, group = tg.calc, tg.group

    def verdict(v: str, **kw) -> Verdict:
        return Verdict(tg.name, tg.file, tg.text, v, b,
                       seconds=time.perf_counter() - start, **kw)

    notes: list[str] = []
    if prove:
        reason, why_not = confluence_theorem(calc, group)
        if reason is not None:
            return verdict(HOLDS, scope="all", reason=reason)
        notes.append(f"no theorem applies: {why_not}")
    tried = 0
    undecided = 0
    cuts: Tally[str] = Tally()
    for t in case_terms(calc, b):
        tried += 1
        with paused_gc():
            g = reduction_graph(calc, t, b.steps, b.nodes, group)
            fork = _fork(g)
        if fork is not None:
            a, c, evidence = fork
            if _recheck_fork(calc, group, t, a, c, b):
                ce = Counterexample(t.size, {"term": print_abstract(calc, t),
                                             "left": print_abstract(calc, a),
                                             "right": print_abstract(calc, c)},
                                    f"{evidence}: {_path_text(calc, g, a)}; "
                                    f"{_path_text(calc, g, c)}")
                return verdict(REFUTED, tried=tried, undecided=undecided,
                               cut_by=_most(cuts), counterexample=ce, notes=notes)
            notes.append(f"a fork from {print_abstract(calc, t)} did not survive the re-check")
        if not g.graph["complete"]:
            undecided += 1
            cuts[g.graph["cut_by"]] += 1
    # The critical pairs on instances: a failure that needs a larger term.
    ov = critical.overlaps(calc, group)
    found = []
    for p in ov.pairs:
        j = ov.joinability(p, b)
        if j.status == "not-joinable" and j.instance is not None:
            found.append((j.instance[0].size, p, j.instance))
    for _, p, (peak, left, right) in sorted(found, key=lambda x: x[0]):
        if _recheck_peak(calc, group, peak, left, right, b):
            ce = Counterexample(peak.size, {"term": print_abstract(calc, peak),
                                            "left": print_abstract(calc, left),
                                            "right": print_abstract(calc, right)},
                                f"critical pair of {p.outer} and {p.inner} at {p.where}: "
                                f"{p.show(p.peak)} -> {p.show(p.left)} and -> "
                                f"{p.show(p.right)}; on this instance the two reducts "
                                "have complete reduction graphs that share no term")
            return verdict(REFUTED, tried=tried, undecided=undecided, cut_by=_most(cuts),
                           counterexample=ce, notes=notes)
    if ov.uses_contexts:
        notes.append(f"critical pairs: contexts unfolded to depth {ov.context_depth}")
    if undecided:
        return verdict(INCONCLUSIVE, tried=tried, undecided=undecided, cut_by=_most(cuts),
                       notes=notes)
    return verdict(HOLDS, tried=tried, notes=notes)


def _fork(g: Graph) -> tuple[Term, Term, str] | None:
    """Two terms of the graph that can never join, or None."""
    nfs = normal_forms(g)
    if len(nfs) >= 2:
        return nfs[0], nfs[1], "two distinct normal forms"
    bottoms = bottom_components(g)
    if len(bottoms) >= 2:
        return bottoms[0][0], bottoms[1][0], \
            "two terms whose reduction graphs are complete and share no term"
    return None


def _most(cuts: Tally[str]) -> str | None:
    if not cuts:
        return None
    return cuts.most_common(1)[0][0]


# ---------------------------------------------------------------- terminating


def decide_terminating(spec: Spec, what, bounds: Bounds) -> Verdict:
    """The verdict on ``terminating C`` (``what`` as for :func:`decide_confluent`)."""
    start = time.perf_counter()
    tg = _target(spec, what, Terminating)
    b = _bounds(bounds)
    calc, group = tg.calc, tg.group
    tried = 0
    undecided = 0
    cuts: Tally[str] = Tally()
    notes: list[str] = []
    for t in case_terms(calc, b):
        tried += 1
        with paused_gc():
            g = reduction_graph(calc, t, b.steps, b.nodes, group)
            cycle = find_cycle(g)
        if cycle is not None:
            if _recheck_cycle(calc, group, t, cycle, b):
                shown = [print_abstract(calc, c) for c in cycle]
                around = [shown[0]]
                for x, y, text in zip(cycle, cycle[1:] + cycle[:1], shown[1:] + shown[:1],
                                      strict=True):
                    e = g.edges[x, y]
                    around.append(f"->[{e['rule']} at {position_text(e['position'])}] {text}")
                ce = Counterexample(t.size, {"term": print_abstract(calc, t), "cycle": shown},
                                    f"{_path_text(calc, g, cycle[0])}, and then the reduction "
                                    f"cycle {' '.join(around)}")
                return Verdict(tg.name, tg.file, tg.text, REFUTED, b, tried=tried,
                               undecided=undecided, cut_by=_most(cuts), counterexample=ce,
                               seconds=time.perf_counter() - start, notes=notes)
            notes.append(f"a cycle from {print_abstract(calc, t)} did not survive the re-check")
        if not g.graph["complete"]:
            undecided += 1
            cuts[g.graph["cut_by"]] += 1
    v = INCONCLUSIVE if undecided else HOLDS
    return Verdict(tg.name, tg.file, tg.text, v, b, tried=tried, undecided=undecided,
                   cut_by=_most(cuts), seconds=time.perf_counter() - start, notes=notes)
