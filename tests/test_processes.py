"""Real `check` processes stopped part-way: signals, the time limit, dead and surplus workers.

Each run is its own session (its own process group), so "no process left
behind" is checked on the whole group through /proc, after the parent has
ended: every worker it forked is in that group.  The waits below are guards
against a hang (generous, as the machine may be busy), not timings.
"""

from __future__ import annotations

import io
import json
import os
import re
import signal
import subprocess
import sys
import threading
import time
import xml.etree.ElementTree as ET
from pathlib import Path

import pytest

from calcscout.obligations.commands.cli import main
from calcscout.obligations.progress import (
    LARGE,
    CaseCount,
    ProgressLine,
    count_cases,
    duration_text,
)
from calcscout.obligations.workers import usable_cpus
from calcscout.rules.core.enumerate import count_tuples
from calcscout.rules.loading.load import load_file

DATA = Path(__file__).parent / "data"
BASICS = str(DATA / "engine" / "basics.calc")
ROOT = Path(__file__).parent.parent
SCRIPT = Path(sys.executable).with_name("calcscout")  # the console script of this environment
CLI = "calcscout.obligations.commands.cli"
COMMAND = [str(SCRIPT)] if SCRIPT.exists() else [sys.executable, "-m", CLI]
# `identity` holds, so at size 30 (about 9.8e18 cases) it runs until it is stopped;
# flip_same is refuted at size 4 at once, flip_back holds (not reached when stopped)
ENDLESS = ["--size", "30"]
GUARD = 60.0  # seconds: a run that takes longer than this is hung


_RUNS: list[Run] = []


@pytest.fixture(autouse=True)
def _end_every_run():
    """Whatever a test asserted, end its process groups (by their own ids) and close pipes."""
    yield
    while _RUNS:
        run = _RUNS.pop()
        if group_members(run.p.pid):
            os.killpg(run.p.pid, signal.SIGKILL)
        run.p.wait(GUARD)
        for r in run.readers:
            r.join(10.0)
        run.close()


class Run:
    """A `calcscout` process in its own session, its standard error read as it comes."""

    def __init__(self, *args: str, cwd: Path) -> None:
        self.p = subprocess.Popen([*COMMAND, *args], cwd=cwd, stdout=subprocess.PIPE,
                                  stderr=subprocess.PIPE, text=True, start_new_session=True)
        self.err_lines: list[str] = []
        self.out_lines: list[str] = []
        self.readers = [threading.Thread(target=self._read, args=(stream, into), daemon=True)
                        for stream, into in ((self.p.stderr, self.err_lines),
                                             (self.p.stdout, self.out_lines))]
        for r in self.readers:
            r.start()
        _RUNS.append(self)

    @staticmethod
    def _read(stream, into: list[str]) -> None:
        for line in stream:
            into.append(line)

    def wait_for(self, text: str) -> None:
        deadline = time.monotonic() + GUARD
        while not any(text in x for x in self.err_lines):
            assert self.p.poll() is None, f"ended before saying {text!r}: {self.err_lines}"
            assert time.monotonic() < deadline, f"never said {text!r}"
            time.sleep(0.05)

    def workers(self, n: int) -> list[int]:
        """Wait until the parent has at least n children (its workers); their pids."""
        deadline = time.monotonic() + GUARD
        while len(kids := children(self.p.pid)) < n:
            assert self.p.poll() is None and time.monotonic() < deadline, "no workers"
            time.sleep(0.05)
        return kids

    def finish(self) -> int:
        self.p.wait(GUARD)
        for r in self.readers:  # a pipe stays open while any process left behind holds it
            r.join(10.0)
        self.close()
        return self.p.returncode

    def close(self) -> None:
        for stream in (self.p.stdout, self.p.stderr):
            if stream is not None and not any(r.is_alive() for r in self.readers):
                stream.close()

    @property
    def out(self) -> str:
        return "".join(self.out_lines)

    @property
    def err(self) -> str:
        return "".join(self.err_lines)


def children(pid: int) -> list[int]:
    out: list[int] = []
    try:
        for task in os.listdir(f"/proc/{pid}/task"):
            with open(f"/proc/{pid}/task/{task}/children") as f:
                out.extend(int(x) for x in f.read().split())
    except FileNotFoundError:
        pass
    return out


