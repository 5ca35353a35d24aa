"""A CPU-time budget for work whose cost the checked repository controls (a regular expression it
supplies, run against a text): the work is interrupted, not waited for.

The budget is a one-shot CPU timer of the process (``ITIMER_PROF``: CPU time in user and system
mode, so a busy machine does not shorten it, and memory-heavy work counts in full) whose signal raises ``OverBudget`` in the main thread. Python's
regular-expression engine checks for signals while it matches, so a match that backtracks without
end is stopped too. Where no such timer exists (a platform without ``setitimer``, a thread other
than the main one) ``NoBudget`` is raised before any work starts: callers report that they could
not test, and never run the work unbounded.
"""
from __future__ import annotations

import signal
import sys
from contextlib import contextmanager


class OverBudget(Exception):
    """The work used up its CPU-time budget and was interrupted."""


class NoBudget(Exception):
    """No CPU timer is available here: the work was not started."""


def available() -> bool:
    return hasattr(signal, "setitimer") and _in_main_thread()


def _in_main_thread() -> bool:
    """Whether this is the main thread. Until ``threading`` is imported no thread was started
    through it, so this is the main one (a plain check never imports it: start-up); a thread
    started some other way is caught where the signal handler is set (``cpu_budget``)."""
    threading = sys.modules.get("threading")
    return threading is None or threading.current_thread() is threading.main_thread()


@contextmanager
def cpu_budget(seconds: float):
    """Run the block with at most ``seconds`` of CPU time; ``OverBudget`` when it is used up."""
    if not available():
        raise NoBudget("no CPU timer in this thread or on this platform")

    def expire(_sig, _frame):
        raise OverBudget(seconds)

    try:
        old = signal.signal(signal.SIGPROF, expire)
    except ValueError:  # not the main thread after all: Python sets signal handlers only there
        raise NoBudget("no CPU timer in this thread") from None
    try:
        signal.setitimer(signal.ITIMER_PROF, seconds)
        yield
    finally:
        try:
            signal.setitimer(signal.ITIMER_PROF, 0)
        finally:
            signal.signal(signal.SIGPROF, old)
