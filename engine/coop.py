"""Cooperative slicing of the engine's long computations.

The engine calls ``tick()`` at safe points inside its long loops (each
contact of a fix iteration, each point of identification's search grid, each
step of the schedule's scan).  By default it does nothing.  A caller that must
keep serving something else while a reduction runs (the timer's main loop:
button edges, PPS, GPS sentences, the watchdog) installs a hook with
``set_hook``; the hook runs between two slices of the computation and must
not call back into the engine.  ``ticks`` counts the calls (a portable measure
of the work done, and of the longest stretch between two calls in tests).
"""
_hook = None
ticks = 0


def set_hook(f):
    """Install ``f`` (a function of no argument, or None); returns the previous hook."""
    global _hook
    prev = _hook
    _hook = f
    return prev


def tick():
    global ticks
    ticks += 1
    if _hook is not None:
        _hook()
