"""Pictures of the timer's screen, made by the firmware's own drawing code under MicroPython.

``render(samples)`` runs ``device/display.py`` and ``device/screens.py`` in MicroPython's unix
port (``host.mpunix``) with a stand-in I2C bus that prints every transfer; ``Controller`` is a
model of the display controller (SSD1306-class: horizontal addressing, column and page
windows; Solomon Systech SSD1306 datasheet rev 1.1, 2008, section 10.1.3) fed those bytes, and
``png(ram)`` draws what the controller would light.  So a picture shows what the driver sent,
not what the code meant to draw.
"""
import json
import os
import struct
import subprocess
import tempfile
import zlib

from host import mpunix
from host.errors import UserError

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
W, H = 128, 64

# Display lines the firmware writes (device/PROTOCOL.md "What the timer shows"), from the demo's timer.
SAMPLES = {
    "countdown": ["LOCKED +-31us", "08:19:28 UTC", "S1 SUN LL #-", "file track received",
                  "NEXT i01 SUN LL rise", "in 24:27 Zn 128"],
    "contact": ["LOCKED +-30us", "10:25:46 UTC", "S1 SUN LL #5", "#5 10:25:45.867 +-30us",
                "NEXT i06 SUN LL rise", "in 31:44 Zn 156"],
    "hold": ["HOLDOVER +-1.2ms", "10:27:02 UTC", "S1 SUN LL #5", "release: void",
             "NEXT i06 SUN LL rise", "in 30:28 Zn 156"],
    "fix": ["LOCKED +-31us", "16:30:55 UTC", "S1 SUN LL #14", "FIX 14 used 0 rej",
            "44\u00b058.0'N 006\u00b025.1'W", "95% 3.8x2.3nm 154"],
    "fix-doubt": ["LOCKED +-31us", "16:30:55 UTC", "S1 SUN LL #14", "FIX 14 used 0 rej DOUBT long_run",
                  "44\u00b058.0'N 006\u00b025.1'W", "95% 3.8x2.3nm 154"],
    "no-time": ["NO TIME - wait GPS", "--:--:--", "S1 SUN LL #-", "ready", "NEXT: -", "no time yet"],
    "no-plan": ["LOCKED +-31us", "07:58:10 UTC", "S1 SUN LL #-", "ready", "NEXT: -", "no track: push it"],
}

SCRIPT = r'''
import json, binascii
from device.display import Oled, I2CBus
from device import screens

class I2C:
    def writeto(self, addr, buf):
        print("W", addr, binascii.hexlify(buf).decode())
    def writevto(self, addr, bufs):
        print("W", addr, "".join(binascii.hexlify(b).decode() for b in bufs))

oled = Oled(I2CBus(I2C(), 0x3C))
for name, lines in json.loads(%(samples)r):
    print("SCREEN", name)
    kind = screens.draw(oled, lines)
    sent = oled.show()
    print("DONE", kind, sent, binascii.hexlify(oled.buf).decode())
'''


class Controller:
    """The display RAM of an SSD1306-class controller in horizontal addressing mode, written
    through I2C transfers (control byte 0x80: one command byte follows; 0x40: data)."""

    def __init__(self, width=W, height=H):
        self.width = width
        self.pages = height // 8
        self.ram = bytearray(width * self.pages)
        self.col0, self.col1, self.page0, self.page1 = 0, width - 1, 0, self.pages - 1
        self.col, self.page = 0, 0
        self._args = None             # (command, bytes still expected, collected)

    def write(self, buf):
        if not buf:
            return
        if buf[0] == 0x40:
            for b in buf[1:]:
                self._data(b)
            return
        i = 0
        while i + 1 < len(buf):       # pairs of (0x80, command byte)
            self._command(buf[i + 1])
            i += 2

    def _command(self, c):
        if self._args is not None:
            cmd, left, got = self._args
            got.append(c)
            if left > 1:
                self._args = (cmd, left - 1, got)
                return
            self._args = None
            if cmd == 0x21:
                self.col0, self.col1 = got
                self.col = self.col0
            elif cmd == 0x22:
                self.page0, self.page1 = got
                self.page = self.page0
            return
        nargs = {0x21: 2, 0x22: 2, 0x20: 1, 0x81: 1, 0xA8: 1, 0xD3: 1, 0xDA: 1, 0xD5: 1, 0xD9: 1,
                 0xDB: 1, 0x8D: 1}.get(c, 0)
        if nargs:
            self._args = (c, nargs, [])

    def _data(self, b):
        self.ram[self.page * self.width + self.col] = b
        self.col += 1
        if self.col > self.col1:
            self.col = self.col0
            self.page += 1
            if self.page > self.page1:
                self.page = self.page0


