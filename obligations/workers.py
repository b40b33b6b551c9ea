"""``--jobs``: one forked worker process per shard of an obligation's enumeration.

The parent starts the workers, then waits on their result pipes and their
process sentinels together, so that it sees at once a worker that ends
without a result (killed, out of memory) instead of waiting for it forever;
it then stops the others and raises :class:`WorkerLost`, naming the cases the
dead worker held.  Whatever ends the wait (a result error, a lost worker, a
stop request raised by :mod:`obligations.stopping`), the workers are stopped
before it goes on: SIGTERM, then SIGKILL for any still there a second later.

A worker ignores SIGINT (a Ctrl-C at the terminal reaches the whole process
group; the parent decides) and dies on SIGTERM.  It asks the kernel to kill it
if the parent dies (Linux ``PR_SET_PDEATHSIG``), and also checks its parent
with every progress report, so that not even a ``kill -9`` of the parent
leaves it running.
"""

from __future__ import annotations

import ctypes
import multiprocessing
import os
import signal
import sys
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from multiprocessing.connection import Connection, wait
from typing import Any

from calcscout.obligations.claims import Obligation
from calcscout.obligations.engines import enumeration
from calcscout.rules.core.errors import CalcError
from calcscout.rules.core.spec import Bounds, Spec

_SIGNALS = {signal.SIGINT, signal.SIGTERM, signal.SIGALRM}
_GRACE = 1.0  # seconds a worker has to die of SIGTERM before SIGKILL


class WorkerLost(CalcError):
    """A worker process ended without its result.

    Exit status 70 (EX_SOFTWARE in sysexits.h, common practice; what calcscout
    uses for its own failures): the run failed and reached no verdict.  Not 2,
    which tells a script that its file or command line is wrong; they are not.
    """

    exit_code = 70


def usable_cpus() -> int:
    """The CPUs this process may run on (its affinity mask, not the machine's count)."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):  # no affinity call on this system
        return max(1, os.cpu_count() or 1)


@dataclass
class _Worker:
    process: Any  # multiprocessing.Process
    conn: Connection
    shard: tuple[int, int]
    result: Any = None
    finished: bool = False


def run_shards(spec: Spec, ob: Obligation, b: Bounds, shards: list[tuple[int, int]],
               collect_all: bool, progress: Callable[[int], None] | None,
               poll: float = 0.2) -> list[enumeration.Partial]:
    """Each shard's partial, in the order of ``shards``, each computed in its own process."""
    ctx = multiprocessing.get_context("fork")
    done = ctx.RawArray("q", len(shards))  # cases decided, one slot per worker (its own writes)
    workers: list[_Worker] = []
    for stream in (sys.stdout, sys.stderr):  # or a child would write the parent's buffer again
        stream.flush()
    try:
        with _signals_blocked():  # a signal between fork and the worker's own handlers
            for slot, shard in enumerate(shards):
                recv, send = ctx.Pipe(duplex=False)
                p = ctx.Process(target=_work, daemon=True, name=f"calcscout-{ob.name}-{slot + 1}",
                                args=(spec, ob, b, shard, collect_all, done, slot, send,
                                      os.getpid()))
                p.start()
                send.close()
                workers.append(_Worker(p, recv, shard))
        while not all(w.finished for w in workers):
            waiting = [w for w in workers if not w.finished]
            wait([w.conn for w in waiting] + [w.process.sentinel for w in waiting], poll)
            for w in waiting:
                _collect(w, ob, done, workers)
            if progress is not None:
                progress(sum(done))
        return [w.result for w in workers]
    finally:
        _stop(workers)


def _collect(w: _Worker, ob: Obligation, done, workers: list[_Worker]) -> None:
    """Take a worker's result if it sent one; raise if it ended without."""
    if w.conn.poll():
        try:
            kind, value = w.conn.recv()
        except EOFError:
            kind, value = "lost", None
        if kind == "error":
            raise value.rebuild()
        if kind == "ok":
            w.result, w.finished = value, True
            return
    elif w.process.exitcode is None:
        return  # still working
    raise _lost(w, ob, done[workers.index(w)], len(workers))


