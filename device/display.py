"""A small monochrome OLED with an SSD1306-class controller, drawn through MicroPython's ``framebuf``.

``Oled(bus, width=128, height=64)`` is a ``framebuf.FrameBuffer`` (``MONO_VLSB``: byte
``page * width + x`` holds the eight pixels ``y = 8 * page .. 8 * page + 7`` of column ``x``,
least significant bit on top), which is exactly the controller's display RAM layout, so
``show()`` sends the buffer as it is.  It sends only the 8-row pages whose bytes changed
since the last ``show()`` (a CRC-32 per page), so a countdown that changes one digit costs
one or two pages on the bus, not the whole kilobyte: at 400 kHz I2C a full screen takes
about 26 ms of the main loop, one page about 3.5 ms.

The bus is an ``I2CBus(i2c, address)`` or an ``SPIBus(spi, dc, cs, res)`` around
``machine.I2C`` / ``machine.SPI`` and ``machine.Pin`` objects; anything with the same
methods works (the tests capture the bytes with a fake bus).

Commands and the power-on sequence follow the controller's datasheet (Solomon Systech,
SSD1306 "128 x 64 Dot Matrix OLED/PLED Segment/Common Driver with Controller", rev 1.1,
2008: section 9 command table, section 10 command descriptions, figure 8-A "application
example" for the charge pump).
"""
import binascii

try:
    import framebuf
    _FrameBuffer = framebuf.FrameBuffer
except ImportError:                      # CPython: the module imports, an Oled cannot be built
    framebuf = None
    _FrameBuffer = object

# Section 9 of the datasheet: fundamental, addressing, hardware configuration and timing commands.
SET_CONTRAST = 0x81          # + 1 byte, 0..255
ENTIRE_ON_RESUME = 0xA4      # show the RAM (0xA5 would light every pixel)
NORMAL = 0xA6                # 1 bit = lit (0xA7 inverts)
DISPLAY_OFF = 0xAE
DISPLAY_ON = 0xAF
MEMORY_MODE = 0x20           # + 1 byte: 0 horizontal addressing
COLUMN_ADDR = 0x21           # + first, last column
PAGE_ADDR = 0x22             # + first, last page
START_LINE = 0x40            # | line 0..63
SEG_REMAP = 0xA0             # | 1: column 127 mapped to SEG0 (mirror left-right)
MUX_RATIO = 0xA8             # + rows - 1
COM_SCAN_DEC = 0xC8          # scan from COM[N-1] to COM0 (mirror top-bottom)
DISPLAY_OFFSET = 0xD3        # + 1 byte
COM_PINS = 0xDA              # + 0x02 sequential (128x32) or 0x12 alternative (128x64)
CLOCK_DIV = 0xD5             # + 1 byte: oscillator frequency and divide ratio
PRECHARGE = 0xD9             # + 1 byte: phase 1 and 2 periods
VCOM_DESELECT = 0xDB         # + 1 byte
CHARGE_PUMP = 0x8D           # + 0x14 on (internal DC-DC), 0x10 off (external VCC)


class I2CBus:
    """The controller on I2C: a control byte 0x80 before each command byte, 0x40 before data."""
    __slots__ = ("i2c", "address", "_cmd")

    def __init__(self, i2c, address=0x3C):
        self.i2c = i2c
        self.address = address
        self._cmd = bytearray(2)
        self._cmd[0] = 0x80

    def command(self, c):
        self._cmd[1] = c
        self.i2c.writeto(self.address, self._cmd)

    def data(self, buf):
        self.i2c.writevto(self.address, (b"\x40", buf))


class SPIBus:
    """The controller on 4-wire SPI: ``dc`` low for commands, high for data; ``res`` pulsed at start."""
    __slots__ = ("spi", "dc", "cs", "res", "_cmd")

    def __init__(self, spi, dc, cs, res=None):
        self.spi = spi
        self.dc = dc
        self.cs = cs
        self.res = res
        self._cmd = bytearray(1)
        cs.value(1)
        if res is not None:
            import time
            res.value(1)
            time.sleep_ms(1)
            res.value(0)                 # datasheet 8.9: reset low for at least 3 us
            time.sleep_ms(10)
            res.value(1)

    def _send(self, dc, buf):
        self.cs.value(1)
        self.dc.value(dc)
        self.cs.value(0)
        self.spi.write(buf)
        self.cs.value(1)

    def command(self, c):
        self._cmd[0] = c
        self._send(0, self._cmd)

    def data(self, buf):
        self._send(1, buf)


