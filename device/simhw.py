"""Simulated hardware for CPython: oscillator, GPS receiver, button, stores with power cuts.

``SimWorld`` owns simulated true UTC (``t_us``, int) and drives a
``SimHardware`` that the unchanged firmware core runs against:

* the oscillator turns true time into raw ticks: a constant drift (ppm), an
  optional sinusoidal wander (temperature) and aging, wrapping at ``ticks_period``;
* the GPS receiver emits a PPS edge at every true whole second and, 120 ms and
  180 ms later (settable, with jitter), an RMC and a ZDA sentence naming it (or the
  next second: ``names_next``); during an outage there is no PPS and RMC says ``V``;
  before the first fix ZDA fields are blank;
* the button closes at each scheduled press with contact bounce, and opens after
  the press duration (bouncing again).

Events are processed in time order; the firmware is polled at each event and
at least every ``poll_us`` (except in a simulated stall).  Storage: ``MemStore``
(memory), ``CuttingStore`` (a power cut after N bytes), ``FaultyStore`` (a full or
failing flash: ENOSPC beyond a quota, EIO on the next N writes; it counts bytes
and operations written, for the wear figures).
"""
import heapq
import math

from device.hal import Hardware, TICKS_PERIOD, RING
from device.nmea import checksum
from engine.timescale import civil_from_days
from engine.constants import US_PER_DAY


class PowerCut(BaseException):
    """Raised by a ``CuttingStore`` when its byte budget runs out: the power is gone.  Not an
    ``Exception``: no code survives a power cut, so the firmware's guards do not catch it."""


class MemStore:
    """In-memory store with the ``hal.FileStore`` interface (rename is atomic)."""

    def __init__(self):
        self.files = {}

    def size(self, name):
        f = self.files.get(name)
        return -1 if f is None else len(f)

    def read(self, name, offset=0, n=-1):
        f = self.files.get(name)
        if f is None:
            return b""
        return bytes(f[offset:] if n < 0 else f[offset:offset + n])

    def append(self, name, data):
        self.files.setdefault(name, bytearray()).extend(data)

    def replace(self, name, chunks):
        if isinstance(chunks, (bytes, bytearray)):
            chunks = (chunks,)
        self.files[name + ".tmp"] = bytearray()
        for c in chunks:
            self.append(name + ".tmp", c)
        self.rename(name + ".tmp", name)

    def rename(self, src, dst):
        self.files[dst] = self.files.pop(src)

    def truncate(self, name, n):
        self.replace(name, self.read(name, 0, n))

    def remove(self, name):
        self.files.pop(name, None)

    def names(self, prefix):
        return [n for n in sorted(self.files) if n.startswith(prefix)]

    def recover(self, name):
        if name + ".tmp" not in self.files:
            return
        if name in self.files:
            del self.files[name + ".tmp"]
        else:
            self.rename(name + ".tmp", name)


class CuttingStore:
    """Wraps a store; after ``budget`` more bytes written the power is cut mid-write.

    The bytes before the cut reach the store, the rest never do; every later
    write raises ``PowerCut`` too.  ``budget=None`` never cuts.  ``prefix``: only
    writes to files whose names start with it count (e.g. the log's segments)."""

    def __init__(self, inner, budget=None, prefix=""):
        self.inner = inner
        self.budget = budget
        self.prefix = prefix
        self.dead = False

    def _take(self, n, name=""):
        if self.dead:
            raise PowerCut("power is off")
        if self.budget is None or not name.startswith(self.prefix):
            return n
        k = min(n, self.budget)
        self.budget -= k
        return k

    def size(self, name):
        return self.inner.size(name)

    def read(self, name, offset=0, n=-1):
        return self.inner.read(name, offset, n)

    def append(self, name, data):
        k = self._take(len(data), name)
        if k:
            self.inner.append(name, bytes(data[:k]))
        if k < len(data):
            self.dead = True
            raise PowerCut("power cut after %d of %d bytes of %s" % (k, len(data), name))

    def replace(self, name, chunks):
        if isinstance(chunks, (bytes, bytearray)):
            chunks = (chunks,)
        self.inner.remove(name + ".tmp")
        self.inner.append(name + ".tmp", b"")
        for c in chunks:
            self.append(name + ".tmp", c)
        self.rename(name + ".tmp", name)

    def rename(self, src, dst):
        if self.dead:
            raise PowerCut("power is off")
        self.inner.rename(src, dst)

    def truncate(self, name, n):
        self.replace(name, self.read(name, 0, n))

    def remove(self, name):
        if self.dead:
            raise PowerCut("power is off")
        self.inner.remove(name)

    def recover(self, name):
        self.inner.recover(name)

    def names(self, prefix):
        return self.inner.names(prefix)