def _lost(w: _Worker, ob: Obligation, decided: int, jobs: int) -> WorkerLost:
    code = w.process.exitcode
    if code is None or code >= 0:
        how = f"exited with status {code}"
    else:
        how = f"was killed by {signal.Signals(-code).name}"
    first, stride = w.shard
    step = f"every {_ordinal(stride)} case" if stride > 1 else "every case"
    held = f"cases {first}, {first + stride}, {first + 2 * stride}, ..." if stride > 1 else ""
    last = first + (decided - 1) * stride
    # the count is reported every 64 cases: at least these were decided
    upto = (f"had decided at least {decided:,} of them (up to case {last:,})" if decided
            else "had decided none of them yet")
    return WorkerLost(
        f"a worker process (pid {w.process.pid}, one of {jobs}) {how} while checking "
        f"{ob.name}; it held {step} in the order of enumeration from case {first} on"
        + (f" ({held})" if held else "") + f", and {upto}; no verdict is given",
        hint="if it ran out of memory, use fewer --jobs or a smaller --size")


def _ordinal(n: int) -> str:
    suffix = "th" if 10 <= n % 100 <= 20 else {1: "st", 2: "nd", 3: "rd"}.get(n % 10, "th")
    return f"{n}{suffix}"


def _stop(workers: list[_Worker]) -> None:
    """End every worker still running, and reap them all (bounded time)."""
    alive = [w for w in workers if w.process.exitcode is None]
    for w in alive:
        _signal(w.process, signal.SIGTERM)
    deadline = time.monotonic() + _GRACE
    for w in alive:
        w.process.join(max(0.0, deadline - time.monotonic()))
    for w in alive:
        if w.process.exitcode is None:
            _signal(w.process, signal.SIGKILL)
            w.process.join()
    for w in workers:
        w.conn.close()
        w.process.join(0)


def _signal(process, signum: int) -> None:
    try:
        os.kill(process.pid, signum)
    except ProcessLookupError:
        pass


@contextmanager
def _signals_blocked() -> Iterator[None]:
    old = signal.pthread_sigmask(signal.SIG_BLOCK, _SIGNALS)
    try:
        yield
    finally:
        signal.pthread_sigmask(signal.SIG_SETMASK, old)


# ---------------------------------------------------------------- in the worker


def _work(spec: Spec, ob: Obligation, b: Bounds, shard: tuple[int, int], collect_all: bool,
          done, slot: int, conn: Connection, parent: int) -> None:
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    signal.signal(signal.SIGTERM, signal.SIG_DFL)
    signal.signal(signal.SIGALRM, signal.SIG_DFL)
    signal.pthread_sigmask(signal.SIG_UNBLOCK, _SIGNALS)
    _die_with_parent(parent)

    def count(tried: int) -> None:
        done[slot] = tried
        if os.getppid() != parent:  # orphaned: the parent died without stopping us
            os._exit(1)

    try:
        msg: tuple[str, Any] = ("ok", enumeration.run_shard(spec, ob, b, shard, collect_all, count))
    except Exception as e:  # the parent raises it again, as a one-process run would
        msg = ("error", _Raised(e))
    try:
        conn.send(msg)
    except Exception as e:  # something in it does not pickle
        conn.send(("error", _Raised(RuntimeError(f"{type(msg[1]).__name__}: {msg[1]} ({e})"))))
    conn.close()


class _Raised:
    """An exception on its way from a worker to the parent, rebuilt there without calling
    its ``__init__`` (pickle calls it with ``args`` alone, which fails for an exception whose
    constructor takes other arguments, such as a translation failure)."""

    def __init__(self, e: Exception) -> None:
        self.kind, self.args, self.state = type(e), e.args, dict(vars(e))

    def rebuild(self) -> Exception:
        e = self.kind.__new__(self.kind, *self.args)
        e.args = self.args
        vars(e).update(self.state)
        return e


def _die_with_parent(parent: int) -> None:
    """Ask the kernel to SIGKILL this process when its parent dies (Linux only)."""
    try:
        libc = ctypes.CDLL(None, use_errno=True)
        libc.prctl(1, signal.SIGKILL, 0, 0, 0)  # 1 = PR_SET_PDEATHSIG
    except (OSError, AttributeError):
        pass  # not Linux: the parent check in count() remains
    if os.getppid() != parent:  # the parent died before the request took effect
        os._exit(1)
