"""The power-safe, append-only contact log.

File ``log.bin`` in the store::

    header  24 bytes  b"LCLG" | version u8 (2) | 3 bytes zero | base_seq u32 | log_id u32 |
                      origin_seq u32 | crc32 u32 of bytes 0..19
    record  33 bytes  0xA5 | length u8 (27) | payload (27 bytes) | crc32 u32 of the 29 bytes before it

    payload, little-endian ("<IBqBIBBHbI"):
      seq u32, kind u8, utc_us i64, time_state u8, uncertainty_us u32,
      body u8, limb u8, session u16, image i8 (-1: none), ref_seq u32

All integers little-endian.  Records follow each other with consecutive
``seq`` starting at ``base_seq``.  A record is only ever appended; a power cut
while appending leaves a tail that fails its length, CRC or sequence check:
start-up recovery (``Log.open``) keeps every record before it and truncates
the tail.  A contact is acknowledged to the navigator only after ``append``
returned (written and flushed).

Space.  The log refuses new records (``LogFull``) when ``capacity`` bytes
would be exceeded; it never overwrites a record the host has not confirmed.
``ack(seq)`` (after a host sync) compacts: the records after ``seq`` are copied
under a new header with ``base_seq = seq + 1`` into a temporary file that is
renamed over the log (``FileStore.replace``), so a cut leaves either the old
or the new log, never a mix.  ``base_seq - 1`` is the confirmed sequence number,
and it survives an empty log.

Identity.  A log gets a random 32-bit ``log_id`` and its ``origin_seq`` (the
first sequence number it ever issued) when it is created; both stay in the
header through every compaction.  The host keys what it archives on
(device, log_id, seq), so a log created again (reflash, new file) can reuse
sequence numbers without being mistaken for the old one.  A version-1 header
(no identity) is upgraded on open with a new identity whose ``origin_seq`` is
its ``base_seq``.  ``range_crc(from_seq, last_seq)`` streams the CRC-32 of the
packed records in that range: the proof an acknowledgement carries.

A void is a new record (kind VOID) whose ``ref_seq`` names the voided contact;
nothing is erased.  Records readable by the host are the same bytes as on
flash (the CRC travels end to end).
"""
import binascii
import struct

MAGIC = b"LCLG"
VERSION = 2
HEADER_LEN = 24
V1_HEADER_LEN = 16
REC_MAGIC = 0xA5
PAYLOAD_FMT = "<IBqBIBBHbI"
PAYLOAD_LEN = 27
RECORD_LEN = 2 + PAYLOAD_LEN + 4

CONTACT = 1
VOID = 2
SESSION = 3
SETTINGS = 4
TIME_SET = 5
KIND_NAMES = {CONTACT: "contact", VOID: "void", SESSION: "session-start", SETTINGS: "settings",
              TIME_SET: "time-set"}
BODY_NAMES = ("sun", "moon")
LIMB_NAMES = ("lower", "upper")
TIME_STATE_NAMES = ("none", "locked", "holdover", "manual")


class LogError(ValueError):
    """The log cannot do what was asked (damaged header, unknown sequence number)."""


class LogFull(LogError):
    """No room for another record until the host syncs and acknowledges."""


class Record:
    """One log record (see the module docstring for the field meanings)."""
    __slots__ = ("seq", "kind", "utc_us", "time_state", "uncertainty_us", "body", "limb",
                 "session", "image", "ref_seq")

    def __init__(self, seq, kind, utc_us, time_state, uncertainty_us, body, limb, session,
                 image=-1, ref_seq=0):
        self.seq = seq
        self.kind = kind
        self.utc_us = utc_us
        self.time_state = time_state
        self.uncertainty_us = uncertainty_us
        self.body = body
        self.limb = limb
        self.session = session
        self.image = image
        self.ref_seq = ref_seq

    def pack(self):
        payload = struct.pack(PAYLOAD_FMT, self.seq, self.kind, self.utc_us, self.time_state,
                              self.uncertainty_us, self.body, self.limb, self.session, self.image,
                              self.ref_seq)
        head = bytes((REC_MAGIC, PAYLOAD_LEN)) + payload
        return head + struct.pack("<I", binascii.crc32(head) & 0xFFFFFFFF)

    def to_dict(self):
        """Plain values for the host: names instead of codes, ``utc_us`` int."""
        return {"seq": self.seq, "kind": KIND_NAMES.get(self.kind, "kind-%d" % self.kind),
                "utc_us": self.utc_us, "time_state": TIME_STATE_NAMES[self.time_state]
                if self.time_state < 4 else "state-%d" % self.time_state,
                "uncertainty_us": self.uncertainty_us, "body": BODY_NAMES[self.body & 1],
                "limb": LIMB_NAMES[self.limb & 1], "session": self.session,
                "image": None if self.image < 0 else self.image,
                "ref_seq": self.ref_seq if self.kind == VOID else None}

    def __eq__(self, other):
        return isinstance(other, Record) and self.pack() == other.pack()

    def __repr__(self):
        return "Record(%r)" % (self.to_dict(),)


