"""The hardware boundary: ticks, pins, UART, storage, host port, buzzer, display, watchdog.

A board (``device.board``) and the simulator (``device.simhw``) both provide an
object with the methods of ``Hardware`` below; the firmware core only talks to
that.  Interrupt handlers capture the tick of every button and PPS edge at the
edge into fixed rings (``RING`` edges each); the main loop drains them later, so
a press is stamped at its first edge whatever the loop was doing.  A ring that
fills up drops the newest edges and counts them (``ring_overflows``).

Ticks.  ``ticks_us`` is a free-running microsecond counter that wraps at
``period`` (MicroPython's ``time.ticks_us`` wraps at 2**30 on most ports, so a
raw difference alone is only meaningful for less than a period, about 17.9 min).
``ticks_diff(a, b, period)`` is the signed wrap-safe ``a - b``.  ``TickExtender``
turns raw ticks into an unbounded integer count.  A main loop that stalls for a
period or more would lose a wrap; ``TickExtender.update`` takes a second, slower
counter of the same oscillator (``ticks_ms``, wrapping after 2**30 ms = 12.4 days)
and counts the wraps the microsecond counter went through, so a stall of up to
days keeps the count exact.  Without a slower counter a pass longer than half a
period is flagged ``unverified`` (the firmware then forgets its time rather than
trust it).  Events drained after a long stall are placed by ``extend_checked``:
within the stalled interval there is only one candidate as long as the
interval is shorter than a period; otherwise the event is reported ambiguous.
"""
import os

TICKS_PERIOD = 1 << 30          # MicroPython time.ticks_us / ticks_ms wrap period (most ports)
RING = 64                       # edges an interrupt ring holds between two drains


def ticks_diff(a, b, period=TICKS_PERIOD):
    """Signed difference ``a - b`` of two raw tick values, wrap-safe; valid for |a - b| < period/2."""
    half = period >> 1
    return ((a - b + half) % period) - half


def ticks_add(a, delta, period=TICKS_PERIOD):
    return (a + delta) % period


class TickExtender:
    """Raw wrapping ticks -> an unbounded, monotonic integer count of oscillator microseconds.

    ``update(raw_now, ms_now)`` once per loop pass (``ms_now`` from the slower counter, or None);
    ``prev`` is the extended count at the pass before, ``ext`` now; ``lost_wraps`` counts the
    wraps recovered from the slower counter; ``unverified`` says this pass's interval could be
    off by whole periods (a long pass and no slower counter)."""
    __slots__ = ("period", "raw", "ext", "prev", "ms", "ms_period", "lost_wraps", "unverified")

    def __init__(self, raw_now, period=TICKS_PERIOD, ms_now=None, ms_period=TICKS_PERIOD):
        self.period = period
        self.raw = raw_now
        self.ext = 0
        self.prev = 0
        self.ms = ms_now
        self.ms_period = ms_period
        self.lost_wraps = 0
        self.unverified = False

    def update(self, raw_now, ms_now=None):
        """Advance with the current raw tick (and the slower counter's ms); returns the extended now."""
        p = self.period
        d = (raw_now - self.raw) % p            # the counter never runs backwards: elapsed modulo p
        unverified = False
        if ms_now is not None and self.ms is not None:
            elapsed_us = ((ms_now - self.ms) % self.ms_period) * 1000
            k = (elapsed_us - d + (p >> 1)) // p
            if k > 0:                           # whole periods the loop did not see
                d += k * p
                self.lost_wraps += k
        elif d >= (p >> 1):
            unverified = True
        self.prev = self.ext
        self.ext += d
        self.raw = raw_now
        self.ms = ms_now
        self.unverified = unverified
        return self.ext

    def extend(self, raw):
        """Extended count of a raw tick captured since the previous ``update`` (see ``extend_checked``)."""
        return self.extend_checked(raw)[0]

    def extend_checked(self, raw):
        """``(extended tick, ok)`` of an event captured since the previous pass: the one value with
        this raw tick in the interval from the previous update to now (a few ms ahead allowed: an
        edge may land between reading the counter and draining the ring).  ``ok`` is False when the
        interval is a period or longer (two candidates) or was not verified."""
        p = self.period
        if self.ext - self.prev <= (p >> 1) and not self.unverified:
            return self.ext + ticks_diff(raw, self.raw, p), True
        back = (self.raw - raw) % p
        ahead = p >> 6
        v = self.ext - back if back <= p - ahead else self.ext + (p - back)
        return v, (v - p <= self.prev) and not self.unverified