class FaultyStore:
    """Wraps a store; writes fail with ``OSError`` like a full or failing flash.

    ``quota``: bytes the store may hold in all (counted from the files' sizes; an append or a
    replace that would exceed it writes what fits and raises ENOSPC, as a full flash does);
    ``fail_writes``: the next that many writes raise EIO without writing anything.
    ``written`` counts the bytes written and ``ops`` the write operations (wear figures)."""

    def __init__(self, inner, quota=None, fail_writes=0):
        self.inner = inner
        self.quota = quota
        self.fail_writes = fail_writes
        self.written = 0
        self.ops = 0

    def used(self):
        n = 0
        for name in self.inner.names(""):
            n += max(0, self.inner.size(name))
        return n

    def _check(self, n):
        import errno
        if self.fail_writes > 0:
            self.fail_writes -= 1
            raise OSError(errno.EIO, "I/O error (injected)")
        if self.quota is not None:
            room = self.quota - self.used()
            if n > room:
                return max(0, room), OSError(errno.ENOSPC, "no space left on device")
        return n, None

    def size(self, name):
        return self.inner.size(name)

    def read(self, name, offset=0, n=-1):
        return self.inner.read(name, offset, n)

    def append(self, name, data):
        k, err = self._check(len(data))
        if err is None or k or self.inner.size(name) < 0:
            self.inner.append(name, bytes(data[:k]))     # a full flash still creates the file
        self.written += k
        self.ops += 1
        if err is not None:
            raise err

    def replace(self, name, chunks):
        if isinstance(chunks, (bytes, bytearray)):
            chunks = (chunks,)
        self.inner.remove(name + ".tmp")
        try:
            for c in chunks:
                self.append(name + ".tmp", c)
            if self.inner.size(name + ".tmp") < 0:
                self.append(name + ".tmp", b"")
        except OSError:
            self.inner.remove(name + ".tmp")
            raise
        self.rename(name + ".tmp", name)

    def rename(self, src, dst):
        self.ops += 1
        self.inner.rename(src, dst)

    def truncate(self, name, n):
        self.replace(name, self.read(name, 0, n))

    def remove(self, name):
        self.ops += 1
        self.inner.remove(name)

    def recover(self, name):
        self.inner.recover(name)

    def names(self, prefix):
        return self.inner.names(prefix)


class Oscillator:
    """Raw ticks of a quartz oscillator as a function of true time (int us since ``t0_us``).

    frequency offset (ppm) = drift_ppm + wander_ppm * sin(2 pi t / wander_period_s) + aging_ppm_per_day * t/day
    ticks = true elapsed + the integral of the offset, rounded down, plus ``start_tick``."""

    def __init__(self, t0_us, drift_ppm=0.0, wander_ppm=0.0, wander_period_s=21600.0,
                 aging_ppm_per_day=0.0, start_tick=0, period=TICKS_PERIOD):
        self.t0_us = t0_us
        self.drift_ppm = drift_ppm
        self.wander_ppm = wander_ppm
        self.wander_period_s = wander_period_s
        self.aging_ppm_per_day = aging_ppm_per_day
        self.start_tick = start_tick
        self.period = period

    def elapsed_ticks(self, t_us):
        dt = t_us - self.t0_us
        s = dt / 1e6
        w = 0.0
        if self.wander_ppm:
            p = self.wander_period_s
            w = self.wander_ppm * p / (2 * math.pi) * (1.0 - math.cos(2 * math.pi * s / p))
        extra_us = self.drift_ppm * s + w + 0.5 * self.aging_ppm_per_day / 86400.0 * s * s
        return dt + int(math.floor(extra_us))

    def raw(self, t_us):
        return (self.start_tick + self.elapsed_ticks(t_us)) % self.period


def nmea_sentence(body):
    """``$body*hh\\r\\n`` as bytes (checksum = XOR of the body)."""
    b = body.encode()
    return b"$" + b + b"*%02X\r\n" % checksum(b)


