"""Stopping a run part-way: SIGINT, SIGTERM and the time limit all end the same way.

``check`` installs a :class:`StopSignals` around the run.  While the runner is
deciding a claim (inside :meth:`StopSignals.armed`), the first stop request
raises :class:`RunStopped` in the main thread; the runner catches it, keeps the
verdicts of the claims already decided, marks the others inconclusive
(``cut_by: "interrupted"``) and re-raises with that report attached, and
``check`` writes it and exits with the request's status.  Outside an armed
section a request is only recorded (:attr:`StopSignals.cause`), so bookkeeping
and report writing are never cut in half; later requests are ignored, because
what follows the first one (stopping the workers, writing the report) is short
and bounded.

The time limit is a ``SIGALRM`` timer, so it stops a run exactly where a
signal would; the forked workers do not inherit the timer (POSIX), and they
reset these handlers first thing (:mod:`obligations.workers`).
"""

from __future__ import annotations

import signal
import threading
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

#: the cut_by of a claim that a stop request left undecided
INTERRUPTED = "interrupted"

# shell convention: 128 + the signal's number
_STATUS = {signal.SIGINT: 130, signal.SIGTERM: 143}


class RunStopped(BaseException):
    """The run was asked to stop (a BaseException, like KeyboardInterrupt, so that no
    ``except Exception`` in an engine swallows it).

    ``status`` is the exit status (None: from the verdicts, as for the time
    limit); ``verdicts`` and ``records`` are attached by the runner: the report
    of what was decided, the rest inconclusive.
    """

    def __init__(self, cause: str, status: int | None, reason: str):
        super().__init__(cause)
        self.cause = cause  # "SIGINT", "SIGTERM" or "time limit"
        self.status = status
        self.reason = reason  # why an undecided claim is inconclusive, for the report
        self.verdicts: list[Any] | None = None
        self.records: dict[str, Any] | None = None


class StopSignals:
    """Turns SIGINT, SIGTERM and an optional time limit into :class:`RunStopped`."""

    def __init__(self, time_limit: float | None = None) -> None:
        self.time_limit = time_limit
        self.request: RunStopped | None = None
        self._armed = False
        self._old: dict[int, Any] = {}

    @property
    def cause(self) -> str | None:
        return self.request.cause if self.request else None

    def __enter__(self) -> StopSignals:
        global _active
        if threading.current_thread() is not threading.main_thread():
            return self  # signals reach only the main thread: nothing to install
        _active = self
        for signum in (signal.SIGINT, signal.SIGTERM, signal.SIGALRM):
            self._old[signum] = signal.signal(signum, self._handle)
        if self.time_limit is not None:
            signal.setitimer(signal.ITIMER_REAL, self.time_limit)
        return self

    def __exit__(self, *exc) -> None:
        global _active
        if _active is self:
            _active = None
        if self.time_limit is not None and self._old:
            signal.setitimer(signal.ITIMER_REAL, 0)
        for signum, old in self._old.items():
            signal.signal(signum, old)
        self._old.clear()

    @contextmanager
    def armed(self) -> Iterator[None]:
        """A section where a stop request interrupts the work at once."""
        if self.request is not None:
            raise self.request
        self._armed = True
        try:
            yield
        finally:
            self._armed = False

    def _handle(self, signum: int, frame) -> None:
        if self.request is not None:
            return  # already stopping; what is left to do is short
        if signum == signal.SIGALRM:
            self.request = RunStopped("time limit", None,
                                      f"the time limit ({self.time_limit:g} s) was reached "
                                      "before this claim was decided")
        else:
            name = signal.Signals(signum).name
            self.request = RunStopped(name, _STATUS[signum],
                                      f"the run was stopped by {name} before this claim "
                                      "was decided")
        if self._armed:
            # Raised where the main thread happens to be.  If that is a garbage-collector
            # callback or a finaliser, Python swallows it: the request stays recorded and
            # :func:`poll`, called by the engines' loops, raises it again.
            raise self.request

    def poll(self) -> None:
        if self.request is not None and self._armed:
            raise self.request


_active: StopSignals | None = None


def poll() -> None:
    """Raise a stop request recorded while the work is armed (cheap: call it often)."""
    if _active is not None:
        _active.poll()