def _stat(pid: int) -> list[str] | None:
    try:
        with open(f"/proc/{pid}/stat") as f:
            text = f.read()
    except (FileNotFoundError, ProcessLookupError):
        return None
    return text[text.rindex(")") + 2:].split()  # after "pid (comm) ": state, ppid, pgrp, ...


def alive(pid: int) -> bool:
    st = _stat(pid)
    return st is not None and st[0] != "Z"  # a zombie runs nothing; its reaper may be slow


def group_members(pgid: int) -> list[int]:
    out = []
    for entry in os.listdir("/proc"):
        if entry.isdigit():
            st = _stat(int(entry))
            if st is not None and st[0] != "Z" and int(st[2]) == pgid:
                out.append(int(entry))
    return out


def assert_nothing_left(run: Run, workers: list[int]) -> None:
    deadline = time.monotonic() + 5.0  # the kernel finishes a SIGKILL asynchronously
    while (left := group_members(run.p.pid) + [w for w in workers if alive(w)]) \
            and time.monotonic() < deadline:
        time.sleep(0.05)
    assert not left, f"processes left running: {left}"


def without_seconds(entry: dict) -> dict:
    """An entry without what differs between two runs: its time, its file as the run named it."""
    return {k: v for k, v in entry.items() if k not in ("seconds", "file")}


# ---------------------------------------------------------------- stop requests


@pytest.mark.parametrize("sig, jobs, status", [
    (signal.SIGTERM, 2, 143), (signal.SIGTERM, 1, 143),
    (signal.SIGINT, 2, 130), (signal.SIGINT, 1, 130)])
def test_a_stop_request_reports_what_was_decided_and_leaves_nothing(tmp_path, capsys, sig, jobs,
                                                                    status) -> None:
    """SIGTERM to the parent (a service manager, `timeout`, `kill`) or SIGINT to the whole
    process group (Ctrl-C at a terminal): the workers are stopped, the report keeps the claims
    decided, the others are inconclusive cut by "interrupted", and the exit status is 128 + the
    signal.  Family: every way a run is stopped from outside; also checked: the JUnit report,
    the text report, a stop of a one-process run (the enumeration is cut where it is), a stop
    of a shard (merge refuses it, next test), the parent killed outright (below), the time
    limit (below); `terms`, `reduce` and `pairs` fork nothing and die by default handlers."""
    run = Run("check", BASICS, "flip_same", "identity", "flip_back", *ENDLESS, "--jobs", str(jobs),
              "--json", "r.json", "--junit", "r.xml", cwd=tmp_path)
    run.wait_for("identity: 9,796,674,766,983,312,448 cases")
    workers = run.workers(jobs) if jobs > 1 else []
    if sig == signal.SIGINT:
        os.killpg(run.p.pid, sig)  # as a terminal does: the workers get it too
    else:
        run.p.send_signal(sig)
    assert run.finish() == status, run.err
    assert_nothing_left(run, workers)
    assert f"stopped by {sig.name}; 2 claim(s) not decided" in run.err
    assert "Traceback" not in run.err
    report = json.loads((tmp_path / "r.json").read_text())
    assert report["stopped"] == sig.name
    got = {c["name"]: c for c in report["claims"]}
    # the claim decided before the stop keeps the verdict an unstopped run gives it
    code = _in_process(capsys, "check", BASICS, "flip_same", *ENDLESS, "--json",
                       str(tmp_path / "alone.json"))
    assert code == 1
    alone = json.loads((tmp_path / "alone.json").read_text())["claims"][0]
    assert without_seconds(got["flip_same"]) == without_seconds(alone)
    for name in ("identity", "flip_back"):
        assert got[name]["verdict"] == "inconclusive" and got[name]["cut_by"] == "interrupted"
        assert f"stopped by {sig.name}" in got[name]["reason"]
    cases = {c.get("name"): c for c in ET.parse(tmp_path / "r.xml").getroot().iter("testcase")}
    assert cases["flip_same"].find("failure") is not None
    assert cases["identity"].find("skipped") is not None
    assert run.out.rstrip().endswith("summary: 1 refuted, 2 inconclusive")


