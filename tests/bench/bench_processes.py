"""How fast a `check` run ends when it is stopped (run: python tests/bench/bench_processes.py).

Prints, for a run that cannot finish (a claim that holds, at size 30: about
9.8e18 cases) and a number of jobs: the seconds from the request to the
parent's exit (SIGTERM to the parent, SIGINT to the process group, a worker
killed), the exit status, and whether any process of the run's group is left;
then the seconds `--jobs 1000` takes to start its workers (capped at the
usable CPUs) against `--jobs 2`.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
BASICS = str(ROOT / "tests" / "data" / "engine" / "basics.calc")
SCRIPT = Path(sys.executable).with_name("calcscout")
CLI = "calcscout.obligations.commands.cli"
COMMAND = [str(SCRIPT)] if SCRIPT.exists() else [sys.executable, "-m", CLI]


def children(pid: int) -> list[int]:
    out: list[int] = []
    for task in os.listdir(f"/proc/{pid}/task"):
        with open(f"/proc/{pid}/task/{task}/children") as f:
            out.extend(int(x) for x in f.read().split())
    return out


def group_left(pgid: int) -> int:
    n = 0
    for e in os.listdir("/proc"):
        if e.isdigit():
            try:
                with open(f"/proc/{e}/stat") as f:
                    st = f.read()
            except OSError:
                continue
            fields = st[st.rindex(")") + 2:].split()
            n += fields[0] != "Z" and int(fields[2]) == pgid
    return n


def started(jobs: int) -> tuple[subprocess.Popen, float]:
    t0 = time.monotonic()
    p = subprocess.Popen([*COMMAND, "check", BASICS, "identity", "--size", "30", "--jobs",
                          str(jobs)], stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
                         start_new_session=True)
    want = min(jobs, len(os.sched_getaffinity(0)))
    while len(children(p.pid)) < (want if want > 1 else 0) or time.monotonic() - t0 < 0.5:
        time.sleep(0.01)
    return p, time.monotonic() - t0


def main() -> None:
    print(f"{'request':<22} {'jobs':>4} {'seconds to exit':>16} {'status':>6} {'left':>4}")
    for how in ("SIGTERM parent", "SIGINT group", "worker killed"):
        for jobs in (1, 2):
            if how == "worker killed" and jobs == 1:
                continue
            p, _ = started(jobs)
            time.sleep(1.0)
            t0 = time.monotonic()
            if how == "SIGTERM parent":
                p.send_signal(signal.SIGTERM)
            elif how == "SIGINT group":
                os.killpg(p.pid, signal.SIGINT)
            else:
                os.kill(children(p.pid)[0], signal.SIGKILL)
            p.wait()
            took = time.monotonic() - t0
            time.sleep(0.2)
            print(f"{how:<22} {jobs:>4} {took:>16.2f} {p.returncode:>6} {group_left(p.pid):>4}")
    for jobs in (2, 1000):
        p, took = started(jobs)
        p.send_signal(signal.SIGTERM)
        p.wait()
        print(f"--jobs {jobs}: workers running {took:.2f} s after the start")


if __name__ == "__main__":
    main()