class Hardware:
    """The interface the firmware core uses (documentation and a base for implementations).

    ``ticks_us()``        raw microsecond ticks, wrapping at ``ticks_period``
    ``ticks_ms()``        raw millisecond ticks of the same oscillator, wrapping at ``ms_period``,
                          or None (no slower counter: long stalls are detected, not repaired)
    ``rtc_us()``          microseconds of a clock that keeps running through a reset (an RTC), or None;
                          ``rtc_tolerance_ppm`` and ``rtc_resolution_us`` state its quality
    ``button_events()``   list of (raw_tick, pressed) captured by the edge interrupt since the last call
    ``pps_events()``      list of raw_tick of rising PPS edges since the last call
    ``ring_overflows()``  (button, pps): edges the interrupt rings had to drop since start
    ``gps_read()``        bytes received from the GPS UART (b"" if none)
    ``host_read()``       bytes received from the host serial port (b"" if none)
    ``host_write(data)``  send bytes to the host
    ``buzz(pattern)``     short acoustic acknowledgement, pattern a str like "." or ".." or "-"
    ``show(lines)``       put up to six short text lines on the display
    ``idle()``            end of a main-loop pass (a board sleeps ~1 ms to save power)
    ``feed_watchdog()``   tell the hardware watchdog the loop is alive (no-op without one)
    ``unique_id()``       bytes unique to this board (its device id derives from them); b"" if none
    ``store``             the log/file store (``FileStore`` or equivalent)
    """
    ticks_period = TICKS_PERIOD
    ms_period = TICKS_PERIOD
    rtc_tolerance_ppm = 50.0         # a 32 kHz watch crystal or an RC clock trimmed to it [common practice]
    rtc_resolution_us = 1000000      # many board RTCs count whole seconds
    store = None

    def ticks_us(self):
        raise NotImplementedError

    def ticks_ms(self):
        return None

    def rtc_us(self):
        return None

    def button_events(self):
        return []

    def pps_events(self):
        return []

    def ring_overflows(self):
        return (0, 0)

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

    def feed_watchdog(self):
        pass

    def unique_id(self):
        return b""


def _sync():
    s = getattr(os, "sync", None)
    if s is not None:
        s()


class FileStore:
    """Named byte files in one directory, with the few operations the log and file slots need.

    ``append`` flushes (and ``os.sync`` where the port has it) before returning;
    ``replace`` writes a temporary file and renames it over the old one, which
    is atomic on POSIX file systems and on MicroPython's littlefs/FAT ports.
    MicroPython files have no ``truncate``, so truncation is a streamed copy + rename.
    A failed write (flash full, I/O error) raises ``OSError``; the caller decides.
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
        """Keep the first ``n`` bytes of ``name`` (streamed through a temporary file)."""
        self.replace(name, copy_chunks(self, name, n))

    def remove(self, name):
        try:
            os.remove(self.path(name))
        except OSError:
            pass

    def names(self, prefix):
        """Names in the store starting with ``prefix`` (a generator; the directory is not loaded)."""
        it = getattr(os, "ilistdir", None)
        try:
            entries = it(self.root) if it is not None else os.listdir(self.root)
        except OSError:
            return
        for e in entries:
            n = e if isinstance(e, str) else e[0]
            if n.startswith(prefix):
                yield n


def copy_chunks(store, name, n, chunk=512):
    """The first ``n`` bytes of ``name`` in ``store``, ``chunk`` bytes at a time (a generator)."""
    off = 0
    while off < n:
        c = store.read(name, off, min(chunk, n - off))
        if not c:
            return
        yield c
        off += len(c)
