"""The MicroPython side of the simulator shim: ``hal.Hardware`` fed by a simulated world.

``limbclock sim --micropython`` runs the firmware tree built for the ``sim`` profile in
MicroPython's unix port.  The simulated world (true time, the oscillator, the GPS receiver, the
PPS, the bouncing button: ``device/simhw.py``) runs on the CPython side (``device/mpsim.py``)
and reaches this process as a stream of text lines on a pipe; the host link is this
process's standard input and output, as the USB serial is a board's.

The shim's interface (keep it small: it is all that ties the two sides)::

    world -> timer (file descriptor LIMBCLOCK_SHIM's first number, non-blocking)
      I <json>          first line: {"tick", "period", "device_id", "flash_dir", "screen"}
      S <tick>          a rising PPS edge, captured at that raw tick
      B <tick> <0|1>    a button edge (1: pressed)
      G <hex>           bytes from the GPS UART
      P <tick>          the oscillator now reads <tick>: run one pass of the loop
      Y <n>             answer "Y <n>" once everything before it is done
      R                 answer "R <json>": log, fix, next contact (the summary)
      Q                 the world ends

    timer -> world (LIMBCLOCK_SHIM's second number)
      D <json>          the display lines changed (a list of strings)
      Z <pattern>       a beep ("." "..", "-", ...)
      Y <n> / R <json>  the answers above

A pass runs exactly when the CPython virtual timer would run one, with the same raw ticks and
the same events, so the two give the same stamps.  The display lines are also drawn into a
128 x 64 frame buffer by ``device.screens`` (``screen``: the code of a board's screen runs).
"""
import binascii
import json
import os
import select
import sys

from device.hal import Hardware, FileStore, TICKS_PERIOD


class SimBoard(Hardware):
    def __init__(self, rfd, wfd):
        self.world = open(rfd, "rb")
        self.out = open(wfd, "wb")
        self.inbuf = bytearray(4096)
        self.pending = b""
        self.wpoll = select.poll()
        self.wpoll.register(rfd, select.POLLIN)
        line = self._line()
        if line is None or not line.startswith(b"I "):
            raise OSError("shim: the first line must be I <json>")
        init = json.loads(line[2:])
        self.tick = init["tick"]
        self.ticks_period = init.get("period", TICKS_PERIOD)
        self.device_id = init.get("device_id", "LC-SIM1")
        self.store = FileStore(init.get("flash_dir", "lc"))
        self.q_button = []
        self.q_pps = []
        self.gps = b""
        self.alive = True
        self.fw = None
        self.polls = 0
        self.host_in = getattr(sys.stdin, "buffer", sys.stdin)
        self.host_out = getattr(sys.stdout, "buffer", sys.stdout)
        self.hbuf = bytearray(1024)
        self.fb = None
        if init.get("screen"):
            import framebuf
            self.fb = framebuf.FrameBuffer(bytearray(1024), 128, 64, framebuf.MONO_VLSB)

    @classmethod
    def from_shim(cls, profile=None):
        """The board on the file descriptors named by ``LIMBCLOCK_SHIM`` ("<world>,<answers>")."""
        fds = os.getenv("LIMBCLOCK_SHIM")
        if not fds:
            raise OSError("the sim profile runs under `limbclock sim --micropython` (LIMBCLOCK_SHIM not set)")
        rfd, wfd = [int(x) for x in fds.split(",")]
        return cls(rfd, wfd)

    def attach(self, fw):
        self.fw = fw

    # -- the world stream -----------------------------------------------------------------
    def _line(self):
        """The next line of the world stream (without its newline), or None at its end."""
        while True:
            i = self.pending.find(b"\n")
            if i >= 0:
                line = self.pending[:i]
                self.pending = self.pending[i + 1:]
                return line
            self.wpoll.poll(-1)
            n = self.world.readinto(self.inbuf)
            if n is None:
                continue
            if n == 0:
                return None
            self.pending += self.inbuf[:n]

    def _send(self, text):
        self.out.write(text.encode() + b"\n")

    def idle(self):
        """Take the world's events up to the next pass (``P``)."""
        while self.alive:
            line = self._line()
            if line is None or line == b"Q":
                self.alive = False
                return
            k = line[:1]
            if k == b"P":
                self.tick = int(line[2:])
                self.polls += 1
                return
            if k == b"S":
                self.q_pps.append(int(line[2:]))
            elif k == b"B":
                t, v = line[2:].split()
                self.q_button.append((int(t), v == b"1"))
            elif k == b"G":
                self.gps += binascii.unhexlify(line[2:])
            elif k == b"Y":
                self._send("Y " + line[2:].decode())
            elif k == b"R":
                self._send("R " + json.dumps(self.summary()))

    def running(self):
        return self.alive

    def summary(self):
        fw = self.fw
        if fw is None:
            return {}
        log = fw.log
        return {"device_id": fw.device_id, "last_seq": log.last_seq, "confirmed_seq": log.confirmed_seq,
                "onboard_fix": fw.onboard.fix, "next_contact": fw.onboard.next, "polls": self.polls,
                "display": fw.lines}

    def finish(self, fw):
        self._send("R " + json.dumps(self.summary()))
        self.out.close()

    # -- hal.Hardware -------------------------------------------------------------------------
    def ticks_us(self):
        return self.tick

    def button_events(self):
        q, self.q_button = self.q_button, []
        return q

    def pps_events(self):
        q, self.q_pps = self.q_pps, []
        return q

    def gps_read(self):
        b, self.gps = self.gps, b""
        return b

    def host_read(self):
        n = self.host_in.readinto(self.hbuf)       # the pipe is non-blocking: None when empty
        return bytes(self.hbuf[:n]) if n else b""

    def host_write(self, data):
        self.host_out.write(data)

    def buzz(self, pattern):
        self._send("Z " + pattern)

    def show(self, lines):
        if self.fb is not None:
            from device.screens import draw
            draw(self.fb, lines)
        self._send("D " + json.dumps(lines))

    def feed_watchdog(self):
        pass