def unpack_record(data, offset=0):
    """The record at ``offset`` of ``data``, or None if it is torn, damaged or not a record."""
    end = offset + RECORD_LEN
    if end > len(data) or data[offset] != REC_MAGIC or data[offset + 1] != PAYLOAD_LEN:
        return None
    crc = struct.unpack("<I", data[end - 4:end])[0]
    if binascii.crc32(data[offset:end - 4]) & 0xFFFFFFFF != crc:
        return None
    f = struct.unpack(PAYLOAD_FMT, data[offset + 2:end - 4])
    return Record(f[0], f[1], f[2], f[3], f[4], f[5], f[6], f[7], f[8], f[9])


def unpack_records(data):
    """Every record in ``data`` (a run of packed records); raises LogError on a damaged one."""
    out = []
    for off in range(0, len(data), RECORD_LEN):
        r = unpack_record(data, off)
        if r is None:
            raise LogError("damaged log record at byte %d" % off)
        out.append(r)
    if len(data) % RECORD_LEN:
        raise LogError("log data of %d bytes is not a whole number of records" % len(data))
    return out


def pack_header(base_seq, log_id=0, origin_seq=1):
    head = MAGIC + bytes((VERSION, 0, 0, 0)) + struct.pack("<III", base_seq, log_id, origin_seq)
    return head + struct.pack("<I", binascii.crc32(head) & 0xFFFFFFFF)


def new_log_id():
    """A random nonzero u32 for a new log (``os.urandom`` where the port has it, else the ticks)."""
    try:
        import os
        v = struct.unpack("<I", os.urandom(4))[0]
    except (ImportError, AttributeError, NotImplementedError, OSError):
        import time
        t = getattr(time, "ticks_us", None)
        v = (t() if t is not None else int(time.time() * 1000000)) & 0xFFFFFFFF
    return v or 1


