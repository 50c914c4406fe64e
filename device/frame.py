"""The one frame codec of the timer link, used by the device and by the host.

A frame on the wire is ``COBS(type | seq | body | crc32) 0x00``:

* ``type`` (1 byte): the command; a response has bit 7 set (``type | 0x80``),
  an error response is ``ERROR``.
* ``seq`` (1 byte): chosen by the host, echoed in the response; a retried
  request keeps its ``seq`` so the device can answer it again without doing
  the work twice.
* ``body``: command-specific, at most ``MAX_BODY`` bytes.
* ``crc32``: ``binascii.crc32`` (IEEE 802.3 polynomial) of type, seq and body,
  4 bytes little-endian.

Consistent Overhead Byte Stuffing (Cheshire & Baker, IEEE/ACM Trans.
Networking 7(2), 1999) removes every 0x00 from the frame, so 0x00 only ever
delimits frames: after any garbage, a lost byte or a reconnect the decoder
resynchronises at the next 0x00.  Overhead: 1 byte per 254 plus the delimiter.
"""
import binascii
import struct

MAX_BODY = 1024                  # bytes of body in one frame
MAX_FRAME = MAX_BODY + 6         # type + seq + body + crc, before stuffing
MAX_WIRE = MAX_FRAME + MAX_FRAME // 254 + 2


class FrameError(ValueError):
    """A frame that cannot be built (body too long, bad type)."""


def cobs_encode(data):
    """COBS-encode ``data`` (bytes); the result contains no 0x00.

    As in the paper, a run that ends the data exactly on a full 254-byte block
    gets no extra trailing code byte."""
    out = bytearray()
    code_at = 0
    out.append(0)
    code = 1
    full = False
    for b in data:
        full = False
        if b == 0:
            out[code_at] = code
            code_at = len(out)
            out.append(0)
            code = 1
        else:
            out.append(b)
            code += 1
            if code == 0xFF:
                out[code_at] = code
                code_at = len(out)
                out.append(0)
                code = 1
                full = True
    if full:
        out.pop()
    else:
        out[code_at] = code
    return bytes(out)


def cobs_decode(data):
    """Inverse of ``cobs_encode``; returns None for an invalid encoding."""
    out = bytearray()
    i = 0
    n = len(data)
    while i < n:
        code = data[i]
        if code == 0:
            return None
        end = i + code
        if end > n:
            return None
        out.extend(data[i + 1:end])
        i = end
        if code != 0xFF and i < n:
            out.append(0)
    return bytes(out)


def encode(ftype, seq, body=b""):
    """One frame, ready for the wire (ends in 0x00)."""
    if len(body) > MAX_BODY:
        raise FrameError("frame body of %d bytes exceeds %d" % (len(body), MAX_BODY))
    if not 0 <= ftype <= 0xFF or not 0 <= seq <= 0xFF:
        raise FrameError("frame type and seq must be bytes, got %r, %r" % (ftype, seq))
    raw = bytes((ftype, seq)) + bytes(body)
    raw += struct.pack("<I", binascii.crc32(raw) & 0xFFFFFFFF)
    return cobs_encode(raw) + b"\x00"


class Decoder:
    """Feed raw bytes; get whole, CRC-checked frames ``(type, seq, body)``.

    Damaged frames (bad stuffing, bad CRC, too short, too long) are dropped
    and counted in ``errors``; the decoder resynchronises on the next 0x00."""
    __slots__ = ("buf", "errors", "overflow")

    def __init__(self):
        self.buf = bytearray()
        self.errors = 0
        self.overflow = False

    def feed(self, data):
        frames = []
        for b in data:
            if b != 0:
                if len(self.buf) < MAX_WIRE:
                    self.buf.append(b)
                else:
                    self.overflow = True
                continue
            if self.buf or self.overflow:
                f = self._finish()
                if f is None:
                    self.errors += 1
                else:
                    frames.append(f)
            self.buf = bytearray()
            self.overflow = False
        return frames

    def _finish(self):
        if self.overflow:
            return None
        raw = cobs_decode(bytes(self.buf))
        if raw is None or len(raw) < 6:
            return None
        crc = struct.unpack("<I", raw[-4:])[0]
        if binascii.crc32(raw[:-4]) & 0xFFFFFFFF != crc:
            return None
        return raw[0], raw[1], raw[2:-4]
