"""Device side of the timer link: decode request frames, run commands, encode responses.

See ``device/PROTOCOL.md`` for the commands and their bodies.  The codec is
``device.frame``; this module only knows the command numbers and bodies.
A retried command that changes something (``CHANGES``: same ``seq``, type and
body as the last one, within ``REPLAY_US``) gets the cached response again
without running twice; reads are simply run again (fresh data).
"""
import binascii
import json
import struct

from device import frame, PROTOCOL_VERSION

HELLO = 0x01
STATUS = 0x02
READ_LOG = 0x03
ACK = 0x04
SET_TIME = 0x05
PUSH_BEGIN = 0x06
PUSH_DATA = 0x07
PUSH_END = 0x08
FILE_INFO = 0x09
RESPONSE = 0x80
CHANGES = (ACK, SET_TIME, PUSH_BEGIN, PUSH_DATA, PUSH_END)   # answered from the cache when repeated
ERROR = 0x7F

E_UNKNOWN = 1        # unknown command
E_BAD = 2            # malformed request body
E_REFUSED = 3        # the device will not do it now (e.g. set time while GPS-locked)
E_LOG = 4            # the log cannot do it (ack beyond the last record)
E_FILE = 5           # file push failed (gap, size or CRC mismatch, unknown slot, no space)
E_DAMAGED = 6        # a damaged frame arrived (seq unknown): the host may resend at once

SLOTS = ("instrument", "almanac", "track")
CHUNK = 512                      # bytes of file data per PUSH_DATA
IDLE_GAP_US = 20000              # silence inside a frame longer than this: the frame is lost
REPLAY_US = 10000000             # a repeated request within 10 s is a retry: answer from the cache
LOG_BATCH_MAX = (frame.MAX_BODY - 12) // 33


class Refused(Exception):
    """A command the device answers with an ERROR frame."""

    def __init__(self, code, message):
        Exception.__init__(self, message)
        self.code = code
        self.message = message


def file_crc(store, name):
    """(size, crc32) of a stored file, read in chunks; (-1, 0) if absent."""
    size = store.size(name)
    if size < 0:
        return -1, 0
    crc = 0
    off = 0
    while off < size:
        chunk = store.read(name, off, 1024)
        if not chunk:
            break
        crc = binascii.crc32(chunk, crc)
        off += len(chunk)
    return size, crc & 0xFFFFFFFF


