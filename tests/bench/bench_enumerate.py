"""Throughput and memory of term enumeration (run: python tests/bench/bench_enumerate.py).

Prints, per stream, the terms per second (without tracing), then the peak
traced memory of the same stream (tracemalloc, a separate run since tracing
slows Python down), and at the end the process's peak resident size
(ru_maxrss) and the time to count much larger bounds without building terms.
"""

from __future__ import annotations

import resource
import time
import tracemalloc
from pathlib import Path

from calcscout.rules.core.enumerate import count_terms, enumerate_terms
from calcscout.rules.loading.load import load_file

ROOT = Path(__file__).resolve().parents[2]

DATA = ROOT / "tests" / "data" / "enum"

# (fixture, calculus, sort, max size, max names)
STREAMS = [
    ("lambda.calc", "lam", "term", 11, 0),
    ("lambda.calc", "lam", "term", 12, 0),
    ("lambda.calc", "lam", "term", 10, 2),
    ("refine.calc", "arith", "nf", 11, 1),
    ("refine.calc", "arith", "answer", 11, 1),
    ("refine.calc", "ambiguous", "term", 10, 1),
]

COUNTS = [
    ("lambda.calc", "lam", "term", 60, 0),
    ("lambda.calc", "lam", "term", 40, 3),
    ("refine.calc", "arith", "nf", 40, 2),
]


def load(file: str):
    return load_file(DATA / file).calculi


def main() -> None:
    print(f"{'stream':36} {'terms':>10} {'seconds':>8} {'terms/s':>10} {'peak KiB':>9}")
    for file, calc_name, sort, size, names in STREAMS:
        calc = load(file)[calc_name]
        label = f"{calc_name}.{sort} size<={size} names<={names}"
        start = time.perf_counter()
        produced = sum(1 for _ in enumerate_terms(calc, sort, size, names))
        seconds = time.perf_counter() - start
        tracemalloc.start()
        for _ in enumerate_terms(calc, sort, size, names):
            pass
        peak = tracemalloc.get_traced_memory()[1]
        tracemalloc.stop()
        rate = produced / seconds if seconds else float("inf")
        print(f"{label:36} {produced:>10} {seconds:>8.2f} {rate:>10.0f} {peak // 1024:>9}")
    print()
    print(f"{'count (no terms built)':36} {'count':>28} {'seconds':>8}")
    for file, calc_name, sort, size, names in COUNTS:
        calc = load(file)[calc_name]
        label = f"{calc_name}.{sort} size<={size} names<={names}"
        start = time.perf_counter()
        total = count_terms(calc, sort, size, names)
        seconds = time.perf_counter() - start
        print(f"{label:36} {total:>28.4g} {seconds:>8.3f}")
    maxrss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss  # KiB on Linux
    print(f"\npeak resident size (ru_maxrss): {maxrss // 1024} MiB")


if __name__ == "__main__":
    main()
