"""Host side of the timer link: ``TimerClient`` over a serial port (pyserial).

The frames are built and parsed by ``device.frame`` (the same codec the timer
runs).  Every request carries a sequence number; a request without a valid
answer within ``timeout`` seconds is sent again, up to ``retries`` times, with
the same sequence number (the timer answers a repeat from its cache, so a
retried ack or file chunk is not applied twice)::

    with TimerClient("/dev/ttyACM0") as t:
        info = t.handshake()                 # {"protocol", "firmware", "device_id"}
        for rec in t.read_log(from_seq=1):   # device.log.Record objects, CRC-checked end to end
            ...
        t.ack(last_seq)                      # the timer may now reclaim their space

Errors are ``TimerError`` subclasses (an ``OSError``) with a message for the
navigator: ``PortUnavailable``, ``NoAnswer``, ``VersionMismatch``,
``DeviceRefused``, ``TransferError``.
"""
import binascii
import json
import struct
import time

from device import PROTOCOL_VERSION, frame, protocol as P
from device.log import unpack_records, LogError, RECORD_LEN


IDLE_GAP_S = 0.03                # silence inside a frame longer than this: the frame is lost
MIN_BODY = 48                    # smallest frame body the client falls back to on a noisy link


class TimerError(OSError):
    """A problem talking to the timer."""


class PortUnavailable(TimerError):
    """The serial port does not exist, is busy or cannot be opened."""


class NoAnswer(TimerError):
    """The timer did not answer (switched off, wrong port, cable out)."""


class VersionMismatch(TimerError):
    """The timer speaks another protocol version."""


class DeviceRefused(TimerError):
    """The timer answered with an error (``code``, ``message``)."""

    def __init__(self, code, message):
        TimerError.__init__(self, "the timer refused: %s" % message)
        self.code = code
        self.message = message


class TransferError(TimerError):
    """Data arrived damaged or out of order even after retries."""


