"""Device side of the timer link: decode request frames, run commands, encode responses.

See ``device/PROTOCOL.md`` for the commands and their bodies.  The codec is
``device.frame``; this module only knows the command numbers and bodies.

Protocol 2 (log identity, proven acknowledgements, split answers):

* The timer keeps the answer to the last request.  A repeat of that request
  (same type, ``seq`` and body, within ``REPLAY_US``) gets the same answer again
  without running the command twice, and ``RESEND`` asks for byte ranges of it.
* An answer longer than the link's part size (``part_len``, set by HELLO or
  LINK; 0: whole answers) travels as ``PART`` frames, each carrying its offset,
  so a noisy link loses only the damaged parts and the host asks for those.
* ACK names the log identity and the range it confirms, with a CRC-32 over the
  records the host holds in it (``proof``: each record without its own CRC-32);
  the timer computes the same over what it holds (``held_proof``) and keeps its
  records when they differ.
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
RESEND = 0x0A                    # byte ranges of the last answer again (as PART frames)
LINK = 0x0B                      # set the part size of answers
RESPONSE = 0x80
CHANGES = (ACK, SET_TIME, PUSH_BEGIN, PUSH_DATA, PUSH_END)   # commands that change something
PART = 0x7E
ERROR = 0x7F

E_UNKNOWN = 1        # unknown command
E_BAD = 2            # malformed request body
E_REFUSED = 3        # the device will not do it now (e.g. set time while GPS-locked)
E_LOG = 4            # the log cannot do it (ack beyond the last record, range not held)
E_FILE = 5           # file push failed (gap, size or CRC mismatch, unknown slot, no space)
E_DAMAGED = 6        # a damaged frame arrived (seq unknown): the host may resend at once
E_IDENTITY = 7       # the ack names another log than the one the timer holds
E_PROOF = 8          # the ack's CRC-32 does not match the records the timer holds in the range
E_GONE = 9           # RESEND for an answer the timer no longer holds: ask again

SLOTS = ("instrument", "almanac", "track")
CHUNK = 512                      # bytes of file data per PUSH_DATA (the host may send less)
IDLE_GAP_US = 20000              # silence inside a frame longer than this: the frame is lost
REPLAY_US = 10000000             # a repeated request within 10 s is a retry: answer from the cache
LOG_HEAD = 16                    # READ_LOG answer header: log_id, base_seq, next_seq, n (u32 each)
LOG_BATCH_MAX = (frame.MAX_BODY - LOG_HEAD) // 33
PART_HEAD = 5                    # PART body header: answer type u8, total u16, offset u16
MIN_PART = 8                     # smallest part the timer will cut
MAX_PART = frame.MAX_BODY - PART_HEAD
MAX_CELLS = 256                  # parts one RESEND can ask for (a bitmap of 32 bytes)


class Refused(Exception):
    """A command the device answers with an ERROR frame."""

    def __init__(self, code, message):
        super().__init__(message)      # (MicroPython has no Exception.__init__ to call directly)
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


PROOF_BYTES = 29                 # of each 33-byte record: all but its own CRC-32 (see ``proof``)


def proof(records, crc=0):
    """The CRC-32 an ACK carries: over each record the host holds in the acknowledged range
    (33 packed bytes, in seq order) WITHOUT its last 4 bytes, the record's own CRC-32.

    Why not over the whole records: a CRC-32 run over data followed by its own CRC-32
    (little-endian) always leaves the same remainder (0x2144DF1C for this CRC), so a CRC-32 over
    whole records would depend on their number only, never on their content.  ``records``: an
    iterable of packed records; ``crc``: the value so far (to continue a running proof)."""
    for r in records:
        crc = binascii.crc32(r[:PROOF_BYTES], crc)
    return crc & 0xFFFFFFFF


def held_proof(log, first, last):
    """``proof`` over the records ``log`` holds with ``first <= seq <= last`` (read in chunks of 16,
    gaps skipped), or None when the range is not held (starts before the first record held or
    ends after the last)."""
    if first < log.base_seq or last >= log.next_seq or last < first:
        return None
    crc = 0
    s = first
    while s <= last:
        data = log.read_raw(s, 16)
        if not data:
            break
        off = 0
        seq = s
        while off + 33 <= len(data):
            seq = struct.unpack("<I", data[off + 2:off + 6])[0]
            if seq > last:
                return crc & 0xFFFFFFFF
            crc = binascii.crc32(data[off:off + PROOF_BYTES], crc)
            off += 33
        s = seq + 1
    return crc & 0xFFFFFFFF


def split(rtype, seq, body, part_len, ranges=None):
    """The wire bytes of an answer: one frame when it fits in ``part_len`` (0: always), else PART
    frames of at most ``part_len`` bytes each; ``ranges``: only the parts covering these
    ``(offset, length)`` byte ranges (a RESEND)."""
    n = len(body)
    if not part_len or (n <= part_len and ranges is None):
        return frame.encode(rtype, seq, body)
    part_len = max(MIN_PART, min(part_len, MAX_PART))
    if ranges is None:
        ranges = ((0, n),)
    out = []
    for off, length in ranges:
        end = min(n, off + length)
        while off < end or (n == 0 and off == 0 and not out):
            k = min(part_len, end - off)
            out.append(frame.encode(PART, seq, struct.pack("<BHH", rtype, n, off) + body[off:off + k]))
            off += k
            if k == 0:
                break
    return b"".join(out)


class Protocol:
    """``feed(bytes)`` -> bytes to send back.  ``fw`` is the ``Firmware`` (status, log, clock, store)."""
    __slots__ = ("fw", "decoder", "last_key", "last_type", "last_body", "last_tick", "push",
                 "requests", "snapshot", "last_rx", "part_len")

    def __init__(self, fw):
        self.fw = fw
        self.decoder = frame.Decoder()
        self.last_key = None
        self.last_type = 0
        self.last_body = b""
        self.last_tick = 0
        self.push = None                 # [slot, size, crc, received, running crc]
        self.requests = 0
        self.snapshot = None
        self.last_rx = 0
        self.part_len = 0                # 0: whole answers (a protocol-1 host never sets it)

    def idle(self, now):
        """Called when nothing arrived: a frame cut short (its 0x00 lost) for ``IDLE_GAP_US`` is
        dropped and NAKed so that the host resends at once."""
        if self.decoder.buf and now - self.last_rx > IDLE_GAP_US:
            self.decoder.buf = bytearray()
            self.decoder.errors += 1
            return frame.encode(ERROR, 0, bytes((E_DAMAGED,)))
        return b""

    def feed(self, data):
        self.last_rx = self.fw.now()
        out = []
        errors = self.decoder.errors
        frames = self.decoder.feed(data)
        if self.decoder.errors != errors:
            out.append(frame.encode(ERROR, 0, bytes((E_DAMAGED,))))
        seen = None
        for ftype, seq, body in frames:
            now = self.fw.now()
            key = (ftype, seq, bytes(body))
            if key == seen:
                continue                 # the host sent it twice (a noisy link): answer once
            seen = key
            if ftype == RESEND:
                out.append(self._resend(seq, body))
                continue
            if key == self.last_key and now - self.last_tick < REPLAY_US:
                # the same answer, cut to the part size in force now (the host places parts by offset)
                out.append(split(self.last_type, seq, self.last_body, self.part_len))
                continue
            self.requests += 1
            try:
                rtype, answer = ftype | RESPONSE, self.handle(ftype, body)
            except Refused as e:
                rtype, answer = ERROR, bytes((e.code,)) + e.message.encode()[:200]
            except OSError as e:         # the flash refused a file chunk (full): said, not fatal,
                if self.push is not None:     # and the partial file does not keep the flash full
                    self.fw.store.remove("slot_%s.part" % self.push[0])
                    self.push = None
                rtype, answer = ERROR, bytes((E_FILE,)) + ("storage: %s" % (e,)).encode()[:200]
            self.last_key = key
            self.last_type = rtype
            self.last_body = answer
            self.last_tick = now
            out.append(split(rtype, seq, answer, self.part_len))
        return b"".join(out)

    def _resend(self, seq, body):
        """Parts of the last answer again: part_len u16, first u16, copies u8, then a bitmap whose
        bit i (byte i // 8, bit i % 8) asks for part ``first + i`` (bytes ``part_len`` times that,
        on); no bitmap: the whole answer.  Each part goes ``copies`` times (1-4: a very noisy
        link gets the last missing parts sooner).  The part size also becomes the link's."""
        if len(body) < 5 or len(body) > 5 + MAX_CELLS // 8:
            return frame.encode(ERROR, seq, bytes((E_BAD,)) + b"resend needs part_len, first, copies, bitmap")
        if self.last_key is None or self.last_key[1] != seq:
            return frame.encode(ERROR, seq, bytes((E_GONE,)) + b"that answer is no longer held: ask again")
        plen, first, copies = struct.unpack("<HHB", body[:5])
        if plen:
            self.part_len = max(MIN_PART, min(plen, MAX_PART))
        plen = self.part_len or MAX_PART
        ranges = None
        if len(body) > 5:
            ranges = []
            for i in range(8 * (len(body) - 5)):
                if body[5 + i // 8] >> (i % 8) & 1:
                    off = (first + i) * plen
                    if ranges and ranges[-1][0] + ranges[-1][1] == off:
                        ranges[-1][1] += plen
                    else:
                        ranges.append([off, plen])
        out = split(self.last_type, seq, self.last_body, plen, ranges)
        return out * max(1, min(copies, 4))

    def handle(self, ftype, body):
        fw = self.fw
        if ftype == HELLO:
            # protocol-2 hosts add the part size they want: version u8, part_len u16
            if len(body) >= 3:
                plen = struct.unpack("<H", body[1:3])[0]
                self.part_len = max(MIN_PART, min(plen, MAX_PART)) if plen else 0
            log = fw.log
            return json.dumps({"protocol": PROTOCOL_VERSION, "firmware": fw.firmware_version,
                               "device_id": fw.device_id, "log_id": log.log_id, "origin_seq": log.origin_seq,
                               "base_seq": log.base_seq, "next_seq": log.next_seq},
                              separators=(",", ":")).encode()
        if ftype == LINK:
            if len(body) != 2:
                raise Refused(E_BAD, "link needs part_len u16")
            plen = struct.unpack("<H", body)[0]
            self.part_len = max(MIN_PART, min(plen, MAX_PART)) if plen else 0
            return struct.pack("<H", self.part_len)
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
            return struct.pack("<IIII", log.log_id, log.base_seq, log.next_seq, len(data) // 33) + data
        if ftype == ACK:
            return self._ack(body)
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

    def _ack(self, body):
        """log_id u32, from_seq u32, last_seq u32, proof u32: reclaim ``from_seq..last_seq`` when the
        log is that one, the range starts at the first record held and the proof matches."""
        if len(body) != 16:
            raise Refused(E_BAD, "ack needs log_id, from_seq, last_seq and crc32 (u32 each; protocol 2)")
        log_id, first, last, crc = struct.unpack("<IIII", body)
        log = self.fw.log
        if log_id != log.log_id:
            raise Refused(E_IDENTITY, "ack names log %08x but this timer's log is %08x: nothing reclaimed"
                          % (log_id, log.log_id))
        if last >= log.base_seq:
            if first != log.base_seq:
                raise Refused(E_LOG, "ack from seq %d but the first record held is %d: nothing reclaimed"
                              % (first, log.base_seq))
            if last >= log.next_seq:
                raise Refused(E_LOG, "acknowledged seq %d is beyond the last record %d: nothing reclaimed"
                              % (last, log.next_seq - 1))
            held = held_proof(log, first, last)
            if held != crc:
                raise Refused(E_PROOF, "ack proof %08x does not match the records %d..%d held here: "
                              "nothing reclaimed" % (crc, first, last))
            try:
                log.ack(last)
            except ValueError as e:
                raise Refused(E_LOG, str(e))
        return struct.pack("<IIII", log.log_id, log.base_seq, log.next_seq, log.free_records)

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
