"""calcscout against a hand-written script on the script's own job.

A researcher who doubts a tool writes a short script for their one calculus:
plain tuples, de Bruijn indices, a breadth-first search.  This benchmark holds
two such scripts (``TERMS_SCRIPT``, ``PAD_SCRIPT``), runs each and calcscout
as whole processes in the same run (start-up included), checks that both give
the same answer, and prints wall and CPU seconds and the ratio
baseline / calcscout (1.0 = parity; higher is better for calcscout).  It also
times ``calcscout lint`` on a ten-line file.

Run: .venv/bin/python tests/bench/bench_baseline.py [--quick] [--jobs] [--scaling]
(``--quick`` uses size 10 / size 8 instead of 12 / 10; ``--jobs`` adds the
speed-up of ``--jobs 2`` on the pad claims; ``--scaling`` the cost per case and
peak memory of the pad claims at sizes 7 to 10.)
"""

from __future__ import annotations

import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
CALCSCOUT = [sys.executable, "-m", "calcscout.obligations.commands.cli"]
LAMBDA = ROOT / "rules" / "library" / "lambda.calc"
PAD = ROOT / "tests" / "data" / "bench" / "pad.calc"

# Every closed λ-term up to size N, one a line, in abstract form with the
# names calcscout would choose (x, y, z, x1, ... by binder depth).
TERMS_SCRIPT = r'''
import sys
N = int(sys.argv[1])
NAMES = ["x", "y", "z"] + [f"{b}{i}" for i in range(1, 40) for b in "xyz"]
memo = {}
def gen(n, d):  # terms of size n with d binders in scope, indices < d
    key = (n, d)
    if key in memo:
        return memo[key]
    out = []
    if n == 1:
        out = [("v", i) for i in range(d)]
    else:
        out += [("l", b) for b in gen(n - 1, d + 1)]
        for k in range(1, n - 1):
            out += [("a", f, a) for f in gen(k, d) for a in gen(n - 1 - k, d)]
    memo[key] = out
    return out
def show(t, d):
    if t[0] == "v":
        return NAMES[d - 1 - t[1]]
    if t[0] == "l":
        return f"lam({NAMES[d]}.{show(t[1], d + 1)})"
    return f"app({show(t[1], d)}, {show(t[2], d)})"
w = sys.stdout.write
for n in range(1, N + 1):
    for t in gen(n, 0):
        w(show(t, 0) + "\n")
'''

# unpad(pad(M)) == M and M -> N implies pad(M) ->* pad(N) for every term up to
# size N with at most one free name, reachability by BFS up to STEPS steps.
PAD_SCRIPT = r'''
import sys
N, STEPS = int(sys.argv[1]), int(sys.argv[2])
I = ("l", ("v", 0))
def gen(n, d, memo={}):  # ("f",) is the one free name
    if (n, d) in memo:
        return memo[n, d]
    out = [("f",)] + [("v", i) for i in range(d)] if n == 1 else []
    if n > 1:
        out += [("l", b) for b in gen(n - 1, d + 1)]
        for k in range(1, n - 1):
            out += [("a", f, a) for f in gen(k, d) for a in gen(n - 1 - k, d)]
    memo[n, d] = out
    return out
def pad(t):
    if t[0] == "l":
        return ("l", pad(t[1]))
    if t[0] == "a":
        return ("a", I, ("a", pad(t[1]), pad(t[2])))
    return t
def unpad(t):
    if t[0] == "l":
        return ("l", unpad(t[1]))
    if t[0] == "a":
        if t[1] == I and t[2][0] == "a":
            return ("a", unpad(t[2][1]), unpad(t[2][2]))
        return ("a", unpad(t[1]), unpad(t[2]))
    return t
def shift(t, k, c=0):
    if t[0] == "v":
        return ("v", t[1] + k) if t[1] >= c else t
    if t[0] == "l":
        return ("l", shift(t[1], k, c + 1))
    if t[0] == "a":
        return ("a", shift(t[1], k, c), shift(t[2], k, c))
    return t
def subst(t, s, j=0):  # t[0 := s], lowering the other indices
    if t[0] == "v":
        return shift(s, j) if t[1] == j else (("v", t[1] - 1) if t[1] > j else t)
    if t[0] == "l":
        return ("l", subst(t[1], s, j + 1))
    if t[0] == "a":
        return ("a", subst(t[1], s, j), subst(t[2], s, j))
    return t
def steps(t):
    if t[0] == "l":
        return [("l", b) for b in steps(t[1])]
    if t[0] != "a":
        return []
    out = [subst(t[1][1], t[2])] if t[1][0] == "l" else []
    out += [("a", f, t[2]) for f in steps(t[1])]
    out += [("a", t[1], a) for a in steps(t[2])]
    return out
def reaches(s, goal):
    seen, frontier = {s}, [s]
    for _ in range(STEPS + 1):
        if goal in seen:
            return True
        nxt = []
        for t in frontier:
            for u in steps(t):
                if u not in seen:
                    seen.add(u)
                    nxt.append(u)
        frontier = nxt
    return goal in seen
cases = back = sim = 0
for n in range(1, N + 1):
    for m in gen(n, 0):
        cases += 1
        back += unpad(pad(m)) == m
        pm = pad(m)
        sim += all(reaches(pm, pad(r)) for r in set(steps(m)))
print(cases, back, sim)
'''