def gps_sentences(second_us, talker="GN", fix=True, have_time=True):
    """(RMC, ZDA) bytes a receiver sends for the UTC second ``second_us`` (our invented position)."""
    day = second_us // US_PER_DAY
    sod = (second_us - day * US_PER_DAY) // 1000000
    y, m, d = civil_from_days(day)
    hms = "%02d%02d%02d.00" % (sod // 3600, sod // 60 % 60, sod % 60)
    if not have_time:
        return (nmea_sentence("%sRMC,,V,,,,,,,,,,N" % talker), nmea_sentence("%sZDA,,,,,," % talker))
    rmc = "%sRMC,%s,%s,3831.200,N,02706.600,W,5.5,212.0,%02d%02d%02d,,,%s" % (
        talker, hms, "A" if fix else "V", d, m, y % 100, "A" if fix else "N")
    zda = "%sZDA,%s,%02d,%02d,%04d,00,00" % (talker, hms, d, m, y)
    return nmea_sentence(rmc), nmea_sentence(zda)


class SimHardware(Hardware):
    """The ``hal.Hardware`` interface over a simulated world (rings and buffers filled by ``SimWorld``).

    Like a board: the button and PPS edges go to rings of ``hal.RING`` edges that drop (and count)
    edges when full; the GPS UART buffers ``uart_bytes`` bytes and drops the rest; ``ticks_ms``
    counts the same oscillator (``ms=False``: a port without it); ``rtc_us`` is the world's
    battery-backed RTC (it runs through power cuts); ``unique_id`` the board's id bytes;
    ``feeds`` counts watchdog feeds."""
    rtc_tolerance_ppm = 50.0
    rtc_resolution_us = 1000

    def __init__(self, world, store, period=TICKS_PERIOD, uid=b"\x00\x01\x02\x03\x04\x05\x06\x07", ms=True,
                 uart_bytes=1024):
        self.world = world
        self.store = store
        self.ticks_period = period
        self.ms_period = TICKS_PERIOD
        self.uid = uid
        self.has_ms = ms
        self.uart_bytes = uart_bytes
        self.q_button = []
        self.q_pps = []
        self.lost_button = 0
        self.lost_pps = 0
        self.lost_uart = 0
        self.gps_buf = bytearray()
        self.host_in = bytearray()
        self.host_out = bytearray()
        self.display = []
        self.buzzes = []
        self.feeds = 0

    def ticks_us(self):
        w = self.world
        if w.cpu_us and w.in_poll:
            w.spend(w.cpu_us)           # the firmware's own work takes simulated time
        return w.osc.raw(w.t_us)

    def ticks_ms(self):
        if not self.has_ms:
            return None
        return (self.world.osc.elapsed_ticks(self.world.t_us) // 1000) % self.ms_period

    def rtc_us(self):
        return self.world.rtc_us()

    def unique_id(self):
        return self.uid

    def feed_watchdog(self):
        self.feeds += 1

    def put_button(self, raw, pressed):
        if len(self.q_button) >= RING:
            self.lost_button += 1
        else:
            self.q_button.append((raw, pressed))

    def put_pps(self, raw):
        if len(self.q_pps) >= RING:
            self.lost_pps += 1
        else:
            self.q_pps.append(raw)

    def put_gps(self, data):
        room = self.uart_bytes - len(self.gps_buf)
        if room < len(data):
            self.lost_uart += len(data) - max(0, room)
            data = data[:max(0, room)]
        self.gps_buf.extend(data)

    def ring_overflows(self):
        return (self.lost_button, self.lost_pps)

    def button_events(self):
        q, self.q_button = self.q_button, []
        return q

    def pps_events(self):
        q, self.q_pps = self.q_pps, []
        return q

    def gps_read(self):
        b = bytes(self.gps_buf)
        self.gps_buf = bytearray()
        return b

    def host_read(self):
        b = bytes(self.host_in)
        self.host_in = bytearray()
        return b

    def host_write(self, data):
        self.host_out.extend(data)

    def buzz(self, pattern):
        self.buzzes.append((self.world.t_us, pattern))

    def show(self, lines):
        self.display = list(lines)
        if self.world.on_display is not None:
            self.world.on_display(self.world.t_us, lines)


class SimWorld:
    """Simulated true time, GPS and button around one firmware instance.

    ``outages``: list of (start_us, end_us) without PPS (RMC void).  ``first_fix_us``:
    before it the receiver has no time (blank ZDA, void RMC).  ``poll_us``: the
    longest gap between firmware polls.  The receiver: ``label_delays_us`` (RMC, ZDA) after
    the edge they follow, ``label_jitter_us`` added at random to each second's delays,
    ``names_next``: the sentences after edge S name second S + 1 (as some receivers do).
    ``stalls``: (from_us, to_us) intervals in which the firmware is not polled (a loop stall:
    the interrupts still fill the rings).  ``cpu_us``: simulated time each ``ticks_us`` call
    costs while the firmware runs (0: infinitely fast), so that a long computation takes
    simulated time and the world moves on meanwhile.  ``rtc_drift_ppm``: the RTC's rate error."""

    def __init__(self, start_us, osc=None, outages=(), first_fix_us=None, poll_us=100000,
                 label_delays_us=(120000, 180000), talker="GN", period=TICKS_PERIOD, names_next=False,
                 label_jitter_us=0, stalls=(), cpu_us=0, rtc_drift_ppm=20.0, seed=0):
        import random
        self.t_us = start_us
        self.osc = osc or Oscillator(start_us, period=period)
        self.outages = list(outages)
        self.first_fix_us = start_us if first_fix_us is None else first_fix_us
        self.poll_us = poll_us
        self.label_delays_us = label_delays_us
        self.label_jitter_us = label_jitter_us
        self.names_next = names_next
        self.talker = talker
        self.stalls = list(stalls)
        self.cpu_us = cpu_us
        self.in_poll = False
        self.rtc_t0 = start_us
        self.rtc_drift_ppm = rtc_drift_ppm
        self.rng = random.Random(seed)
        self.events = []
        self.n = 0
        self.hw = None
        self.fw = None
        self.on_display = None
        self.truth = {}               # press tick (raw) -> true press time, for tests
        self.gps_on = True
        self._next_second = (start_us // 1000000 + 1) * 1000000
        self._schedule_gps(self._next_second)

    def attach(self, hw, fw):
        self.hw = hw
        self.fw = fw

    def rtc_us(self):
        """The battery-backed RTC: true time since the start at its own rate, to 1 ms."""
        dt = self.t_us - self.rtc_t0
        return (self.rtc_t0 + dt + int(dt * self.rtc_drift_ppm / 1e6)) // 1000 * 1000

    def _push(self, t, kind, arg=None):
        self.n += 1
        heapq.heappush(self.events, (t, self.n, kind, arg))

    def in_outage(self, t):
        for a, b in self.outages:
            if a <= t < b:
                return True
        return False

    def stalled(self, t):
        for a, b in self.stalls:
            if a <= t < b:
                return True
        return False

    def _schedule_gps(self, s_us):
        self._push(s_us, "second", s_us)

    def press(self, t_us, duration_us=120000, bounce=True):
        """Schedule a press at true time ``t_us`` held for ``duration_us``."""
        self._push(t_us, "button", True)
        if bounce:
            self._push(t_us + 700, "button", False)
            self._push(t_us + 1500, "button", True)
        self._push(t_us + duration_us, "button", False)
        if bounce:
            self._push(t_us + duration_us + 900, "button", True)
            self._push(t_us + duration_us + 1800, "button", False)

    def _fire(self, t, kind, arg):
        hw = self.hw
        if kind == "second":
            self._schedule_gps(arg + 1000000)
            if not self.gps_on:
                return
            have_time = arg >= self.first_fix_us
            fix = have_time and not self.in_outage(arg)
            if fix:
                hw.put_pps(self.osc.raw(t))
            named = arg + 1000000 if self.names_next else arg
            rmc, zda = gps_sentences(named, self.talker, fix, have_time)
            jit = self.rng.randrange(-self.label_jitter_us, self.label_jitter_us + 1) if self.label_jitter_us else 0
            self._push(arg + self.label_delays_us[0] + jit, "gps", rmc)
            self._push(arg + self.label_delays_us[1] + jit, "gps", zda)
        elif kind == "gps":
            hw.put_gps(arg)
        elif kind == "button":
            raw = self.osc.raw(t)
            if arg:
                self.truth.setdefault(raw, t)
            hw.put_button(raw, arg)

    def spend(self, us):
        """Simulated time passes while the firmware works: events fire (into the rings), no poll."""
        self.t_us += us
        while self.events and self.events[0][0] <= self.t_us:
            t, _, kind, arg = heapq.heappop(self.events)
            self._fire(t, kind, arg)

    def advance_to(self, t_target):
        """Run the world and the firmware up to true time ``t_target`` (inclusive)."""
        while True:
            t_next = self.events[0][0] if self.events else t_target
            t_poll = min(t_next, t_target, self.t_us + self.poll_us)
            if t_poll > self.t_us:
                self.t_us = t_poll
            while self.events and self.events[0][0] <= self.t_us:
                t, _, kind, arg = heapq.heappop(self.events)
                self._fire(t, kind, arg)
            if self.fw is not None and not self.stalled(self.t_us):
                self.in_poll = True
                try:
                    self.fw.poll()
                finally:
                    self.in_poll = False
            if self.t_us >= t_target:
                return