def _in_process(capsys, *args: str) -> int:
    with pytest.raises(SystemExit) as info:
        main(list(args))
    capsys.readouterr()
    return int(info.value.code or 0)


def test_a_stopped_shard_is_not_merged(tmp_path, capsys) -> None:
    """A shard stopped part-way has the records of only some of its work: merging it would
    give verdicts no whole run gives.  Family: reports that look whole and are not; also
    checked: a stop after every claim was decided leaves the report unmarked (whole)."""
    run = Run("check", BASICS, "identity", *ENDLESS, "--shard", "1/2", "--json", "s1.json",
              cwd=tmp_path)
    run.wait_for("identity:")
    run.p.send_signal(signal.SIGTERM)
    assert run.finish() == 143
    assert json.loads((tmp_path / "s1.json").read_text())["stopped"] == "SIGTERM"
    assert _in_process(capsys, "check", BASICS, "identity", "--shard", "2/2", "--json",
                       str(tmp_path / "s2.json")) == 0
    with pytest.raises(SystemExit) as info:
        main(["merge", str(tmp_path / "s1.json"), str(tmp_path / "s2.json"), "-o",
              str(tmp_path / "m.json")])
    _, err = capsys.readouterr()
    assert info.value.code == 2
    assert "s1.json is the report of a shard stopped by SIGTERM" in err
    assert not (tmp_path / "m.json").exists()


def test_time_limit_stops_like_a_signal(tmp_path) -> None:
    """`--time-limit` ends the run by itself the way a stop request does: same report (cut by
    "interrupted"), the workers stopped; the exit status is the verdicts' (3 here: nothing
    refuted, something inconclusive).  Family: stops from inside; also checked: the limit
    does not reach the workers (they do not inherit the timer) and a run that ends before
    the limit is unchanged (the last assertion)."""
    run = Run("check", BASICS, "identity", "flip_back", *ENDLESS, "--jobs", "2",
              "--time-limit", "1", "--json", "r.json", cwd=tmp_path)
    run.wait_for("identity:")
    workers = children(run.p.pid)
    assert run.finish() == 3, run.err
    assert_nothing_left(run, workers)
    assert "stopped by time limit" in run.err
    claims = json.loads((tmp_path / "r.json").read_text())["claims"]
    assert [(c["verdict"], c["cut_by"]) for c in claims] == [("inconclusive", "interrupted")] * 2
    assert "time limit (1 s)" in claims[0]["reason"]
    quick = Run("check", BASICS, "identity", "--jobs", "2", "--time-limit", "60", cwd=tmp_path)
    assert quick.finish() == 0 and "holds" in quick.out and quick.err == ""


def test_killed_parent_takes_its_workers_with_it(tmp_path) -> None:
    """`kill -9` of the parent runs no handler at all: the workers must end by themselves
    (they asked the kernel for it, and they check their parent) instead of running on,
    re-parented, at full CPU."""
    run = Run("check", BASICS, "identity", *ENDLESS, "--jobs", "2", cwd=tmp_path)
    run.wait_for("identity:")
    workers = run.workers(2)
    run.p.kill()
    run.finish()
    assert_nothing_left(run, workers)


# ---------------------------------------------------------------- workers


def test_a_dead_worker_ends_the_run_naming_its_cases(tmp_path) -> None:
    """A worker killed (by hand, by the out-of-memory killer) used to leave `check --jobs`
    waiting forever.  Now the parent sees it at once, stops the other worker, writes no report
    (nothing was decided) and exits 70: the run failed, not the input (2 would tell a script
    its file or command line is wrong).  Family: a worker that ends without its result;
    also checked: a worker that raises (next test) gives the one-process error."""
    run = Run("check", BASICS, "identity", *ENDLESS, "--jobs", "2", "--json", "r.json",
              cwd=tmp_path)
    run.wait_for("identity:")
    workers = run.workers(2)
    time.sleep(0.5)
    victim = workers[0]  # holds cases 1, 3, 5, ... or 2, 4, 6, ...: the message says which
    os.kill(victim, signal.SIGKILL)
    assert run.finish() == 70, run.err
    assert_nothing_left(run, workers)
    assert f"worker process (pid {victim}, one of 2) was killed by SIGKILL" in run.err
    held = re.search(r"every 2nd case in the order of enumeration from case (\d) on "
                     r"\(cases (\d), (\d), (\d), \.\.\.\)", run.err)
    assert held is not None, run.err
    first = int(held.group(1))
    assert first in (1, 2) and [int(held.group(i)) for i in (2, 3, 4)] == [first, first + 2,
                                                                           first + 4]
    assert "Traceback" not in run.err and "internal error" not in run.err
    assert not (tmp_path / "r.json").exists()


