"""Time of the termination proofs, per system and per method
(run: python tests/bench/bench_termination.py).

For every first-order system of the library and of tests/data/termination, the time
of each method alone (``lpo``, ``rpo``, ``kbo``, ``poly1``, ``poly2``, ``dp``,
``poly2n2``: found or not) and of the whole proof attempt as ``terminating`` runs it
(methods in order, stopping at the first that succeeds).  Goal: every known answer
proved within 2 s.  Figures include building the query and the independent re-check.
"""

from __future__ import annotations

import time
from pathlib import Path

from calcscout.obligations.engines.termination import prove
from calcscout.rules.loading.load import load_file

ROOT = Path(__file__).resolve().parents[2]

LIB = ROOT / "rules" / "library"
DATA = ROOT / "tests" / "data" / "termination"
SYSTEMS = [
    (LIB / "arith-trs.calc", "peano", None),
    (LIB / "groups.calc", "group", None),
    (LIB / "groups.calc", "group_kb1", None),
    (LIB / "ski.calc", "ski", None),
    (LIB / "bracket.calc", "clabs", "abs"),
    (LIB / "bracket.calc", "clabs_eta", "abseta"),
    (LIB / "nonlinear.calc", "huet", None),
    (DATA / "ackermann.calc", "ack", None),
    (DATA / "toyama.calc", "toyama_f", None),
    (DATA / "toyama.calc", "toyama_g", None),
    (DATA / "toyama.calc", "toyama_union", None),
    (DATA / "groups-completed.calc", "group_complete", None),
    (DATA / "poly-only.calc", "polyonly", None),
    (DATA / "division.calc", "division", None),
]
METHODS = ("lpo", "rpo", "kbo", "poly1", "poly2", "dp", "poly2n2")


def main() -> None:
    timeout = 3.0
    head = f"{'system':<24}" + "".join(f"{m:>9}" for m in METHODS) + f"{'whole':>9}  proved by"
    print(head)
    for path, name, group in SYSTEMS:
        calc = load_file(str(path)).calculi[name]
        label = name + (f".{group}" if group else "")
        cells = []
        for m in METHODS:
            start = time.perf_counter()
            p = prove(calc, group, timeout, methods=(m,))
            secs = time.perf_counter() - start
            cells.append(f"{secs:7.2f}{'+' if p.proved else ' '} ")
        start = time.perf_counter()
        p = prove(calc, group, timeout)
        secs = time.perf_counter() - start
        by = p.witness["method"] if p.proved else "-"
        print(f"{label:<24}" + "".join(cells) + f"{secs:8.2f}  {by}")
    print("(seconds; + = that method alone proves the system; per-query timeout "
          f"{timeout} s)")


if __name__ == "__main__":
    main()
