"""Benchmark: relational claims on Plotkin's call-by-value CPS translation.

Prints, for sizes 5 to 8: claims and cases per second, the share of time spent
enumerating, translating and searching reduction graphs, the cost per case,
the process's peak resident memory (tracemalloc would slow the run several
times over), and the speed-up of --jobs 2 over --jobs 1.

Then the peak memory of a refuted ``==`` claim whose planted bug shows only at size 11
(tests/data/translate/pad.calc, 162,550 cases), each size in a process of its own so that
the peak is that run's: memory must not grow with the number of cases (it was 725 MiB
at size 11 while translation memo tables cleared themselves only at half a million
entries).  ``--pad-only`` runs just that part.
Run: .venv/bin/python tests/bench/bench_claims.py
"""

from __future__ import annotations

import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from calcscout.obligations.runner import RunOptions, run_claims
from calcscout.rules.core.enumerate import enumerate_terms
from calcscout.rules.core.spec import Bounds
from calcscout.rules.loading.load import load_file
from calcscout.rules.rewriting.translate import Translator

HERE = Path(__file__).resolve().parent

PLOTKIN = HERE.parent / "data" / "translate" / "plotkin.calc"
CLAIMS = f"""include "{PLOTKIN}"
claim sim: M -> N implies cbv(M) joins cbv(N)
claim image: cbv(M) : term
"""


PAD = HERE.parent / "data" / "translate" / "pad.calc"


def pad_run(size: int) -> None:
    """One enumeration of pad.calc's claim (in a process of its own): cases, verdict, peak."""
    spec = load_file(PAD)
    t0 = time.perf_counter()
    out, _ = run_claims(spec, list(spec.claims), RunOptions(bounds=Bounds(size=size)))
    total = time.perf_counter() - t0
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"{size:>4} {out[0].tried:>8} {out[0].verdict:>9} {total:>8.1f} {peak:>14.0f}",
          flush=True)


def pad_memory() -> None:
    print("peak memory of unpad(pad(M)) == M by size (refuted first at size 11):")
    print(f"{'size':>4} {'cases':>8} {'verdict':>9} {'seconds':>8} {'peak RSS MiB':>14}",
          flush=True)
    for size in (8, 9, 10, 11):
        subprocess.run([sys.executable, __file__, "--pad", str(size)], check=True)


def main() -> None:
    with tempfile.TemporaryDirectory() as d:
        path = Path(d) / "bench.calc"
        path.write_text(CLAIMS)
        spec = load_file(path)
    lamv = spec.calculi["lamv"]
    print(f"{'size':>4} {'cases':>8} {'claims/s':>9} {'cases/s':>9} {'us/case':>8} "
          f"{'enum%':>6} {'transl%':>8} {'graph%':>7} {'maxrss MiB':>10}")
    per_node: list[tuple[int, float, float]] = []
    for size in (5, 6, 7, 8):
        b = Bounds(size=size, names=1, steps=10, nodes=2000)
        t0 = time.perf_counter()
        terms = 0
        for _ in enumerate_terms(lamv, "term", size, 1):
            terms += 1
        t_enum = time.perf_counter() - t0
        t0 = time.perf_counter()
        tr = Translator(spec, spec.translations["cbv"], b)
        out_nodes = 0
        for t in enumerate_terms(lamv, "term", size, 1):
            out_nodes += tr.apply("cbv", t).size
        t_transl = time.perf_counter() - t0 - t_enum
        per_node.append((size, 1e9 * max(t_transl, 0.0) / out_nodes, out_nodes / terms))
        t0 = time.perf_counter()
        verdicts, _ = run_claims(spec, list(spec.claims), RunOptions(bounds=b))
        total = time.perf_counter() - t0
        peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
        cases = sum(v.tried for v in verdicts if not v.part_of)
        assert all(v.verdict == "holds" for v in verdicts), [(v.name, v.verdict) for v in verdicts]
        # the claims enumerate the terms twice (once per claim) and translate them in each
        enum_share = 2 * t_enum / total
        transl_share = 2 * max(t_transl, 0.0) / total
        graph_share = max(0.0, 1 - enum_share - transl_share)
        print(f"{size:>4} {cases:>8} {len(verdicts) / total:>9.2f} {cases / total:>9.0f} "
              f"{1e6 * total / cases:>8.1f} {100 * enum_share:>5.1f}% {100 * transl_share:>7.1f}% "
              f"{100 * graph_share:>6.1f}% {peak / 2**20:>10.0f}")
    print("translation cost per node of output (should stay flat):")
    for size, ns, avg in per_node:
        print(f"  size {size}: {ns:.0f} ns per output node (cbv(M) has {avg:.1f} nodes on average)")
    b = Bounds(size=8, names=1, steps=10, nodes=2000)
    times = {}
    for jobs in (1, 2):
        t0 = time.perf_counter()
        run_claims(spec, list(spec.claims), RunOptions(bounds=b, jobs=jobs))
        times[jobs] = time.perf_counter() - t0
    print(f"size 8: --jobs 1 {times[1]:.2f}s, --jobs 2 {times[2]:.2f}s, "
          f"speed-up {times[1] / times[2]:.2f}x")
    print(f"max resident set: {resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024:.0f} MiB")


if __name__ == "__main__":
    if sys.argv[1:2] == ["--pad"]:
        pad_run(int(sys.argv[2]))
    elif sys.argv[1:2] == ["--pad-only"]:
        pad_memory()
    else:
        main()
        pad_memory()
