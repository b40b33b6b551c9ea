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
from calcscout.encoders.symbolic import Budget, TimeBudget
from calcscout.rules.core.spec import Bounds, EMeta, Spec

#: Candidates a claim may produce before the engine gives up on it.
CANDIDATE_LIMIT = 200


class ModelMismatch(Exception):
    """A model of a decided claim did not fail when re-checked: a bug in calcscout."""


@dataclass
class Outcome:
    status: str  # 'holds', 'refuted', 'inconclusive', 'error' (a translation failed on terms)
    proved_upto: int = 0  # the largest size shown to have no counterexample
    terms: dict | None = None  # the counterexample (concrete terms) when refuted
    size: int = 0
    reason: str | None = None
    candidates: int = 0
    undecided: int = 0
    queries: int = 0
    seconds: float = 0.0
    notes: list[str] = field(default_factory=list)


Judge = Callable[[dict], str]  # -> 'fail', 'ok', 'undecided' or 'error'


def solve(spec: Spec, formula, quantified: tuple[EMeta, ...], bounds: Bounds,
          judge: Judge, timeout: float | None = None, budget: int = 4_000_000,
          min_size: int = 1) -> Outcome:
    start = time.perf_counter()
    started = time.monotonic()
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
        # the encoding is built no further once the timeout has passed since the claim
        # started (a query gets the timeout; building, unbounded, could take any time)
        enc.store.deadline = None if timeout is None else started + timeout
        try:
            facts, assume, env = enc.query(k)
        except TimeBudget:
            out.status = "inconclusive"
            out.reason = (f"the timeout ({timeout:g} s) ran out while the encoding for size {n} "
                          f"was built; no counterexample up to size {out.proved_upto}")
            break
        except (Budget, MemoryError) as e:
            out.status = "inconclusive"
            used = e.args[0] if isinstance(e, Budget) else "memory"
            out.reason = (f"the encoding grew too large at size {n} ({used} symbolic terms and "
                          f"memo entries, budget {budget}); no counterexample up to size "
                          f"{out.proved_upto}")
            break
        finally:
            enc.store.deadline = None
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
            # among the models of this size, the one the enumeration meets first
            order = _FirstInOrder(solver, enc, lit, k, model, out)
            model = order.run(nmetas, k)
            if order.unknown:
                out.notes.append(f"the solver answered unknown while ordering the "
                                 f"counterexamples of size {n}: the one reported is of the "
                                 "smallest size but may not be the first in enumeration order")
            terms = enc.decode(model, env)
            verdict = judge(terms)
            if verdict in ("fail", "error"):
                out.status = "refuted" if verdict == "fail" else "error"
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
    if enc.step_dropped:
        out.notes.append(f"the one-step test grew past its limit at size(s) "
                         f"{', '.join(map(str, sorted(set(enc.step_dropped))))}; there the "
                         "solver proposed every case whose sides differ")
    if out.status == "holds" and out.undecided:
        out.status = "inconclusive"
        out.reason = (f"{out.undecided} candidate(s) from the solver stayed undecided when "
                      "re-checked by the rewriting engine (a bound cut them)")
    out.seconds = time.perf_counter() - start
    return out


class _FirstInOrder:
    """The counterexample that comes first in the enumeration's order among those of one size.

    The solver has a model at size ``k + 1``.  The choices that place a term in the
    enumeration are read in preorder — a term's production, then each argument's size and,
    recursively, its contents, left to right; for a tuple, each term's size then its
    contents — and the enumeration orders terms lexicographically by them.  So each choice
    is fixed in turn to its least value that still has a model: ask for one below the
    model's value; if there is one it is the new model, else the value is kept (held by an
    assumption literal of its own, so that the solver keeps what it learned).
    """

    def __init__(self, solver: z3.Solver, enc: Encoding, lit, k: int, model, out: Outcome):
        self.solver = solver
        self.u = enc.universe
        self.ctx = enc.ctx
        self.fixed = [lit]
        self.model = model
        self.out = out
        self.unknown = False

    def run(self, count: int, k: int) -> z3.ModelRef:
        self._seq(self.u.root_vars(k, count), 0, k)
        return self.model

    def _val(self, v) -> int:
        return self.model.eval(v, model_completion=True).as_long()

    def _least(self, options: list[tuple[tuple, object]], current: tuple) -> None:
        """Fix the least option (key, condition) that has a model; the model's is ``current``."""
        while True:
            lower = [c for key, c in options if key < current]
            if not lower or self.unknown:
                break
            self.out.queries += 1
            r = self.solver.check(*self.fixed, z3.Or(lower))
            if r != z3.sat:
                self.unknown = self.unknown or r == z3.unknown
                break
            self.model = self.solver.model()
            current = next(key for key, c in options
                           if z3.is_true(self.model.eval(c, model_completion=True)))
        hold = z3.Bool(f"order{len(self.fixed)}_{id(self)}", self.ctx)
        self.solver.add(z3.Implies(hold, z3.Or([c for key, c in options if key == current])))
        self.fixed.append(hold)

    def _seq(self, roots: list, lo: int, hi: int) -> None:
        for j, root in enumerate(roots):
            if j < len(roots) - 1:
                at = self._val(root)
                opts = [((s,), root == lo + s - 1) for s in range(1, hi - lo + 2)]
                self._least(opts, (at - lo + 1,))
                at = self._val(root)
            else:
                at = hi
            self._node(at, lo)
            lo = at + 1

    def _node(self, m: int, lo: int) -> None:
        u = self.u
        size = m - lo + 1
        tag = u.tag(m)
        prods = [p for p in u.feasible(m) if (p.arity == 0) == (size == 1)]
        keyed = sorted(((u.order_key(p), p) for p in prods), key=lambda kp: kp[0])
        by_pid = {p.pid: key for key, p in keyed}
        self._least([(key, tag == p.pid) for key, p in keyed], by_pid[self._val(tag)])
        p = u.prods[self._val(tag)]
        if p.kind == "bound":
            ref = u.ref(m)
            codes = u.ref_codes(m, p.ns)
            self._least([(u.ref_key(c), ref == c) for c in codes], u.ref_key(self._val(ref)))
        if p.arity:
            kids = [u.ptr(m, p.arity - 1 - j) for j in range(p.arity)]
            self._seq(kids, lo, m - 1)


def _z(f, ctx: z3.Context):
    if f is True or f is False:
        return z3.BoolVal(f, ctx)
    return f