class Oled(_FrameBuffer):
    """The screen as a ``FrameBuffer`` (``text``, ``fill_rect``, ``pixel``...) plus ``show()``,
    ``power(on)`` and ``contrast(level)``; ``flip`` turns the picture by 180 degrees."""

    def __init__(self, bus, width=128, height=64, flip=False, external_vcc=False):
        if framebuf is None:
            raise OSError("device.display needs MicroPython's framebuf module")
        self.bus = bus
        self.width = width
        self.height = height
        self.pages = height // 8
        self.buf = bytearray(width * self.pages)
        self._crc = [-1] * self.pages            # what each page held when last sent (-1: unknown)
        self._mv = memoryview(self.buf)
        super().__init__(self.buf, width, height, framebuf.MONO_VLSB)
        self.init(flip, external_vcc)

    def init(self, flip=False, external_vcc=False):
        """The power-on sequence (datasheet figure 8-A / section 10), then a blank screen."""
        seq = (DISPLAY_OFF, MEMORY_MODE, 0x00, START_LINE | 0x00,
               SEG_REMAP | (0 if flip else 1), MUX_RATIO, self.height - 1,
               0xC0 if flip else COM_SCAN_DEC, DISPLAY_OFFSET, 0x00,
               COM_PINS, 0x02 if self.height == 32 else 0x12,
               CLOCK_DIV, 0x80, PRECHARGE, 0x22 if external_vcc else 0xF1,
               VCOM_DESELECT, 0x30, SET_CONTRAST, 0x7F, ENTIRE_ON_RESUME, NORMAL,
               CHARGE_PUMP, 0x10 if external_vcc else 0x14, DISPLAY_ON)
        for c in seq:
            self.bus.command(c)
        self.fill(0)
        self._crc = [-1] * self.pages
        self.show()

    def power(self, on):
        self.bus.command(DISPLAY_ON if on else DISPLAY_OFF)

    def contrast(self, level):
        self.bus.command(SET_CONTRAST)
        self.bus.command(level & 0xFF)

    def show(self):
        """Send the pages that changed since the last call; returns how many were sent."""
        w = self.width
        sent = 0
        for p in range(self.pages):
            page = self._mv[p * w:(p + 1) * w]
            crc = binascii.crc32(page)
            if crc == self._crc[p]:
                continue
            bus = self.bus
            bus.command(COLUMN_ADDR)
            bus.command(0)
            bus.command(w - 1)
            bus.command(PAGE_ADDR)
            bus.command(p)
            bus.command(p)
            bus.data(page)
            self._crc[p] = crc
            sent += 1
        return sent


def oled_from_profile(machine, spec):
    """An ``Oled`` built from a board profile's ``display`` object (``bus`` "i2c" or "spi");
    None when ``spec`` is None."""
    if not spec:
        return None
    Pin = machine.Pin
    w, h = spec.get("width", 128), spec.get("height", 64)
    if spec["bus"] == "i2c":
        i2c = machine.I2C(spec.get("id", 0), scl=Pin(spec["scl"]), sda=Pin(spec["sda"]),
                          freq=spec.get("freq_hz", 400000))
        bus = I2CBus(i2c, spec.get("address", 0x3C))
    else:
        spi = machine.SPI(spec.get("id", 1), baudrate=spec.get("freq_hz", 8000000), sck=Pin(spec["sck"]),
                          mosi=Pin(spec["mosi"]))
        res = spec.get("res")
        bus = SPIBus(spi, Pin(spec["dc"], Pin.OUT), Pin(spec["cs"], Pin.OUT),
                     Pin(res, Pin.OUT) if res is not None else None)
    return Oled(bus, w, h, spec.get("flip", False))
