"""Benchmark: what ``check --culprits``, ``--by-rule`` and ``latex`` cost over a plain check.

Prints, for the demo (variant 1, sizes 4 to 6) and Toyama's 1987 union: the seconds of
the plain check, of the culprits pass (used + ddmin) with the number of bounded checks
ddmin ran, of the by-rule parts, and of writing the LaTeX document.
Run: .venv/bin/python tests/bench/bench_culprits.py
"""

from __future__ import annotations

import time
from pathlib import Path

from calcscout.obligations.analysis import culprits
from calcscout.obligations.analysis.explain_failure import analyse
from calcscout.obligations.reporting.latex import latex_document
from calcscout.obligations.runner import RunOptions, run_claims
from calcscout.rules.core.spec import Bounds
from calcscout.rules.loading.load import load_file

ROOT = Path(__file__).resolve().parents[2]
CASES = [(ROOT / "rules" / "demo" / "resugar-v1.calc", s) for s in (4, 5, 6)] + [
    (ROOT / "tests" / "data" / "culprits" / "toyama.calc", 6)]


def main() -> None:
    print(f"{'file':<18} {'size':>4} {'check s':>8} {'culprits s':>10} {'ddmin runs':>10} "
          f"{'by-rule s':>9} {'latex s':>8}")
    for path, size in CASES:
        spec = load_file(str(path))
        bounds = Bounds(size=size)
        t0 = time.perf_counter()
        verdicts, _ = run_claims(spec, list(spec.claims), RunOptions(bounds))
        t1 = time.perf_counter()
        runs = 0
        original = culprits.still_refuted

        def counted(*args, _orig=original):
            nonlocal runs
            runs += 1
            return _orig(*args)

        culprits.still_refuted = counted
        try:
            analyse(spec, verdicts, bounds, True, False)
        finally:
            culprits.still_refuted = original
        t2 = time.perf_counter()
        analyse(spec, verdicts, bounds, False, True)
        t3 = time.perf_counter()
        latex_document(spec, list(spec.calculi), list(spec.translations), verdicts)
        t4 = time.perf_counter()
        print(f"{path.name:<18} {size:>4} {t1 - t0:>8.2f} {t2 - t1:>10.2f} {runs:>10} "
              f"{t3 - t2:>9.2f} {t4 - t3:>8.2f}")


if __name__ == "__main__":
    main()