class Log:
    """The contact log in ``store`` (a ``hal.FileStore`` or equivalent) under ``name``.

    ``base_seq`` first sequence number the file may hold (``confirmed = base_seq - 1``),
    ``next_seq`` the number the next record gets, ``recovered_bytes`` torn bytes dropped at open."""
    __slots__ = ("store", "name", "capacity", "base_seq", "next_seq", "size", "recovered_bytes", "log_id",
                 "origin_seq", "id_source")

    def __init__(self, store, name="log.bin", capacity=65536, id_source=new_log_id):
        if capacity < HEADER_LEN + RECORD_LEN:
            raise LogError("log capacity %d is too small" % capacity)
        self.store = store
        self.name = name
        self.capacity = capacity
        self.recovered_bytes = 0
        self.id_source = id_source
        self.open()

    def open(self):
        """Recover after a power cut: finish an interrupted compaction, drop a torn tail."""
        st = self.store
        st.recover(self.name)
        if st.size(self.name) < V1_HEADER_LEN:
            # never created, or creation cut before the rename: nothing was ever acknowledged
            st.replace(self.name, pack_header(1, self.id_source(), 1))
        head = st.read(self.name, 0, HEADER_LEN)
        if head[:4] == MAGIC and head[4] == 1 and \
                binascii.crc32(head[:12]) & 0xFFFFFFFF == struct.unpack("<I", head[12:16])[0]:
            self._upgrade_v1(struct.unpack("<I", head[8:12])[0])
            head = st.read(self.name, 0, HEADER_LEN)
        if len(head) < HEADER_LEN or head[:4] != MAGIC or head[4] != VERSION or \
                binascii.crc32(head[:20]) & 0xFFFFFFFF != struct.unpack("<I", head[20:24])[0]:
            raise LogError("log header damaged (%s in the store): keep the file and contact support" % self.name)
        self.base_seq, self.log_id, self.origin_seq = struct.unpack("<III", head[8:20])
        seq = self.base_seq
        off = HEADER_LEN
        total = st.size(self.name)
        good = True
        while good and off + RECORD_LEN <= total:
            chunk = st.read(self.name, off, 16 * RECORD_LEN)       # 16 records per read
            i = 0
            while i + RECORD_LEN <= len(chunk):
                r = unpack_record(chunk, i)
                if r is None or r.seq != seq:
                    good = False
                    break
                seq += 1
                i += RECORD_LEN
            off += i
            if i == 0:
                break
        if off < total:
            self.recovered_bytes = total - off
            st.truncate(self.name, off)
        self.next_seq = seq
        self.size = off

    def _upgrade_v1(self, base_seq):
        """A version-1 log (16-byte header, no identity): the same records under a v2 header with a
        new identity whose ``origin_seq`` is ``base_seq``."""
        st = self.store
        total = st.size(self.name)
        chunks = [pack_header(base_seq, self.id_source(), base_seq)]
        off = V1_HEADER_LEN
        while off < total:
            n = min(1024, total - off)
            chunks.append(st.read(self.name, off, n))
            off += n
        st.replace(self.name, chunks)

    def range_crc(self, from_seq, last_seq):
        """CRC-32 of the packed records ``from_seq`` .. ``last_seq`` (all held), streamed; None when
        part of the range is not held."""
        if from_seq < self.base_seq or last_seq >= self.next_seq or last_seq < from_seq:
            return None
        crc = 0
        s = from_seq
        while s <= last_seq:
            n = min(32, last_seq + 1 - s)
            crc = binascii.crc32(self.read_raw(s, n), crc)
            s += n
        return crc & 0xFFFFFFFF

    @property
    def confirmed_seq(self):
        return self.base_seq - 1

    @property
    def first_seq(self):
        return self.base_seq if self.next_seq > self.base_seq else None

    @property
    def last_seq(self):
        return self.next_seq - 1 if self.next_seq > self.base_seq else None

    @property
    def free_bytes(self):
        return self.capacity - self.size

    @property
    def free_records(self):
        return max(0, self.free_bytes // RECORD_LEN)

    def append(self, kind, utc_us, time_state, uncertainty_us, body, limb, session, image=-1, ref_seq=0):
        """Write one record and flush it; returns the ``Record``.  ``LogFull`` when there is no room."""
        if self.size + RECORD_LEN > self.capacity:
            raise LogFull("log full (%d records unsynced): sync with the computer" % (self.next_seq - self.base_seq))
        rec = Record(self.next_seq, kind, utc_us, time_state, uncertainty_us, body, limb, session, image, ref_seq)
        self.store.append(self.name, rec.pack())
        self.next_seq += 1
        self.size += RECORD_LEN
        return rec

    def read_raw(self, from_seq, max_records):
        """Packed records from ``from_seq`` (clamped to the first held), at most ``max_records``."""
        if from_seq < self.base_seq:
            from_seq = self.base_seq
        n = min(max_records, self.next_seq - from_seq)
        if n <= 0:
            return b""
        off = HEADER_LEN + (from_seq - self.base_seq) * RECORD_LEN
        return self.store.read(self.name, off, n * RECORD_LEN)

    def get(self, seq):
        data = self.read_raw(seq, 1)
        if seq < self.base_seq or not data:
            return None
        return unpack_record(data)

    def ack(self, seq):
        """The host holds every record up to ``seq``: reclaim their space (power-cut safe)."""
        if seq < self.base_seq - 1:
            return
        if seq >= self.next_seq:
            raise LogError("acknowledged seq %d is beyond the last record %d" % (seq, self.next_seq - 1))
        keep_from = HEADER_LEN + (seq + 1 - self.base_seq) * RECORD_LEN
        st = self.store
        chunks = [pack_header(seq + 1, self.log_id, self.origin_seq)]
        off = keep_from
        while off < self.size:
            n = min(1024, self.size - off)
            chunks.append(st.read(self.name, off, n))
            off += n
        st.replace(self.name, chunks)
        self.size = HEADER_LEN + (self.size - keep_from)
        self.base_seq = seq + 1

    def records(self, from_seq=0):
        """Every held record from ``from_seq`` (for status and tests)."""
        out = []
        s = max(from_seq, self.base_seq)
        while s < self.next_seq:
            out.extend(unpack_records(self.read_raw(s, 32)))
            s = out[-1].seq + 1
        return out
