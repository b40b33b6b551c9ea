"""Benchmark: the front end on large or hostile input.

Prints, for growing inputs, the time to load a file of N rules (the duplicate
check must stay linear), to build the term parser of a calculus whose notation
has many literal tokens (bounded by the notation's token limit), and to read a
command-line term nested D parentheses deep (bounded by the depth limit).
Run: .venv/bin/python tests/bench/bench_front_end.py
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent.parent))

from calcscout.rules.core.errors import CalcError  # noqa: E402
from calcscout.rules.loading.load import load_text  # noqa: E402
from calcscout.rules.notation.notation import MAX_NOTATION_TOKENS, parse_term  # noqa: E402


def _rules(n: int) -> str:
    body = "\n".join(f"  rule r{i}: s(s(M)) -> M" for i in range(n))
    return f"calculus c {{\n  names var x\n  sort term M ::= x | z | s(M)\n{body}\n}}\n"


def _notation(k: int) -> str:
    lits = " ".join(f"k{i}" for i in range(k - 1))
    return (f'calculus c {{\n  names var x\n  sort term M N ::= x | big(M) "{lits} M"'
            f' | app(M, N) "M N"\n}}\n')


def _timed(fn) -> tuple[float, str]:
    t = time.perf_counter()
    try:
        fn()
        what = "ok"
    except CalcError as e:
        what = "refused: " + e.problems[0].message[:60]
    return time.perf_counter() - t, what


def main() -> None:
    print(f"{'rules':>8} {'load s':>8}")
    for n in (1000, 10_000, 100_000):
        dt, what = _timed(lambda n=n: load_text(_rules(n)))
        print(f"{n:>8} {dt:>8.2f}  {what}")
    print(f"{'tokens':>8} {'load+parse s':>12}  (limit {MAX_NOTATION_TOKENS})")
    for k in (8, MAX_NOTATION_TOKENS, 500, 2000):
        def run(k=k) -> None:
            spec = load_text(_notation(k))
            parse_term(spec.calculi["c"], "x x")
        dt, what = _timed(run)
        print(f"{k:>8} {dt:>12.2f}  {what}")
    spec = load_text(_notation(4))
    calc = spec.calculi["c"]
    print(f"{'parens':>8} {'parse s':>8}")
    for d in (100, 1000, 50_000):
        dt, what = _timed(lambda d=d: parse_term(calc, "(" * d + "x" + ")" * d))
        print(f"{d:>8} {dt:>8.2f}  {what}")


if __name__ == "__main__":
    main()
