"""The hardware boundary on a MicroPython board (``machine``): pins, UART, USB serial,
display, buzzer, watchdog.

Importable anywhere: without ``machine`` (CPython, the WebAssembly port) the
module loads and ``Board`` raises ``BoardError`` when constructed.

Interrupt handlers only store ``time.ticks_us()`` into preallocated ring
buffers of ``hal.RING`` edges (no allocation in a hard IRQ); the main loop drains
them.  A full ring drops the new edge and counts it (``ring_overflows``; the
firmware shows it).  ``ticks_ms`` is the slower counter that keeps the tick count
through a long stall, ``rtc_us`` the RTC (``time.time``, whole seconds on most
ports; it runs through a reset, not through a power loss without a backup
battery), ``unique_id`` the chip's id (the device id derives from it), and a
hardware watchdog (``machine.WDT``, ``watchdog_ms``; 0: none) is fed by
``feed_watchdog`` after every loop pass.  Pin
numbers, UART ids and the flash directory are arguments, so one build serves
several boards; ``Board.from_profile`` takes them from a board profile
(``device/boards/*.json``, ``limbclock-board/1``; ``device.main`` starts the timer
with one)::

    from device.board import Board
    from device.firmware import Firmware
    Firmware(Board(button_pin=14, pps_pin=15, gps_uart=1)).run()

What each part costs the main loop.  The GPS UART receives into a buffer of
``rx_buffer`` bytes while the loop is busy elsewhere: a profile sizes it for its
longest pass (``loop_stall_ms``: reclaiming acknowledged log segments after a sync's ACK, a new plan)
at the receiver's rate, ``baud / 10`` bytes a second (2048 bytes cover 2.1 s at
9600 Bd).  The buzzer is a PWM pin switched by ``idle()`` from a schedule, so a
beep never sleeps in the loop.  The display sends only the pages that changed
(``device.display``).  The watchdog (``machine.WDT``) resets the board when
``feed_watchdog()`` has not been called for ``watchdog_ms``.
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

BEEP_MS = {".": 40, "-": 200}            # a dot and a dash of the acknowledgement patterns
GAP_MS = 40                              # silence after each


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
    the host on USB serial (``sys.stdin``/``sys.stdout`` buffers), optional PWM buzzer, optional
    display (an ``device.display.Oled``, or any object with ``show(lines)``), optional watchdog.

    ``link=False`` leaves the USB serial alone (``limbclock board check`` runs the firmware
    while ``mpremote`` holds the console).  ``machine_module`` replaces ``machine`` (tests)."""

    ticks_period = TICKS_PERIOD

    def __init__(self, button_pin=14, pps_pin=15, gps_uart=1, gps_baud=9600, buzzer_pin=None,
                 flash_dir="/lc", display=None, gps_tx=None, gps_rx=None, rx_buffer=2048,
                 buzzer_freq_hz=2700, watchdog_ms=0, link=True, machine_module=None):
        m = machine_module or machine
        if m is None:
            raise BoardError("device.board needs MicroPython's machine module (use device.sim on a computer)")
        self.machine = m
        self.store = FileStore(flash_dir)
        self.faults = []                   # parts that failed to start (the timer runs without them)
        self._button = _Ring()
        self._pps = _Ring()
        Pin = m.Pin
        self.button_pin = Pin(button_pin, Pin.IN, Pin.PULL_UP)
        self.pps_pin = Pin(pps_pin, Pin.IN)
        self.button_pin.irq(self._on_button, Pin.IRQ_FALLING | Pin.IRQ_RISING, hard=True)
        self.pps_pin.irq(self._on_pps, Pin.IRQ_RISING, hard=True)
        if gps_tx is None:
            self.gps = m.UART(gps_uart, gps_baud)
        else:
            self.gps = m.UART(gps_uart, baudrate=gps_baud, tx=Pin(gps_tx), rx=Pin(gps_rx), rxbuf=rx_buffer)
        self.buzzer = None
        if buzzer_pin is not None:
            try:
                self.buzzer = m.PWM(Pin(buzzer_pin, Pin.OUT), freq=buzzer_freq_hz, duty_u16=0)
            except (OSError, ValueError, TypeError) as e:
                self.faults.append("buzzer: %s" % e)
        self._beeps = []                   # [(ticks_ms when, duty)] still to apply, in order
        self.display = display             # an Oled, an object with show(lines), or None
        self.wdt = m.WDT(timeout=watchdog_ms) if watchdog_ms else None
        self._in = self._out = self._poll = None
        if link:
            import sys
            self._in = getattr(sys.stdin, "buffer", sys.stdin)
            self._out = getattr(sys.stdout, "buffer", sys.stdout)
            try:
                import select
                self._poll = select.poll()
                self._poll.register(sys.stdin, select.POLLIN)
            except (ImportError, AttributeError):
                self._poll = None

    @classmethod
    def from_profile(cls, profile, flash_dir="lc", link=True, watchdog=True, machine_module=None):
        """The board a ``limbclock-board/1`` profile (a dict) describes.  A display that does not
        answer is left out and named in ``faults``: the timer runs without it."""
        m = machine_module or machine
        if m is None:
            raise BoardError("device.board needs MicroPython's machine module (use device.sim on a computer)")
        gps = profile["gps"]
        buzzer = profile.get("buzzer") or {}
        b = cls(button_pin=profile["button"]["pin"], pps_pin=profile["pps"]["pin"], gps_uart=gps["uart"],
                gps_baud=gps["baud"], gps_tx=gps["tx"], gps_rx=gps["rx"], rx_buffer=gps["rx_buffer"],
                buzzer_pin=buzzer.get("pin"), buzzer_freq_hz=buzzer.get("freq_hz", 2700),
                flash_dir=flash_dir, watchdog_ms=profile.get("watchdog_ms", 0) if watchdog else 0,
                link=link, machine_module=m)
        spec = profile.get("display")
        if spec and spec.get("bus") in ("i2c", "spi"):
            try:
                from device.display import oled_from_profile
                b.display = oled_from_profile(m, spec)
            except (OSError, ValueError) as e:    # no display wired, or it does not answer
                b.faults.append("display: %s" % e)
        return b

    @staticmethod
    def button_held(pin_no, ms, machine_module=None):
        """True when the button (to ground, pull-up) is held down for the whole of ``ms`` from now:
        at power-on this keeps the firmware from starting and leaves the prompt (``device.main``)."""
        m = machine_module or machine
        pin = m.Pin(pin_no, m.Pin.IN, m.Pin.PULL_UP)
        t0 = time.ticks_ms()
        while time.ticks_diff(time.ticks_ms(), t0) < ms:
            if pin.value():
                return False
            time.sleep_ms(10)
        return True

    def _on_button(self, pin):
        self._button.put(time.ticks_us(), 1 if pin.value() == 0 else 0)

    def _on_pps(self, pin):
        self._pps.put(time.ticks_us(), 1)

    def ticks_us(self):
        return time.ticks_us()

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
            b = self._in.read(1)
            if not b:                    # end of input (a closed pipe): nothing more will come
                break
            buf += b
        return buf

    def host_write(self, data):
        if self._out is not None:
            self._out.write(data)

    # -- the console, the watchdog, the identity -----------------------------------------
    @staticmethod
    def own_console(own):
        """``own=True``: 0x03 bytes on the USB serial are data, not a keyboard interrupt
        (``micropython.kbd_intr(-1)``); ``False`` gives Ctrl-C back to the prompt."""
        try:
            import micropython
            micropython.kbd_intr(-1 if own else 3)
        except (ImportError, AttributeError):
            pass

    def feed_watchdog(self):
        if self.wdt is not None:
            self.wdt.feed()

    def unique_id(self):
        """The microcontroller's serial number (``machine.unique_id()``), bytes."""
        return bytes(self.machine.unique_id())

    def ticks_ms(self):
        return time.ticks_ms()

    def rtc_us(self):
        return int(time.time()) * 1000000

    def ring_overflows(self):
        return (self._button.lost, self._pps.lost)

    # -- feedback ----------------------------------------------------------------------------
    def buzz(self, pattern):
        """Queue ``pattern`` ('.' 40 ms, '-' 200 ms, 40 ms apart); ``idle()`` plays it."""
        if self.buzzer is None:
            return
        t = time.ticks_ms()
        if self._beeps:
            t = time.ticks_add(self._beeps[-1][0], GAP_MS)
        for ch in pattern:
            self._beeps.append((t, 32768))
            t = time.ticks_add(t, BEEP_MS.get(ch, 40))
            self._beeps.append((t, 0))
            t = time.ticks_add(t, GAP_MS)

    def _play(self):
        now = time.ticks_ms()
        while self._beeps and time.ticks_diff(now, self._beeps[0][0]) >= 0:
            self.buzzer.duty_u16(self._beeps.pop(0)[1])

    def show(self, lines):
        d = self.display
        if d is None:
            return
        try:
            if hasattr(d, "buf"):            # a frame buffer: lay the lines out on the screen
                from device.screens import draw
                draw(d, lines)
                d.show()
            else:
                d.show(lines)
        except OSError as e:                 # the display stopped answering: go on without it
            self.display = None
            self.faults.append("display: %s" % e)

    def idle(self):
        if self._beeps:
            self._play()
        time.sleep_ms(1)                 # edges are captured by IRQ; 1 ms keeps NMEA pairing exact
