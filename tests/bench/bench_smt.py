"""Benchmark: the largest size at which each engine answers within a time limit.

Run: .venv/bin/python tests/bench/bench_smt.py [--limit SECONDS] [--max N]

Claims (tests/data/smt/cps.calc, Plotkin's call-by-value CPS translation and its
inverse): (a) the true exact-inverse claim ``ds(cps(M)) == M``; (b) the same claim
with a planted bug in ``cps`` whose smallest counterexample has size 8, 16 and 24
(a right-nested spine of applications ending in an abstraction); (c) the
refinement-sort membership claim ``cps(M) : comp``.  For a true claim the figure
is the largest size checked completely within the limit; for a buggy one, whether
(and how fast) the smallest counterexample was found.  Sizes are tried 1, 2, 4, 8,
... then bisected, each run from scratch, so a figure is one whole run.
"""

from __future__ import annotations

import argparse
import multiprocessing
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]

FIXTURE = ROOT / "tests" / "data" / "smt" / "cps.calc"


def bug_text(size: int) -> str:
    """cps.calc with a wrong first equation for a right spine of d = (size - 2) / 2 applications."""
    d = (size - 2) // 2
    pat = "lam(x.N)"
    for i in range(d, 0, -1):
        pat = f"app(M{i}, {pat})"
    wrong = ("  cps(" + pat + ") = lam(k. app(cps(M1), lam(m. app(cps(M2), "
             "lam(n. app(app(m, n), k))))))\n")
    text = FIXTURE.read_text()
    return text.replace("  cps(V) = lam(k. app(k, val(V)))\n",
                        wrong + "  cps(V) = lam(k. app(k, val(V)))\n")


def _run(args) -> tuple[str, float, int | None]:
    path, claim, engine, size = args
    from calcscout.obligations.claims import plan
    from calcscout.obligations.engines import enumeration
    from calcscout.obligations.engines.smt import run_smt
    from calcscout.rules.core.spec import Bounds
    from calcscout.rules.loading.load import load_file

    spec = load_file(path)
    c = next(c for c in spec.claims if c.name == claim)
    ob = plan(spec, c).head
    b = spec.effective_bounds(Bounds(size=size, names=1))
    t = time.perf_counter()
    if engine == "smt":
        v = run_smt(spec, ob, b, timeout=None)
    else:
        v = enumeration.combine(ob.name, "", ob.text, b, [enumeration.run_shard(spec, ob, b)])
    ce = v.counterexample.size if v.counterexample else None
    return v.verdict, time.perf_counter() - t, ce


def timed(path: str, claim: str, engine: str, size: int, limit: float):
    """(verdict, seconds, counterexample size) or None when past ``limit``."""
    with multiprocessing.get_context("fork").Pool(1) as pool:
        r = pool.apply_async(_run, ((path, claim, engine, size),))
        try:
            return r.get(limit)
        except multiprocessing.TimeoutError:
            pool.terminate()
            return None


def reach(path: str, claim: str, engine: str, limit: float, top: int) -> str:
    """The largest size answered within ``limit``; for a refuted claim, the first size that
    finds it."""
    good, bad, n = 0, None, 1
    found = None
    while n <= top:
        got = timed(path, claim, engine, n, limit)
        if got is None:
            bad = n
            break
        verdict, secs, ce = got
        if verdict == "refuted":
            found = (ce, secs)
            break
        good = n
        n = min(n * 2, top) if n < top else top + 1
    if found is not None:
        return f"refuted, size {found[0]} ({found[1]:.1f} s)"
    if bad is not None:
        lo, hi = good, bad
        while hi - lo > 1:
            mid = (lo + hi) // 2
            got = timed(path, claim, engine, mid, limit)
            if got is None:
                hi = mid
            elif got[0] == "refuted":
                return f"refuted, size {got[2]} ({got[1]:.1f} s)"
            else:
                lo = mid
        return f"holds up to {lo}" if lo else "none"
    return f"holds up to {good}+ (cap)"


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--limit", type=float, default=60.0)
    ap.add_argument("--max", type=int, default=160)
    args = ap.parse_args()
    tmp = Path(tempfile.mkdtemp())
    rows = [("(a) ds(cps(M)) == M, true", str(FIXTURE), "back")]
    for s in (8, 16, 24):
        p = tmp / f"cps_bug{s}.calc"
        p.write_text(bug_text(s))
        rows.append((f"(b) planted bug, smallest counterexample {s}", str(p), "back"))
    rows.append(("(c) cps(M) : comp, true", str(FIXTURE), "image"))
    print(f"limit {args.limit:.0f} s per run, names 1\n")
    print("| claim | enumeration | SMT |\n|---|---|---|")
    for label, path, claim in rows:
        e = reach(path, claim, "enum", args.limit, args.max)
        s = reach(path, claim, "smt", args.limit, args.max)
        print(f"| {label} | {e} | {s} |", flush=True)


if __name__ == "__main__":
    main()