def render(samples=None, binary=None, heap_kb=512):
    """{name: (screen kind, pages sent, controller RAM bytes)} for ``samples`` ({name: six lines}),
    drawn under MicroPython.  Raises ``UserError`` when MicroPython fails or the driver's bytes
    disagree with its frame buffer."""
    samples = SAMPLES if samples is None else samples
    code = SCRIPT % {"samples": json.dumps(list(samples.items()))}
    with tempfile.NamedTemporaryFile("w", suffix=".py", delete=False) as f:
        f.write(code)
        script = f.name
    try:
        proc = subprocess.run(mpunix.command(binary, heap_kb) + [script], capture_output=True, text=True,
                              timeout=120, env=dict(os.environ, MICROPYPATH=ROOT), cwd=ROOT)
    finally:
        os.unlink(script)
    if proc.returncode != 0:
        raise UserError("drawing the screens under MicroPython failed: %s"
                        % (proc.stderr.strip().splitlines() or proc.stdout.strip().splitlines() or ["?"])[-1])
    ctl = Controller()
    out = {}
    name = None
    for line in proc.stdout.splitlines():
        parts = line.split()
        if parts[0] == "W":
            ctl.write(bytes.fromhex(parts[2]))
        elif parts[0] == "SCREEN":
            name = parts[1]
        elif parts[0] == "DONE":
            fb = bytes.fromhex(parts[3])
            if bytes(ctl.ram) != fb:
                raise UserError("screen %s: the bytes sent to the display differ from the frame buffer" % name)
            out[name] = (parts[1], int(parts[2]), bytes(ctl.ram))
    return out


def png(ram, width=W, height=H, scale=4, lit=(150, 215, 255), dark=(8, 12, 20)):
    """PNG bytes of a MONO_VLSB display RAM, each pixel a ``scale`` x ``scale`` square with a
    one-pixel dark gap (as an OLED's pixels look)."""
    rows = []
    for y in range(height):
        row = bytearray()
        for x in range(width):
            on = ram[(y >> 3) * width + x] >> (y & 7) & 1
            px = bytes(lit if on else dark)
            row += px * (scale - 1) + bytes(dark)
        line = b"\x00" + bytes(row)
        for k in range(scale):
            rows.append(line if k < scale - 1 else b"\x00" + bytes(dark) * (width * scale))
    raw = b"".join(rows)

    def chunk(kind, data):
        c = struct.pack(">I", len(data)) + kind + data
        return c + struct.pack(">I", zlib.crc32(kind + data) & 0xFFFFFFFF)
    head = struct.pack(">IIBBBBB", width * scale, height * scale, 8, 2, 0, 0, 0)   # 8-bit RGB
    return b"\x89PNG\r\n\x1a\n" + chunk(b"IHDR", head) + chunk(b"IDAT", zlib.compress(raw, 9)) + chunk(b"IEND", b"")


def write_pngs(out_dir, samples=None, binary=None):
    """Render ``samples`` and write ``screen-<name>.png`` into ``out_dir``; returns the paths."""
    os.makedirs(out_dir, exist_ok=True)
    paths = []
    for name, (_, _, ram) in render(samples, binary).items():
        path = os.path.join(out_dir, "screen-%s.png" % name)
        with open(path, "wb") as f:
            f.write(png(ram))
        paths.append(path)
    return paths
