"""Waiting for another thread or process (a virtual timer serving a pseudo-terminal) without
asserting anything about time.

``wait_for(poll, what)`` calls ``poll()`` until it returns a true value and returns that value.
What a test checks is the value, never how long it took.  The limit is a HANG GUARD only: it is
long (``HANG_GUARD_S``, 600 s, far beyond any loaded machine: the waits here take a few seconds
alone) and stops a test that would otherwise never end, naming what it waited for.  Times go to
``make bench``.
"""
import time

HANG_GUARD_S = 600.0


def wait_for(poll, what, interval_s=0.05, guard_s=HANG_GUARD_S):
    end = time.monotonic() + guard_s
    while True:
        value = poll()
        if value:
            return value
        if time.monotonic() > end:
            raise AssertionError("hang guard: still waiting, after %.0f s, for %s" % (guard_s, what))
        time.sleep(interval_s)
