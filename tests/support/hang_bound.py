"""A time bound for one call in a test of hostile input: a hang fails the test instead of
blocking the run.

``signal.setitimer`` interrupts Python code with ``TooSlow`` (an ``AssertionError``, so pytest
reports a failure). Compiled code (a numba kernel, libsbml) does not see signals until it
returns, so a ``faulthandler`` watchdog thread also ends the whole test process, with every
thread's traceback, if the call outlives the bound by far: a failed run, never a stuck one.
"""

from __future__ import annotations

import contextlib
import faulthandler
import signal


class TooSlow(AssertionError):
    """The bounded call was still running when its time was up."""


@contextlib.contextmanager
def time_bound(seconds: float, what: str):
    """Fail with ``TooSlow`` if the body runs longer than ``seconds`` (see the module docstring)."""
    def alarm(signum, frame):
        raise TooSlow(f"{what}: still running after {seconds:g} s")

    previous = signal.signal(signal.SIGALRM, alarm)
    signal.setitimer(signal.ITIMER_REAL, seconds)
    faulthandler.dump_traceback_later(3 * seconds + 60, exit=True)
    try:
        yield
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, previous)
        faulthandler.cancel_dump_traceback_later()
