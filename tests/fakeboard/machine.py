"""A stand-in for MicroPython's ``machine`` module on the unix port (tests): a board on which
nothing answers but what the test asks for.  Environment: ``FAKE_BUTTON_HELD=1`` holds the
button down; ``FAKE_NO_DISPLAY=1`` leaves the I2C bus empty; ``FAKE_UNIQUE_ID`` (hex)."""
import os

writes = []                     # (address, bytes) sent on I2C, for a test that looks


class Pin:
    IN = 0
    OUT = 1
    PULL_UP = 2
    IRQ_FALLING = 4
    IRQ_RISING = 8

    def __init__(self, pin_id, mode=-1, pull=-1):
        self.pin_id = pin_id
        self.level = 0 if os.getenv("FAKE_BUTTON_HELD") == "1" else 1
        self.handler = None

    def value(self, v=None):
        if v is None:
            return self.level
        self.level = v

    def irq(self, handler=None, trigger=0, hard=False):
        self.handler = handler


class UART:
    def __init__(self, uart_id, baudrate=9600, tx=None, rx=None, rxbuf=256):
        self.rxbuf = rxbuf

    def any(self):
        return 0

    def read(self, n=-1):
        return None


class I2C:
    def __init__(self, i2c_id, scl=None, sda=None, freq=400000):
        self.empty = os.getenv("FAKE_NO_DISPLAY") == "1"

    def writeto(self, addr, buf):
        if self.empty:
            raise OSError(19)           # ENODEV, as a port says when nothing acknowledges
        writes.append((addr, bytes(buf)))

    def writevto(self, addr, bufs):
        self.writeto(addr, b"".join(bytes(b) for b in bufs))


class PWM:
    def __init__(self, pin, freq=1000, duty_u16=0):
        self.duty = duty_u16
        self.history = []           # (ticks_ms, duty) of every change

    def duty_u16(self, v=None):
        if v is not None:
            import time
            self.duty = v
            self.history.append((time.ticks_ms(), v))
        return self.duty


class WDT:
    def __init__(self, timeout=5000):
        self.timeout = timeout
        self.fed = 0

    def feed(self):
        self.fed += 1


def unique_id():
    import binascii
    return binascii.unhexlify(os.getenv("FAKE_UNIQUE_ID") or "e66038b7133b2d2f")
