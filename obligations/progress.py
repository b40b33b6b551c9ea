"""How many cases a run has, and how far it is: the notice and the progress line.

Both go to standard error and never into the report, so the report is the
same with or without them.  The notice (one line at the start of an
obligation with more than :data:`LARGE` cases) is printed always, so that a
size that cannot finish is seen at once; the progress line only on a
terminal, as it rewrites itself.
"""

from __future__ import annotations

import shutil
import sys
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass

from calcscout.rules.core.enumerate import _count_specs, _Space
from calcscout.rules.core.spec import Calculus

#: an obligation with more cases than this gets a notice line before it starts
LARGE = 1_000_000
#: seconds counting may take before the count is given as "more than"
COUNT_BUDGET = 1.0


@dataclass
class CaseCount:
    """The cases of one obligation by total size: ``by_size[n]`` for ``n <= counted``."""

    by_size: list[int]
    size: int  # the size bound
    share: int = 1  # this run decides every share-th case (--shard I/N, N = share)

    @property
    def exact(self) -> bool:
        return len(self.by_size) > self.size

    @property
    def counted(self) -> int:
        return len(self.by_size) - 1

    @property
    def total(self) -> int:
        """This run's cases (a lower bound when not exact)."""
        return -(-sum(self.by_size) // self.share)

    def size_at(self, done: int) -> int | None:
        """The total size of the cases being decided after ``done`` of this run's cases."""
        seen = 0
        for n, c in enumerate(self.by_size):
            seen += c
            if seen > done * self.share:
                return n
        return None if not self.exact else self.size


def count_cases(slots: Sequence[tuple[Calculus, str]], size: int, names: int,
                share: int = 1, budget: float = COUNT_BUDGET,
                clock: Callable[[], float] = time.perf_counter) -> CaseCount:
    """The cases of :func:`calcscout.rules.core.enumerate.enumerate_tuples` by total size, counted without
    building a term, size by size until ``budget`` seconds are spent.

    The same sums as :func:`calcscout.rules.core.enumerate.count_tuples`, in one shared space
    so that each size reuses the counts of the smaller ones; counting is fast
    for most grammars but grows quickly for large ones (minutes at size 14 for
    pairs of CPS terms), hence the budget.
    """
    by_size = [0]
    if not slots:
        return CaseCount([0] * (size + 1), size, share)
    space = _Space([c for c, _ in slots], names)
    cspecs = _count_specs(tuple(space.slot(c, s).spec() for c, s in slots))
    start = last = clock()
    step = 0.0
    for n in range(1, size + 1):
        if n > 1 and (last - start) + 3 * step > budget:  # the next size costs a few times more
            break
        by_size.append(space.seq_total(cspecs, n, space.zero) if n >= len(cspecs) else 0)
        now = clock()
        step, last = now - last, now
    return CaseCount(by_size, size, share)


def count_text(c: CaseCount) -> str:
    if c.exact:
        return f"{c.total:,} cases"
    return f"more than {c.total:,} cases (counting stopped at size {c.counted})"


def duration_text(seconds: float) -> str:
    """A rough duration: 40 s, 12 min, 3.5 h, 12 days, 3,400 years, 2.1e+12 years."""
    if seconds < 90:
        return f"{seconds:.0f} s"
    if seconds < 90 * 60:
        return f"{seconds / 60:.0f} min"
    if seconds < 48 * 3600:
        return f"{seconds / 3600:.1f} h"
    days = seconds / 86400
    if days < 730:
        return f"{days:.0f} days"
    years = days / 365.25
    return f"{years:,.0f} years" if years < 1e6 else f"{years:.1e} years"


def _compact(n: int) -> str:
    """A count short enough for one terminal line (the notice gives it exactly)."""
    return f"{n:,}" if n < 10**9 else f"{n:.2g}"


class ProgressLine:
    """The notice and the one-line progress display of ``check`` on standard error.

    The line shows cases decided (of how many), the rate, the total size of the
    cases being decided and, once the rate is known (after
    :attr:`SETTLE` seconds), the time left at the rate of the last
    :attr:`WINDOW` seconds.  Drawn only on a terminal, only after 1 s, at most
    ten times a second.
    """

    SETTLE = 2.0
    WINDOW = 10.0

    def __init__(self, stream=None, clock: Callable[[], float] = time.monotonic,
                 tty: bool | None = None) -> None:
        self.stream = stream if stream is not None else sys.stderr
        self.clock = clock
        self.start = clock()
        self.last = 0.0
        self.enabled = self.stream.isatty() if tty is None else tty
        self.shown = False
        self.name = ""
        self.cases: CaseCount | None = None
        self.began = self.start
        self.samples: list[tuple[float, int]] = []

    def begin(self, name: str, cases: CaseCount) -> None:
        """An obligation starts: say its number of cases if it is large."""
        self.name, self.cases = name, cases
        self.began = self.clock()
        self.samples = [(self.began, 0)]
        if cases.total > LARGE or not cases.exact:
            self.clear()
            self.stream.write(f"calcscout: {name}: {count_text(cases)} up to size {cases.size}\n")
            self.stream.flush()

    def __call__(self, name: str, done: int, total: int) -> None:
        now = self.clock()
        if not self.enabled or now - self.start < 1.0 or now - self.last < 0.1:
            return
        self.last = now
        if name != self.name or self.cases is None:
            self.name, self.cases = name, CaseCount([total], 0)
            self.began, self.samples = now, [(now, 0)]
        self.samples.append((now, done))
        while len(self.samples) > 2 and now - self.samples[1][0] > self.WINDOW:
            self.samples.pop(0)
        line = self.text(done, now)
        width = shutil.get_terminal_size((80, 24)).columns
        self.stream.write("\r" + line[: max(width - 1, 20)] + "\x1b[K")
        self.stream.flush()
        self.shown = True

    def text(self, done: int, now: float) -> str:
        c = self.cases
        assert c is not None
        total = _compact(c.total) if c.exact else f"over {_compact(c.total)}"
        parts = [f"  {self.name}: {done:,} of {total} cases"]
        t0, d0 = self.samples[0]
        rate = (done - d0) / (now - t0) if now > t0 else 0.0
        if now - self.began >= self.SETTLE and rate > 0:
            parts.append(f"{rate:,.0f}/s")
        size = c.size_at(done)
        if size is not None and c.size:
            parts.append(f"size {size}")
        if now - self.began >= self.SETTLE and rate > 0:
            left = duration_text(max(c.total - done, 0) / rate)
            parts.append(f"about {left} left" if c.exact else f"at least {left} left")
        return ", ".join(parts)

    def clear(self) -> None:
        if self.shown:
            self.stream.write("\r\x1b[K")
            self.stream.flush()
            self.shown = False
