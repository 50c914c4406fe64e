"""The hardware boundary on a MicroPython board (``machine``): pins, UART, USB serial.

Importable anywhere: without ``machine`` (CPython, the WebAssembly port) the
module loads and ``Board`` raises ``BoardError`` when constructed.

Interrupt handlers only store ``time.ticks_us()`` into preallocated ring
buffers of ``hal.RING`` edges (no allocation in a hard IRQ); the main loop drains
them.  A full ring drops the new edge and counts it (``ring_overflows``; the
firmware shows it).  ``ticks_ms`` is the slower counter that keeps the tick count
through a long stall, ``rtc_us`` the RTC (``time.time``, whole seconds on most
ports; it runs through a reset, not through a power loss without a backup
battery), ``unique_id`` the chip's id (the device id derives from it), and a
hardware watchdog (``machine.WDT``, ``watchdog_ms``; None: none) is fed by
``feed_watchdog`` after every loop pass.  Pin numbers, UART ids and the flash
directory are arguments, so one build serves several boards::

    from device.board import Board
    from device.firmware import Firmware
    Firmware(Board(button_pin=14, pps_pin=15, gps_uart=1)).run()
"""
import time

try:
    import machine
except ImportError:                      # CPython or a port without machine
    machine = None

try:
    from array import array
except ImportError:                      # pragma: no cover - every port we target has array
    array = None

from device.hal import Hardware, FileStore, TICKS_PERIOD, RING


class BoardError(OSError):
    """No ``machine`` module here, or a pin/UART that cannot be set up."""


class _Ring:
    __slots__ = ("t", "v", "head", "tail", "lost")

    def __init__(self):
        self.t = array("i", [0] * RING)
        self.v = array("b", [0] * RING)
        self.head = 0
        self.tail = 0
        self.lost = 0                    # edges dropped because the ring was full

    def put(self, tick, value):          # called in the IRQ: no allocation
        nxt = (self.head + 1) % RING
        if nxt != self.tail:
            self.t[self.head] = tick
            self.v[self.head] = value
            self.head = nxt
        else:
            self.lost += 1

    def drain(self):
        out = []
        while self.tail != self.head:
            out.append((self.t[self.tail], self.v[self.tail]))
            self.tail = (self.tail + 1) % RING
        return out


class Board(Hardware):
    """``hal.Hardware`` on a board: button to ground with pull-up, PPS rising edge, GPS on a UART,
    the host on USB serial (``sys.stdin``/``sys.stdout`` buffers), optional buzzer pin."""

    ticks_period = TICKS_PERIOD

    def __init__(self, button_pin=14, pps_pin=15, gps_uart=1, gps_baud=9600, buzzer_pin=None,
                 flash_dir="/lc", display=None, watchdog_ms=8000):
        if machine is None:
            raise BoardError("device.board needs MicroPython's machine module (use device.sim on a computer)")
        self.store = FileStore(flash_dir)
        self.wdt = None
        if watchdog_ms and hasattr(machine, "WDT"):
            self.wdt = machine.WDT(timeout=watchdog_ms)
        self._button = _Ring()
        self._pps = _Ring()
        self.button_pin = machine.Pin(button_pin, machine.Pin.IN, machine.Pin.PULL_UP)
        self.pps_pin = machine.Pin(pps_pin, machine.Pin.IN)
        self.button_pin.irq(self._on_button, machine.Pin.IRQ_FALLING | machine.Pin.IRQ_RISING, hard=True)
        self.pps_pin.irq(self._on_pps, machine.Pin.IRQ_RISING, hard=True)
        self.gps = machine.UART(gps_uart, gps_baud)
        self.buzzer = machine.Pin(buzzer_pin, machine.Pin.OUT) if buzzer_pin is not None else None
        self.display = display             # an object with show(lines), or None
        import sys
        self._in = getattr(sys.stdin, "buffer", sys.stdin)
        self._out = getattr(sys.stdout, "buffer", sys.stdout)
        try:
            import select
            self._poll = select.poll()
            self._poll.register(sys.stdin, select.POLLIN)
        except (ImportError, AttributeError):
            self._poll = None

    def _on_button(self, pin):
        self._button.put(time.ticks_us(), 1 if pin.value() == 0 else 0)

    def _on_pps(self, pin):
        self._pps.put(time.ticks_us(), 1)

    def ticks_us(self):
        return time.ticks_us()

    def ticks_ms(self):
        return time.ticks_ms()

    def rtc_us(self):
        return int(time.time()) * 1000000

    def ring_overflows(self):
        return (self._button.lost, self._pps.lost)

    def feed_watchdog(self):
        if self.wdt is not None:
            self.wdt.feed()

    def unique_id(self):
        return bytes(machine.unique_id())

    def button_events(self):
        return [(t & (TICKS_PERIOD - 1), v == 1) for t, v in self._button.drain()]

    def pps_events(self):
        return [t & (TICKS_PERIOD - 1) for t, _ in self._pps.drain()]

    def gps_read(self):
        n = self.gps.any()
        return self.gps.read(n) if n else b""

    def host_read(self):
        if self._poll is None:
            return b""
        buf = b""
        while len(buf) < 256 and self._poll.poll(0):      # what has arrived, without blocking
            buf += self._in.read(1) or b""
        return buf

    def host_write(self, data):
        self._out.write(data)

    def buzz(self, pattern):
        if self.buzzer is None:
            return
        for ch in pattern:               # '.' 40 ms, '-' 200 ms
            self.buzzer.value(1)
            time.sleep_ms(40 if ch == "." else 200)
            self.buzzer.value(0)
            time.sleep_ms(40)

    def show(self, lines):
        if self.display is not None:
            self.display.show(lines)

    def idle(self):
        time.sleep_ms(1)                 # edges are captured by IRQ; 1 ms keeps NMEA pairing exact