class TimerClient:
    """Talk to a limbclock timer on ``port`` (a device path, or any object with
    ``read``/``write`` such as ``VirtualTimer.loopback()``)."""

    def __init__(self, port, baudrate=115200, timeout=1.0, retries=6):
        self.timeout = timeout
        self.retries = retries
        self.decoder = frame.Decoder()
        self.seq = int(time.monotonic() * 1000) & 0xFF
        self.device = None
        self.requests = 0
        self.retried = 0
        self.max_body = frame.MAX_BODY    # shrinks on a noisy link, grows back when it clears
        self._good = 0
        if isinstance(port, str):
            self.name = port
            self.port = _open_serial(port, baudrate)
        else:
            self.name = getattr(port, "name", "virtual link")
            self.port = port
        self._now = getattr(self.port, "monotonic", time.monotonic)

    def close(self):
        try:
            self.port.close()
        except Exception:  # closing a dead port must not hide the original error
            pass

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    # -- requests -------------------------------------------------------------
    def request(self, ftype, body=b""):
        """Send one command, return the response body (retries on timeout).

        ``body`` may be a function of the current frame size limit ``max_body``
        (for reads whose answer size the host chooses): it is rebuilt, smaller,
        when a retry follows a lost answer."""
        self.seq = (self.seq + 1) & 0xFF
        self.requests += 1
        for attempt in range(self.retries + 1):
            if attempt:
                self.retried += 1
            wire = frame.encode(ftype, self.seq, body(self.max_body) if callable(body) else body)
            try:
                self.port.write(wire)
            except Exception as e:
                raise PortUnavailable("cannot write to the timer on %s: %s" % (self.name, e))
            got = self._wait(ftype, self.seq)
            if got is None:
                # long frames are the first to be hit by noise: ask for shorter ones
                self.max_body = max(MIN_BODY, self.max_body // 2)
                self._good = 0
            else:
                self._good += 1
                if self._good >= 8 and self.max_body < frame.MAX_BODY:
                    self.max_body = min(frame.MAX_BODY, self.max_body * 2)
                    self._good = 0
                rtype, rbody = got
                if rtype == P.ERROR:
                    code = rbody[0] if rbody else 0
                    raise DeviceRefused(code, bytes(rbody[1:]).decode("utf-8", "replace"))
                return rbody
        raise NoAnswer("no answer from the timer on %s after %d tries: is it switched on and the cable in?"
                       % (self.name, self.retries + 1))

    def _wait(self, ftype, seq):
        """The answer ``(type, body)`` to request ``seq``, or None after ``timeout`` or as soon as
        a damaged frame shows the answer (or the request) was hit by noise."""
        deadline = self._now() + self.timeout
        errors = self.decoder.errors
        last_rx = self._now()
        while self._now() < deadline:
            try:
                n = getattr(self.port, "in_waiting", 0) or 1
                data = self.port.read(n)
            except Exception as e:
                raise PortUnavailable("the timer on %s went away: %s" % (self.name, e))
            if not data:
                if self.decoder.buf and self._now() - last_rx > IDLE_GAP_S:
                    # a frame stopped mid-way: its end (the 0x00) was lost; drop it and resend
                    self.decoder.buf = bytearray()
                    return None
                continue
            last_rx = self._now()
            frames = self.decoder.feed(data)
            for rtype, rseq, rbody in frames:
                if rtype == P.ERROR and rbody[:1] == bytes((P.E_DAMAGED,)):
                    return None                   # the timer saw a damaged request: resend now
                if rseq == seq and rtype in (ftype | P.RESPONSE, P.ERROR):
                    return rtype, rbody
            if self.decoder.errors != errors and not self._pending():
                return None                       # our answer arrived damaged: resend now
        return None

    def _pending(self):
        return bool(getattr(self.port, "in_waiting", 0))

    def _json(self, ftype, body=b""):
        raw = self.request(ftype, body)
        try:
            return json.loads(bytes(raw).decode())
        except ValueError:
            raise TransferError("the timer sent an unreadable answer to command 0x%02x" % ftype)

    # -- commands -------------------------------------------------------------
    def handshake(self):
        """Check the protocol version; returns ``{"protocol", "firmware", "device_id"}``."""
        info = self._json(P.HELLO, bytes((PROTOCOL_VERSION,)))
        if info.get("protocol") != PROTOCOL_VERSION:
            raise VersionMismatch("the timer speaks protocol version %s but this limbclock speaks %d: "
                                  "update limbclock or the timer firmware so they match"
                                  % (info.get("protocol"), PROTOCOL_VERSION))
        self.device = info
        return info

    def status(self):
        """The timer's status dict (clock, log, session, display lines; see device/PROTOCOL.md)."""
        text = b""
        total = None
        while total is None or len(text) < total:
            raw = self.request(P.STATUS, lambda m: struct.pack("<HH", len(text), m - 2))
            if len(raw) < 3:
                raise TransferError("short status answer")
            t = struct.unpack("<H", raw[:2])[0]
            if total is not None and t != total:
                text, total = b"", None          # the timer took a new snapshot: start again
                continue
            total = t
            text += bytes(raw[2:])
        try:
            return json.loads(text.decode())
        except ValueError:
            raise TransferError("the timer sent an unreadable status")

    def read_log_batch(self, from_seq, batch=P.LOG_BATCH_MAX):
        """(base_seq, next_seq, [Record]) from ``from_seq``; records are CRC-checked."""
        raw = self.request(P.READ_LOG, lambda m: struct.pack("<IH", from_seq,
                                                             max(1, min(batch, (m - 12) // RECORD_LEN))))
        if len(raw) < 12:
            raise TransferError("short read-log answer")
        base, nxt, count = struct.unpack("<III", raw[:12])
        data = raw[12:]
        if len(data) != count * RECORD_LEN:
            raise TransferError("read-log answer holds %d bytes for %d records" % (len(data), count))
        try:
            recs = unpack_records(data)
        except LogError as e:
            raise TransferError("log data damaged in transit: %s" % e)
        first = max(from_seq, base)
        for i, r in enumerate(recs):
            # increasing from the first asked; a gap is a record the timer found damaged and skipped
            if r.seq < first or r.seq >= nxt or (i and r.seq <= recs[i - 1].seq):
                raise TransferError("log records out of order: got seq %d after %d" % (r.seq, first + i))
        return base, nxt, recs

    def read_log(self, from_seq=0, batch=P.LOG_BATCH_MAX):
        """Yield every ``device.log.Record`` from ``from_seq`` on, batch by batch (resumable:
        start again from the last seq seen + 1).  Records already confirmed and reclaimed
        on the timer (below its ``confirmed_seq + 1``) are not there any more."""
        s = from_seq
        while True:
            base, nxt, recs = self.read_log_batch(s, batch)
            for r in recs:
                yield r
            if recs:
                s = recs[-1].seq + 1
            if not recs or s >= nxt:
                return

    def ack(self, seq):
        """Confirm that the host holds every record up to ``seq``; returns the timer's answer
        ``{"confirmed_seq", "free_records"}``."""
        return self._json(P.ACK, struct.pack("<I", seq))

    def set_time(self, utc_us, uncertainty_us):
        """Set the timer's clock (refused while it is GPS-locked); returns its clock status."""
        if not isinstance(utc_us, int) or not isinstance(uncertainty_us, int) or uncertainty_us <= 0:
            raise ValueError("set_time needs int microseconds and a positive uncertainty")
        return self._json(P.SET_TIME, struct.pack("<qI", utc_us, uncertainty_us))

    def push_file(self, slot, data, progress=None):
        """Send ``data`` (bytes) into file ``slot`` (instrument, almanac, track).  The timer
        checks length and CRC-32 and replaces the old file atomically.  ``progress(sent, total)``."""
        data = bytes(data)
        crc = binascii.crc32(data) & 0xFFFFFFFF
        self._json(P.PUSH_BEGIN, struct.pack("<II", len(data), crc) + slot.encode())
        off = 0
        while off < len(data):
            start = off
            got = self.request(P.PUSH_DATA, lambda m: struct.pack("<I", start) +
                               data[start:start + max(16, min(P.CHUNK, m - 4))])
            received = struct.unpack("<I", got)[0] if len(got) == 4 else -1
            if not start < received <= len(data):
                raise TransferError("file chunk at %d was not stored" % start)
            off = received
            if progress is not None:
                progress(off, len(data))
        info = self._json(P.PUSH_END)
        if info.get("size") != len(data) or info.get("crc32") != crc:
            raise TransferError("the timer stored %s differently from what was sent" % slot)
        return info

    def file_info(self, slot):
        """``{"slot", "size" (-1: empty), "crc32"}`` of a file slot on the timer."""
        return self._json(P.FILE_INFO, slot.encode())


def _open_serial(port, baudrate):
    try:
        import serial
    except ImportError:
        raise PortUnavailable("pyserial is not installed: pip install 'limbclock[host]'")
    try:
        return serial.Serial(port, baudrate, timeout=0.01, write_timeout=2.0, exclusive=True)
    except serial.SerialException as e:
        text = str(e)
        if "busy" in text.lower() or "lock" in text.lower():
            raise PortUnavailable("serial port %s is busy (another program has it open)" % port)
        raise PortUnavailable("cannot open serial port %s: %s" % (port, text))
    except (OSError, ValueError) as e:
        raise PortUnavailable("cannot open serial port %s: %s" % (port, e))