class Protocol:
    """``feed(bytes)`` -> bytes to send back.  ``fw`` is the ``Firmware`` (status, log, clock, store)."""
    __slots__ = ("fw", "decoder", "last_key", "last_reply", "last_tick", "push", "requests", "snapshot", "last_rx")

    def __init__(self, fw):
        self.fw = fw
        self.decoder = frame.Decoder()
        self.last_key = None
        self.last_reply = b""
        self.last_tick = 0
        self.push = None                 # [slot, size, crc, received, running crc]
        self.requests = 0
        self.snapshot = None
        self.last_rx = 0

    def idle(self, now):
        """Called when nothing arrived: a frame cut short (its 0x00 lost) for ``IDLE_GAP_US`` is
        dropped and NAKed so that the host resends at once."""
        if self.decoder.buf and now - self.last_rx > IDLE_GAP_US:
            self.decoder.buf = bytearray()
            self.decoder.errors += 1
            return frame.encode(ERROR, 0, bytes((E_DAMAGED,)) + b"damaged frame")
        return b""

    def feed(self, data):
        self.last_rx = self.fw.now()
        out = b""
        errors = self.decoder.errors
        frames = self.decoder.feed(data)
        if self.decoder.errors != errors:
            out += frame.encode(ERROR, 0, bytes((E_DAMAGED,)) + b"damaged frame")
        for ftype, seq, body in frames:
            key = (ftype, seq, bytes(body))
            now = self.fw.now()
            if ftype in CHANGES and key == self.last_key and now - self.last_tick < REPLAY_US:
                out += self.last_reply
                continue
            self.requests += 1
            try:
                reply = frame.encode(ftype | RESPONSE, seq, self.handle(ftype, body))
            except Refused as e:
                msg = e.message.encode()[:200]
                reply = frame.encode(ERROR, seq, bytes((e.code,)) + msg)
            except OSError as e:         # the flash refused a file chunk (full): said, not fatal,
                if self.push is not None:     # and the partial file does not keep the flash full
                    self.fw.store.remove("slot_%s.part" % self.push[0])
                    self.push = None
                reply = frame.encode(ERROR, seq, bytes((E_FILE,)) + ("storage: %s" % (e,)).encode()[:200])
            self.last_key = key
            self.last_reply = reply
            self.last_tick = now
            out += reply
        return out

    def handle(self, ftype, body):
        fw = self.fw
        if ftype == HELLO:
            return json.dumps({"protocol": PROTOCOL_VERSION, "firmware": fw.firmware_version,
                               "device_id": fw.device_id}).encode()
        if ftype == STATUS:
            # paged so that a noisy link can fetch it in small frames: offset u16, max_len u16
            off, n = struct.unpack("<HH", body) if len(body) == 4 else (0, frame.MAX_BODY - 2)
            if off == 0 or self.snapshot is None:
                self.snapshot = json.dumps(fw.status(), separators=(",", ":")).encode()
            snap = self.snapshot
            return struct.pack("<H", len(snap)) + snap[off:off + max(1, min(n, frame.MAX_BODY - 2))]
        if ftype == READ_LOG:
            if len(body) != 6:
                raise Refused(E_BAD, "read-log needs from_seq u32 and count u16")
            from_seq, count = struct.unpack("<IH", body)
            count = max(1, min(count, LOG_BATCH_MAX))
            log = fw.log
            data = log.read_raw(from_seq, count)
            return struct.pack("<III", log.base_seq, log.next_seq, len(data) // 33) + data
        if ftype == ACK:
            if len(body) != 4:
                raise Refused(E_BAD, "ack needs seq u32")
            seq = struct.unpack("<I", body)[0]
            try:
                fw.log.ack(seq)
            except ValueError as e:
                raise Refused(E_LOG, str(e))
            return json.dumps({"confirmed_seq": fw.log.confirmed_seq, "free_records": fw.log.free_records}).encode()
        if ftype == SET_TIME:
            if len(body) != 12:
                raise Refused(E_BAD, "set-time needs utc_us i64 and uncertainty_us u32")
            utc_us, unc_us = struct.unpack("<qI", body)
            try:
                fw.set_time(utc_us, unc_us)
            except ValueError as e:
                raise Refused(E_REFUSED, str(e))
            return json.dumps(fw.clock.status(fw.now())).encode()
        if ftype == PUSH_BEGIN:
            return self._push_begin(body)
        if ftype == PUSH_DATA:
            return self._push_data(body)
        if ftype == PUSH_END:
            return self._push_end()
        if ftype == FILE_INFO:
            slot = self._slot(body)
            size, crc = file_crc(fw.store, "slot_" + slot)
            return json.dumps({"slot": slot, "size": size, "crc32": crc}).encode()
        raise Refused(E_UNKNOWN, "unknown command 0x%02x" % ftype)

    def _slot(self, raw):
        try:
            slot = bytes(raw).decode()
        except UnicodeError:
            slot = "?"
        if slot not in SLOTS:
            raise Refused(E_FILE, "unknown file slot %r (have %s)" % (slot, ", ".join(SLOTS)))
        return slot

    def _push_begin(self, body):
        if len(body) < 9:
            raise Refused(E_BAD, "push-begin needs size u32, crc32 u32 and a slot name")
        size, crc = struct.unpack("<II", body[:8])
        slot = self._slot(body[8:])
        if size > self.fw.file_capacity:
            raise Refused(E_FILE, "file of %d bytes exceeds the %d bytes free for files" % (size, self.fw.file_capacity))
        st = self.fw.store
        st.remove("slot_%s.part" % slot)
        self.push = [slot, size, crc, 0, 0]
        return json.dumps({"slot": slot, "received": 0}).encode()

    def _push_data(self, body):
        p = self.push
        if p is None or len(body) < 4:
            raise Refused(E_FILE, "push-data without push-begin")
        off = struct.unpack("<I", body[:4])[0]
        data = body[4:]
        if off != p[3]:
            if off + len(data) <= p[3]:           # a repeat of a chunk already written
                return struct.pack("<I", p[3])
            raise Refused(E_FILE, "push-data at %d but %d bytes received" % (off, p[3]))
        if p[3] + len(data) > p[1]:
            raise Refused(E_FILE, "push-data beyond the announced size %d" % p[1])
        self.fw.store.append("slot_%s.part" % p[0], bytes(data))
        p[3] += len(data)
        p[4] = binascii.crc32(data, p[4]) & 0xFFFFFFFF
        return struct.pack("<I", p[3])

    def _push_end(self):
        p = self.push
        if p is None:
            raise Refused(E_FILE, "push-end without push-begin")
        self.push = None
        st = self.fw.store
        part = "slot_%s.part" % p[0]
        if p[3] != p[1] or p[4] != p[2]:
            st.remove(part)
            raise Refused(E_FILE, "file %s arrived with %d of %d bytes, crc %08x expected %08x"
                          % (p[0], p[3], p[1], p[4], p[2]))
        if p[1] == 0:
            st.replace("slot_" + p[0], b"")
        else:
            st.rename(part, "slot_" + p[0])       # atomic replace of the previous file
        self.fw.files_changed(p[0])
        return json.dumps({"slot": p[0], "size": p[1], "crc32": p[2]}).encode()
