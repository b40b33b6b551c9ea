"""Benchmark of the proof engine: time, cases and splits of every proof the library and the
demo get (goal: each under 1 s, all of them under 10 s), and the time spent on the claims
it does not prove (each stops at its budget).

    .venv/bin/python tests/bench/bench_proofs.py
"""

from __future__ import annotations

import time
from pathlib import Path

from calcscout.obligations.claims import plan
from calcscout.obligations.engines.lemmas import ProofBook
from calcscout.rules.core.spec import Bounds
from calcscout.rules.loading.load import load_file

ROOT = Path(__file__).resolve().parents[2]
FILES = sorted((ROOT / "rules" / "library").glob("*.calc")) + sorted(
    (ROOT / "rules" / "demo").glob("resugar-*.calc")) + [
    ROOT / "tests" / "data" / "proof" / "values.calc"]


def main() -> None:
    proved_total = 0.0
    open_total = 0.0
    rows = []
    for path in FILES:
        spec = load_file(path)
        book = ProofBook(spec, Bounds())
        for claim in spec.claims:
            p = plan(spec, claim)
            for ob in ([p.head] if p.head else []) + list(p.parts):
                if ob.normalizes is not None or type(ob.formula).__name__ not in (
                        "Atom", "Implies"):
                    continue
                start = time.perf_counter()
                r = book.result(claim, ob)
                secs = time.perf_counter() - start
                if r.proved:
                    proved_total += secs
                    rows.append((path.name, ob.name, len(r.cases), r.splits, secs))
                else:
                    open_total += secs
    print(f"{'file':<22} {'claim':<26} {'cases':>5} {'splits':>6} {'seconds':>8}")
    for f, name, cases, splits, secs in rows:
        print(f"{f:<22} {name:<26} {cases:>5} {splits:>6} {secs:>8.3f}")
    print(f"\n{len(rows)} proofs in {proved_total:.2f} s (slowest "
          f"{max((r[4] for r in rows), default=0):.3f} s); claims not proved: "
          f"{open_total:.2f} s in all")


if __name__ == "__main__":
    main()