def test_an_error_in_a_worker_is_the_one_process_error(capsys) -> None:
    """A case that raises in a worker (a translation with a missing case, met at run time)
    is a user error as in a one-process run (exit 2, the claim and the place named); it used
    to be an internal error, exit 70, as the exception could not be rebuilt in the parent.
    Known limit: when several cases raise, the case named is the one whose worker came
    first, not always the first in the order of enumeration."""
    path = str(DATA / "engine" / "runtime-failure.calc")
    with pytest.raises(SystemExit) as one:
        main(["check", path])
    out_one = capsys.readouterr().out
    with pytest.raises(SystemExit) as two:
        main(["check", path, "--jobs", "2"])
    out_two = capsys.readouterr().out
    # the claim's error verdict (the run goes on to the other claims), exit 2 at the end
    assert one.value.code == two.value.code == 2
    same = "error        breaks  translation only_val: no equation of only_val matches app(x, x)"
    assert same in out_one and same in out_two

    def untimed(text: str) -> list[str]:
        return [re.sub(r"\d+\.\d+s$", "", line) for line in text.splitlines()]

    assert untimed(out_one) == untimed(out_two)  # the case, the place and the hint


def test_jobs_above_the_cpus_are_capped(tmp_path, capsys) -> None:
    """`--jobs 1000` forked 1000 processes (28 s, 2.7 GB) on a 2-CPU machine; now it uses
    the CPUs this process may run on, and says so once.  Family: the number of processes
    asked for; also checked: the report is that of --jobs 1, and --jobs 0 is refused."""
    cpus = usable_cpus()
    assert cpus == len(os.sched_getaffinity(0))
    run = Run("check", BASICS, "identity", *ENDLESS, "--jobs", "1000", cwd=tmp_path)
    run.wait_for("identity:")
    workers = run.workers(min(cpus, 2)) if cpus > 1 else []
    time.sleep(0.3)
    assert len(children(run.p.pid)) <= cpus
    run.p.send_signal(signal.SIGTERM)
    assert run.finish() == 143
    assert_nothing_left(run, workers)
    assert run.err.count(f"--jobs 1000 is more than the {cpus} CPU(s)") == 1
    assert f"using {cpus}" in run.err
    a = _report(capsys, "check", BASICS, "flip_same", "forked", "--jobs", "1000", "--json", "-")
    b = _report(capsys, "check", BASICS, "flip_same", "forked", "--json", "-")
    assert [without_seconds(c) for c in a["claims"]] == [without_seconds(c) for c in b["claims"]]
    assert _in_process(capsys, "check", BASICS, "--jobs", "0") == 2


def _report(capsys, *args: str) -> dict:
    with pytest.raises(SystemExit):
        main(list(args))
    return json.loads(capsys.readouterr().out)


# ---------------------------------------------------------------- counts and progress


def test_a_size_that_cannot_finish_says_its_count_first(tmp_path, capsys) -> None:
    """`--size 30` started silently; now the exact number of cases comes first, on standard
    error (the report is unchanged).  Family: how much work a run is; also checked: no notice
    for a small run, a count too slow to finish is given as "more than" (next test)."""
    run = Run("check", BASICS, "identity", *ENDLESS, cwd=tmp_path)
    run.wait_for("cases up to size 30")
    run.p.send_signal(signal.SIGTERM)
    assert run.finish() == 143
    notice = next(x for x in run.err_lines if "cases up to size 30" in x)
    # the same number `terms --count` computes for lam.term (one metavariable, names 1)
    assert _in_process_out(capsys, "terms", BASICS, "lam.term", "--size", "30", "--names", "1",
                           "--count") == "9796674766983312448"
    assert notice == "calcscout: identity: 9,796,674,766,983,312,448 cases up to size 30\n"
    small = subprocess.run([*COMMAND, "check", BASICS, "identity"], cwd=tmp_path,
                           capture_output=True, text=True, timeout=GUARD)
    assert small.returncode == 0 and small.stderr == ""


