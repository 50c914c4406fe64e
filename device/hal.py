"""The hardware boundary: ticks, pins, UART, storage, host port, buzzer, display.

A board (``device.board``) and the simulator (``device.simhw``) both provide an
object with the methods of ``Hardware`` below; the firmware core only talks to
that.  Interrupt handlers capture the tick of every button and PPS edge at the
edge; the main loop drains them later, so a press is stamped at its first edge
whatever the loop was doing.

Ticks.  ``ticks_us`` is a free-running microsecond counter that wraps at
``period`` (MicroPython's ``time.ticks_us`` wraps at 2**30 on most ports, so a
raw difference is only meaningful for less than half a period, about 9 min).
``ticks_diff(a, b, period)`` is the signed wrap-safe ``a - b``.  ``TickExtender``
turns raw ticks into an unbounded integer count, provided it is updated at
least every half period (the main loop does it on every pass).
"""
import os

TICKS_PERIOD = 1 << 30          # MicroPython time.ticks_us wrap period (most ports)


def ticks_diff(a, b, period=TICKS_PERIOD):
    """Signed difference ``a - b`` of two raw tick values, wrap-safe; valid for |a - b| < period/2."""
    half = period >> 1
    return ((a - b + half) % period) - half


def ticks_add(a, delta, period=TICKS_PERIOD):
    return (a + delta) % period


class TickExtender:
    """Raw wrapping ticks -> an unbounded, monotonic integer count of oscillator microseconds."""
    __slots__ = ("period", "raw", "ext")

    def __init__(self, raw_now, period=TICKS_PERIOD):
        self.period = period
        self.raw = raw_now
        self.ext = 0

    def update(self, raw_now):
        """Advance with the current raw tick; call at least every ``period/2``.  Returns the extended now."""
        self.ext += ticks_diff(raw_now, self.raw, self.period)
        self.raw = raw_now
        return self.ext

    def extend(self, raw):
        """Extended count of a raw tick captured within half a period of the last ``update``."""
        return self.ext + ticks_diff(raw, self.raw, self.period)


class Hardware:
    """The interface the firmware core uses (documentation and a base for implementations).

    ``ticks_us()``        raw microsecond ticks, wrapping at ``ticks_period``
    ``button_events()``   list of (raw_tick, pressed) captured by the edge interrupt since the last call
    ``pps_events()``      list of raw_tick of rising PPS edges since the last call
    ``gps_read()``        bytes received from the GPS UART (b"" if none)
    ``host_read()``       bytes received from the host serial port (b"" if none)
    ``host_write(data)``  send bytes to the host
    ``buzz(pattern)``     short acoustic acknowledgement, pattern a str like "." or ".." or "-"
    ``show(lines)``       put up to four short text lines on the display
    ``idle()``            end of a main-loop pass (a board sleeps ~1 ms to save power)
    ``store``             the log/file store (``FileStore`` or equivalent)
    """
    ticks_period = TICKS_PERIOD
    store = None

    def ticks_us(self):
        raise NotImplementedError

    def button_events(self):
        return []

    def pps_events(self):
        return []

    def gps_read(self):
        return b""

    def host_read(self):
        return b""

    def host_write(self, data):
        pass

    def buzz(self, pattern):
        pass

    def show(self, lines):
        pass

    def idle(self):
        """Called once per main-loop pass: a board may sleep a millisecond here."""
        pass


def _sync():
    s = getattr(os, "sync", None)
    if s is not None:
        s()


class FileStore:
    """Named byte files in one directory, with the few operations the log and file slots need.

    ``append`` flushes (and ``os.sync`` where the port has it) before returning;
    ``replace`` writes a temporary file and renames it over the old one, which
    is atomic on POSIX file systems and on MicroPython's littlefs/FAT ports.
    MicroPython files have no ``truncate``, so truncation is a rewrite + rename.
    """
    __slots__ = ("root",)

    def __init__(self, root):
        self.root = root.rstrip("/") if len(root) > 1 else root
        try:
            os.mkdir(self.root)
        except OSError:
            pass

    def path(self, name):
        return self.root + "/" + name

    def size(self, name):
        try:
            return os.stat(self.path(name))[6]
        except OSError:
            return -1

    def read(self, name, offset=0, n=-1):
        try:
            f = open(self.path(name), "rb")
        except OSError:
            return b""
        try:
            if offset:
                f.seek(offset)
            return f.read() if n < 0 else f.read(n)
        finally:
            f.close()

    def append(self, name, data):
        f = open(self.path(name), "ab")
        try:
            f.write(data)
            f.flush()
        finally:
            f.close()
        _sync()

    def replace(self, name, chunks):
        """Atomically replace ``name`` with the concatenation of ``chunks`` (bytes or iterable of bytes)."""
        tmp = self.path(name + ".tmp")
        f = open(tmp, "wb")
        try:
            if isinstance(chunks, (bytes, bytearray)):
                chunks = (chunks,)
            for c in chunks:
                f.write(c)
            f.flush()
        finally:
            f.close()
        _sync()
        self.rename(name + ".tmp", name)

    def rename(self, src, dst):
        try:
            os.rename(self.path(src), self.path(dst))      # atomic over an existing file (POSIX, littlefs)
        except OSError:
            # FAT ports refuse to rename over a file: remove first.  A cut between
            # the two steps leaves only the complete ``.tmp``; ``recover`` finishes it.
            self.remove(dst)
            os.rename(self.path(src), self.path(dst))
        _sync()

    def recover(self, name):
        """Finish or undo an interrupted ``replace`` of ``name`` (call at start-up).

        ``name.tmp`` alone is complete (the original is only removed after the
        temporary file was written and synced): it becomes ``name``.  Both
        present: the replace was cut before the rename; the temporary is dropped."""
        if self.size(name + ".tmp") < 0:
            return
        if self.size(name) < 0:
            os.rename(self.path(name + ".tmp"), self.path(name))
        else:
            self.remove(name + ".tmp")

    def truncate(self, name, n):
        self.replace(name, self.read(name, 0, n))

    def remove(self, name):
        try:
            os.remove(self.path(name))
        except OSError:
            pass
