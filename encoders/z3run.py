"""Solving an :class:`~calcscout.encoders.smt.Encoding` in-process, smallest size first.

One explicit ``z3.Context`` and ``z3.Solver`` per obligation, with a timeout
per query.  Size ``n`` is one assumption literal ``size_n``: the solver keeps
what it learned from the smaller sizes, and the first ``sat`` is a smallest
counterexample.  Every model is turned into interned terms and handed to
``judge`` (the rewriting engine's decision of that case): for a claim the
solver decides, a model the judge does not fail is a bug in calcscout; for a
candidate claim it is blocked and the solver asked again.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass, field

import z3

from calcscout.encoders.smt import Encoding
from calcscout.encoders.symbolic import Budget
from calcscout.rules.core.spec import Bounds, EMeta, Spec

#: Candidates a claim may produce before the engine gives up on it.
CANDIDATE_LIMIT = 200


class ModelMismatch(Exception):
    """A model of a decided claim did not fail when re-checked: a bug in calcscout."""


@dataclass
class Outcome:
    status: str  # 'holds', 'refuted', 'inconclusive'
    proved_upto: int = 0  # the largest size shown to have no counterexample
    terms: dict | None = None  # the counterexample (concrete terms) when refuted
    size: int = 0
    reason: str | None = None
    candidates: int = 0
    undecided: int = 0
    queries: int = 0
    seconds: float = 0.0
    notes: list[str] = field(default_factory=list)


Judge = Callable[[dict], str]  # -> 'fail', 'ok' or 'undecided'


def solve(spec: Spec, formula, quantified: tuple[EMeta, ...], bounds: Bounds,
          judge: Judge, timeout: float | None = None, budget: int = 4_000_000,
          min_size: int = 1) -> Outcome:
    start = time.perf_counter()
    ctx = z3.Context()
    solver = z3.Solver(ctx=ctx)
    if timeout is not None:
        solver.set(timeout=max(1, int(timeout * 1000)))
    enc = Encoding(spec, formula, quantified, bounds, ctx, budget)
    assert bounds.size is not None
    out = Outcome("holds")
    nmetas = len(quantified)
    for k in range(bounds.size):
        n = k + 1
        try:
            facts, assume, env = enc.query(k)
        except (Budget, MemoryError) as e:
            out.status = "inconclusive"
            used = e.args[0] if isinstance(e, Budget) else "memory"
            out.reason = (f"the encoding grew too large at size {n} ({used} symbolic terms and "
                          f"memo entries, budget {budget}); no counterexample up to size "
                          f"{out.proved_upto}")
            break
        solver.add(facts)
        if env is None or n < max(min_size, nmetas):
            out.proved_upto = n
            continue
        lit = z3.Bool(f"size{n}", ctx)
        solver.add(z3.Implies(lit, z3.And([_z(a, ctx) for a in assume])))
        while True:
            out.queries += 1
            r = solver.check(lit)
            if r == z3.unsat:
                break
            if r == z3.unknown:
                out.status = "inconclusive"
                out.reason = (f"the solver answered unknown at size {n} "
                              f"({solver.reason_unknown()}); no counterexample up to size "
                              f"{out.proved_upto}")
                out.seconds = time.perf_counter() - start
                return out
            model = solver.model()
            terms = enc.decode(model, env)
            verdict = judge(terms)
            if verdict == "fail":
                out.status = "refuted"
                out.terms = terms
                out.size = n
                out.seconds = time.perf_counter() - start
                return out
            if enc.mode == "decide":
                raise ModelMismatch(
                    f"the solver's model at size {n} does not fail when the rewriting engine "
                    f"re-checks it ({verdict}): a bug in calcscout's encoding")
            out.candidates += 1
            if verdict == "undecided":
                out.undecided += 1
            block = enc.universe.assignment(model, k)
            solver.add(z3.Implies(lit, z3.Not(z3.And(block))))
            if out.candidates >= CANDIDATE_LIMIT:
                out.status = "inconclusive"
                out.reason = (f"{out.candidates} candidate(s) from the solver did not fail when "
                              f"re-checked ({out.undecided} undecided); stopped at size {n}")
                out.seconds = time.perf_counter() - start
                return out
        out.proved_upto = n
    if out.status == "holds" and out.undecided:
        out.status = "inconclusive"
        out.reason = (f"{out.undecided} candidate(s) from the solver stayed undecided when "
                      "re-checked by the rewriting engine (a bound cut them)")
    out.seconds = time.perf_counter() - start
    return out


def _z(f, ctx: z3.Context):
    if f is True or f is False:
        return z3.BoolVal(f, ctx)
    return f