def _in_process_out(capsys, *args: str) -> str:
    with pytest.raises(SystemExit):
        main(list(args))
    return capsys.readouterr().out.strip()


def test_counting_stops_at_its_budget() -> None:
    """Counting is instant for most grammars but takes minutes for pairs of large terms:
    past its budget the count is a lower bound, said so."""
    spec = load_file(BASICS)
    slots = [(spec.calculi["lam"], "term")] * 2
    exact = count_cases(slots, 9, 1)
    assert exact.exact and exact.total == count_tuples(slots, 9, 1)
    ticks = iter(range(100))  # each size "takes" 1 s: sizes 1 to 3 fit in 5.5 s, size 4 would not
    cut = count_cases(slots, 9, 1, budget=5.5, clock=lambda: float(next(ticks)))
    assert not cut.exact and cut.counted == 3
    assert cut.total == count_tuples(slots, cut.counted, 1)
    line = ProgressLine(io.StringIO(), tty=False)
    line.begin("pairs", cut)
    assert line.stream.getvalue() == (f"calcscout: pairs: more than {cut.total:,} cases "
                                      f"(counting stopped at size {cut.counted}) up to size 9\n")


def test_progress_line_shows_decided_rate_size_and_time_left() -> None:
    """The line drawn on a terminal: cases decided of the total, the rate, the size being
    decided, and the time left at that rate (once the rate is known)."""
    now = [100.0]
    out = io.StringIO()
    line = ProgressLine(out, clock=lambda: now[0], tty=True)
    cases = CaseCount([0, 1, 2, 4, 13, 42, 139, 506], 7)  # invented counts by size
    line.begin("c", cases)
    assert out.getvalue() == ""  # 707 cases: no notice
    now[0] = 100.5
    line("c", 10, cases.total)
    assert out.getvalue() == ""  # nothing in the first second
    now[0] = 101.0
    line("c", 100, cases.total)
    assert out.getvalue().endswith("c: 100 of 707 cases, size 6\x1b[K")  # 62 cases below 6
    now[0] = 104.0
    line("c", 400, cases.total)
    shown = out.getvalue().rsplit("\r", 1)[1]
    assert shown == "  c: 400 of 707 cases, 100/s, size 7, about 3 s left\x1b[K"
    line.clear()
    assert out.getvalue().endswith("\r\x1b[K")
    big = CaseCount([0] + [LARGE] * 3, 3)
    line.begin("d", big)
    assert "calcscout: d: 3,000,000 cases up to size 3\n" in out.getvalue()
    assert duration_text(3 * 3600) == "3.0 h" and duration_text(1e18).endswith("e+10 years")


def test_an_unfinished_claim_has_the_entries_of_a_finished_one() -> None:
    """A stopped claim is reported with the same entries, in the same order, as when it is
    decided (its own, its shorthand parts, its normalize parts), so that a report consumer
    finds every name it expects."""
    from calcscout.obligations.runner import (
        RunOptions,
        claim_records,
        finish_claim,
        unfinished_verdicts,
    )
    from calcscout.rules.core.spec import Bounds

    for path in (BASICS, str(ROOT / "rules" / "library" / "plotkin-cps.calc")):
        spec = load_file(path)
        opts = RunOptions(bounds=Bounds(size=3, steps=4, nodes=200))
        for claim in spec.claims:
            decided = finish_claim(claim_records(spec, claim, opts))
            stopped = unfinished_verdicts(spec, claim, opts, "stopped")
            assert [(v.name, v.part_of) for v in stopped] == [(v.name, v.part_of) for v in decided]
            assert {(v.verdict, v.cut_by) for v in stopped} == {("inconclusive", "interrupted")}