def run(argv: list[str]) -> tuple[str, float, float]:
    """Output, wall seconds and CPU seconds (user + system) of one process."""
    out, wall, cpu, _ = run_measured(argv)
    return out, wall, cpu


def run_measured(argv: list[str]) -> tuple[str, float, float, float]:
    """Output, wall and CPU seconds, and peak resident MiB of one process."""
    with tempfile.TemporaryFile() as err:
        start = time.perf_counter()
        proc = subprocess.Popen(argv, stdout=subprocess.PIPE, stderr=err, cwd=ROOT)
        assert proc.stdout is not None
        out = proc.stdout.read().decode()
        _, status, usage = os.wait4(proc.pid, 0)
        wall = time.perf_counter() - start
        proc.returncode = os.waitstatus_to_exitcode(status)
        if proc.returncode not in (0, 1):
            err.seek(0)
            raise SystemExit(f"{argv} failed ({proc.returncode}):\n{err.read().decode()}")
    return out, wall, usage.ru_utime + usage.ru_stime, usage.ru_maxrss / 1024


def script(text: str, *args: int) -> tuple[str, float, float]:
    with tempfile.NamedTemporaryFile("w", suffix=".py", delete=False) as f:
        f.write(text)
    try:
        return run([sys.executable, f.name, *map(str, args)])
    finally:
        os.unlink(f.name)


def row(job: str, ours: tuple[float, float], theirs: tuple[float, float]) -> None:
    print(f"{job:44} {ours[0]:>8.2f} {ours[1]:>8.2f} {theirs[0]:>8.2f} {theirs[1]:>8.2f}"
          f" {theirs[0] / ours[0]:>6.2f} {theirs[1] / ours[1]:>6.2f}")


def main() -> None:
    quick = "--quick" in sys.argv
    size_terms, size_pad = (10, 8) if quick else (12, 10)
    print(f"{'job':44} {'cs wall':>8} {'cs cpu':>8} {'py wall':>8} {'py cpu':>8}"
          f" {'r wall':>6} {'r cpu':>6}")

    base_out, *base = script(TERMS_SCRIPT, size_terms)
    ours_out, *ours = run([*CALCSCOUT, "terms", str(LAMBDA), "lambda.term",
                           "--size", str(size_terms), "--names", "0"])
    if sorted(base_out.splitlines()) != sorted(ours_out.splitlines()):
        raise SystemExit("terms: calcscout and the script list different terms")
    row(f"terms lambda size {size_terms} ({len(base_out.splitlines())} terms)", ours, base)

    base_out, *base = script(PAD_SCRIPT, size_pad, 12)
    cases, back, sim = map(int, base_out.split())
    if not cases == back == sim:
        raise SystemExit(f"pad: the script finds a counterexample ({base_out.strip()})")
    ours_out, *ours = run([*CALCSCOUT, "check", str(PAD), "--size", str(size_pad),
                           "--names", "1", "--steps", "12"])
    if ours_out.count("holds") != 2 or f" {cases} case" not in ours_out:
        raise SystemExit(f"pad: calcscout disagrees with the script ({cases} cases):\n{ours_out}")
    row(f"pad/unpad size {size_pad} names 1 ({cases} cases)", ours, base)

    if "--jobs" in sys.argv:
        jobs(size_pad)
    if "--scaling" in sys.argv:
        scaling()

    with tempfile.NamedTemporaryFile("w", suffix=".calc", delete=False) as f:
        f.write(LAMBDA.read_text().split("# Church")[0])
    try:
        lint = min((run([*CALCSCOUT, "lint", f.name])[1:] for _ in range(5)), key=lambda r: r[0])
    finally:
        os.unlink(f.name)
    empty = min((run([sys.executable, "-c", "pass"])[1:] for _ in range(5)), key=lambda r: r[0])
    print(f"\n`calcscout lint` on a ten-line file: {lint[0]:.3f} s wall, {lint[1]:.3f} s CPU"
          f" (best of 5; an empty python process: {empty[0]:.3f} s wall)")


def jobs(size: int) -> None:
    """``--jobs 2`` against ``--jobs 1`` on the pad claims (same run)."""
    argv = [*CALCSCOUT, "check", str(PAD), "--size", str(size), "--names", "1", "--steps", "12"]
    one = run_measured([*argv, "--jobs", "1"])
    two = run_measured([*argv, "--jobs", "2"])
    if one[0].count("holds") != 2 or two[0].count("holds") != 2:
        raise SystemExit("pad: --jobs changed a verdict")
    print(f"\n--jobs 2 on pad/unpad size {size}: {one[1]:.2f} s -> {two[1]:.2f} s wall,"
          f" speed-up {one[1] / two[1]:.2f}x (peak RSS of the parent {one[3]:.0f} /"
          f" {two[3]:.0f} MiB)")


def scaling() -> None:
    """Cost per case and peak memory of the pad claims as the size grows."""
    print(f"\n{'pad size':>8} {'cases':>7} {'CPU s':>7} {'us/case':>8} {'peak MiB':>9}")
    for size in (7, 8, 9, 10):
        out, _, cpu, rss = run_measured([*CALCSCOUT, "check", str(PAD), "--size", str(size),
                                         "--names", "1", "--steps", "12"])
        cases = int(out.split("pad_back")[1].split("case")[0])
        print(f"{size:>8} {cases:>7} {cpu:>7.2f} {cpu / (2 * cases) * 1e6:>8.0f} {rss:>9.0f}")


if __name__ == "__main__":
    main()
