"""Time of ``confluent`` / ``terminating`` on the λ-calculus library file, and
reduction-graph exploration speed (run: python tests/bench/bench_confluence.py).

1. ``decide_confluent`` (by theorem, then the bounded search alone) and
   ``decide_terminating`` on ``rules/library/lambda.calc`` at size 7.
2. Exploring one reduction graph of at least 100,000 terms, terms per second.
3. cProfile of that exploration: the functions with the most own time.

Pass ``--quick`` for a smaller graph (a smoke run).
"""

from __future__ import annotations

import cProfile
import dataclasses
import gc
import io
import pstats
import sys
import time
from pathlib import Path

from calcscout.obligations.engines.confluence import decide_confluent, decide_terminating
from calcscout.rules.core.spec import Bounds
from calcscout.rules.loading.load import load_file
from calcscout.rules.notation.notation import parse_term
from calcscout.rules.rewriting.rewrite import reduction_graph

ROOT = Path(__file__).resolve().parents[2]

LAMBDA = ROOT / "rules" / "library" / "lambda.calc"
# y applied to six copies of (\x. x x x) (\x. x x x): each copy is an endless chain of
# growing terms, independent of the others, so the graph is their product — wide, with
# no end; the exploration stops at the `nodes` bound and measures exploration speed.
W3 = r"(\x. x x x) (\x. x x x)"
BIG = "y " + " ".join(f"({W3})" for _ in range(6))
# One copy alone is a single path of ever longer terms (steps at ever deeper positions).
DEEP = W3


def timed(label: str, fn):
    t0 = time.perf_counter()
    out = fn()
    dt = time.perf_counter() - t0
    return label, dt, out


def main() -> None:
    quick = "--quick" in sys.argv
    spec = load_file(LAMBDA)
    b = Bounds(size=7, steps=10, names=1, nodes=20000)
    print(f"lambda.calc, size {b.size}, names {b.names}, steps {b.steps}, nodes {b.nodes}")
    rows = []
    for calc in ("lambda", "lambda_eta"):
        rows.append(timed(f"confluent {calc} (theorem)",
                          lambda c=calc: decide_confluent(spec, c, b)))
        rows.append(timed(f"confluent {calc} (bounded search only)",
                          lambda c=calc: decide_confluent(spec, c, b, prove=False)))
        rows.append(timed(f"terminating {calc}", lambda c=calc: decide_terminating(spec, c, b)))
    for label, dt, v in rows:
        print(f"  {label:42s} {dt:8.3f} s  {v.verdict:12s} scope {v.scope:7s} tried {v.tried}")

    calc = spec.calculi["lambda"]
    term = parse_term(calc, BIG)
    nodes = 20_000 if quick else 120_000
    label, dt, g = timed("graph", lambda: reduction_graph(calc, term, 10_000, nodes))
    n, e = g.number_of_nodes(), g.number_of_edges()
    print(f"\nreduction graph of {BIG}:\n  {n} terms, {e} edges, cut by {g.graph['cut_by']}, "
          f"{dt:.2f} s, {n / dt:,.0f} terms/s, {e / dt:,.0f} edges/s")
    from calcscout.obligations.engines.confluence import paused_gc

    fresh = dataclasses.replace(calc)
    term = parse_term(fresh, BIG)
    with paused_gc():
        _, dt2, g = timed("graph", lambda: reduction_graph(fresh, term, 10_000, nodes))
    print(f"  the same with the cyclic garbage collector paused: {dt2:.2f} s, "
          f"{g.number_of_nodes() / dt2:,.0f} terms/s")
    del g
    gc.collect()  # free the big graph before timing the next runs
    for length in (1000, 2000, 4000):
        deep = parse_term(calc, DEEP)
        _, dt, g = timed("deep", lambda d=deep, k=length: reduction_graph(calc, d, k, 10 * k))
        print(f"  one path of {g.number_of_nodes()} terms ({DEEP}): {dt:.2f} s, "
              f"{g.number_of_nodes() / dt:,.0f} terms/s")

    # Profile a fresh exploration (a fresh copy of the calculus: no memo reuse).
    fresh = dataclasses.replace(calc)
    term = parse_term(fresh, BIG)
    prof = cProfile.Profile()
    prof.enable()
    reduction_graph(fresh, term, 10_000, nodes // 4)
    prof.disable()
    out = io.StringIO()
    pstats.Stats(prof, stream=out).sort_stats("tottime").print_stats(14)
    print("\ncProfile (own time), exploration of", nodes // 4, "terms:")
    print("\n".join(line for line in out.getvalue().splitlines() if line.strip())[:4000])


if __name__ == "__main__":
    main()
