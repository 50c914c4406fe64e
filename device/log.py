"""The power-safe, append-only contact log, kept as a chain of small segment files.

Files in the store (``name`` is ``log.bin`` unless said otherwise)::

    name        head    28 bytes  b"LCLG" | version u8 (3) | 3 bytes zero | base_seq u32 | log_id u32 |
                                  origin_seq u32 | high_seq u32 | crc32 u32 of bytes 0..23
    name.b      the same head again (a second copy, written after the first)
    name.SSSSSSSS  a segment: records only, the first with seq 0xSSSSSSSS (8 hex digits in the name);
                   at most ``SEG_RECORDS`` (64) record slots, 2112 bytes

    record  33 bytes  0xA5 | length u8 (27) | payload (27 bytes) | crc32 u32 of the 29 bytes before it

    payload, little-endian ("<IBqBIBBHbI"):
      seq u32, kind u8, utc_us i64, time_state u8, uncertainty_us u32,
      body u8, limb u8, session u16, image i8 (-1: none), ref_seq u32

All integers little-endian.  Within a segment the records follow each other with
consecutive ``seq``: a segment is a run of slots, and every slot uses up a
sequence number, whether its record is intact or not.

Appending.  A record is only ever appended (to the last segment; a new segment
file, named by the record's seq, when the last one has ``SEG_RECORDS`` slots) and
flushed; a contact is acknowledged to the navigator only after ``append``
returned.  A power cut while appending leaves a torn tail shorter than a record:
start-up (``Log.open``) cuts it off (a streamed copy of that one segment); that
record was never acknowledged, and its number is given to the next record.

Reading.  Every read streams: boot, ``read_raw`` (and the ACK's proof), ``ack`` and the
record iterators hold one chunk of ``CHUNK_RECORDS`` records (528 bytes) at a
time, never the log.  A damaged record (a flipped bit: magic, length or CRC
wrong) is skipped; the reader resynchronises on the next record whose magic,
length and CRC are right (byte by byte if it must) and whose seq belongs to the
segment, so the intact records after it are kept.  Its slot keeps its sequence
number: numbers are never reused.  ``damaged`` counts the damaged records found
at start-up (held ones) and ``damaged_seqs`` lists the first 16; ``read_raw``
returns the held records in seq order with gaps where damaged ones were.

Acknowledging (``ack(seq)``, after a host sync).  The two heads are replaced
(each atomically: temporary file + rename) with ``base_seq = seq + 1``, then
every segment whose records are all acknowledged is removed (the last one too
when everything is acknowledged).  No record is copied: a sync writes two
28-byte heads per ACK.  Acknowledged records in the first remaining segment
stay there until the log needs their room: then that one segment is
compacted (its unacknowledged records copied to ``<new name>.new``, renamed to a
new segment named by ``base_seq``, then the old file removed; a ``.new`` left by a
cut is deleted at start-up).  ``base_seq - 1`` is the
confirmed sequence number, and it survives an empty log.  A cut anywhere leaves
a state start-up finishes: a segment below ``base_seq`` is removed, an older
segment that overlaps a newer one (compaction cut before the removal) yields
only the seqs below the newer one's first.

Space.  ``capacity`` bytes bound the head and the segments; the log refuses
new records (``LogFull``) beyond it; it never overwrites a record the host has
not confirmed.  A write the storage refuses raises ``LogWriteError``; the next
append first cuts off whatever part of the record reached the file.

Identity.  A log gets a random 32-bit ``log_id`` and its ``origin_seq`` (the
first sequence number it ever issued) when it is created; both stay in the
heads for its whole life.  ``high_seq`` in the head is the next sequence number
when the head was written: after every segment was reclaimed the numbering
goes on from it.  The host keys what it archives on (device, log_id, seq).  A
damaged head is rebuilt from the other copy; with both damaged (``rebuilt``
says so), from the segments: a new ``log_id`` with ``origin_seq`` = the first
surviving seq, ``base_seq`` = the first segment's first seq (acknowledged records
still on flash are served again: the host keeps them once).  A version-1 or 2
log (one file: header + records) is converted on open, its identity kept (a
version-1 log gets a new one with ``origin_seq`` = its ``base_seq``).
The proof an acknowledgement carries is ``device.protocol.held_proof(log, first,
last)``: streamed through ``read_raw``, over the records held in the range, each
without its own CRC-32.

A void is a new record (kind VOID) whose ``ref_seq`` names the voided contact;
a late stamp (kind STAMP) names a contact logged before the clock had time and
gives its UTC; nothing is erased.  A record whose ``time_state`` is none holds
in ``utc_us`` the oscillator's extended tick (us since boot) and, except a void,
in ``ref_seq`` the boot count.  Records readable by the host are the same bytes
as on flash (the CRC travels end to end).
"""
import binascii
import struct

MAGIC = b"LCLG"
VERSION = 3
HEADER_LEN = 28
V2_HEADER_LEN = 24
V1_HEADER_LEN = 16
REC_MAGIC = 0xA5
PAYLOAD_FMT = "<IBqBIBBHbI"
PAYLOAD_LEN = 27
RECORD_LEN = 2 + PAYLOAD_LEN + 4
SEG_RECORDS = 64
CHUNK_RECORDS = 16
CHUNK = CHUNK_RECORDS * RECORD_LEN
DAMAGE_LIST = 16

CONTACT = 1
VOID = 2
SESSION = 3
SETTINGS = 4
TIME_SET = 5
FAULT = 6
STAMP = 7
KIND_NAMES = {CONTACT: "contact", VOID: "void", SESSION: "session-start", SETTINGS: "settings",
              TIME_SET: "time-set", FAULT: "fault", STAMP: "stamp"}
BODY_NAMES = ("sun", "moon")
LIMB_NAMES = ("lower", "upper")
TIME_STATE_NAMES = ("none", "locked", "holdover", "manual")


class LogError(ValueError):
    """The log cannot do what was asked (unknown sequence number, no room, storage refused)."""


class LogFull(LogError):
    """No room for another record until the host syncs and acknowledges."""


class LogWriteError(LogError):
    """The storage refused a write (flash full, I/O error); nothing was acknowledged.  ``errno`` is the
    storage's error number (28, ENOSPC: the flash is full), or None."""

    def __init__(self, message, errno=None):
        LogError.__init__(self, message)
        self.errno = errno


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
        """Plain values for the host: names instead of codes, ``utc_us`` int (the tick when untimed)."""
        d = {"seq": self.seq, "kind": KIND_NAMES.get(self.kind, "kind-%d" % self.kind),
             "utc_us": self.utc_us, "time_state": TIME_STATE_NAMES[self.time_state]
             if self.time_state < 4 else "state-%d" % self.time_state,
             "uncertainty_us": self.uncertainty_us, "body": BODY_NAMES[self.body & 1],
             "limb": LIMB_NAMES[self.limb & 1], "session": self.session,
             "image": None if self.image < 0 else self.image,
             "ref_seq": self.ref_seq if self.kind in (VOID, STAMP, FAULT) else None}
        if self.time_state == 0 and self.kind != VOID:
            d["tick_us"] = self.utc_us
            d["boot"] = self.ref_seq
        return d

    def __eq__(self, other):
        return isinstance(other, Record) and self.pack() == other.pack()

    def __repr__(self):
        return "Record(%r)" % (self.to_dict(),)


def _errno(e):
    """The error number of an ``OSError`` (MicroPython puts it in ``args[0]``)."""
    n = getattr(e, "errno", None)
    if n is None and e.args and isinstance(e.args[0], int):
        n = e.args[0]
    return n


def _seq_at(data, i):
    """The seq of an intact record at ``data[i:i+33]``, or None (magic, length or CRC wrong)."""
    if i + RECORD_LEN > len(data) or data[i] != REC_MAGIC or data[i + 1] != PAYLOAD_LEN:
        return None
    if binascii.crc32(data[i:i + RECORD_LEN - 4]) & 0xFFFFFFFF != \
            struct.unpack("<I", data[i + RECORD_LEN - 4:i + RECORD_LEN])[0]:
        return None
    return struct.unpack("<I", data[i + 2:i + 6])[0]


def unpack_record(data, offset=0):
    """The record at ``offset`` of ``data``, or None if it is torn, damaged or not a record."""
    if _seq_at(data, offset) is None:
        return None
    f = struct.unpack(PAYLOAD_FMT, data[offset + 2:offset + RECORD_LEN - 4])
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


def pack_header(base_seq, log_id=0, origin_seq=1, high_seq=None):
    head = MAGIC + bytes((VERSION, 0, 0, 0)) + struct.pack("<IIII", base_seq, log_id, origin_seq,
                                                           base_seq if high_seq is None else high_seq)
    return head + struct.pack("<I", binascii.crc32(head) & 0xFFFFFFFF)


def _parse_head(h):
    """(base_seq, log_id, origin_seq, high_seq) of a version-3 head, or None."""
    if len(h) < HEADER_LEN or h[:4] != MAGIC or h[4] != VERSION or \
            binascii.crc32(h[:24]) & 0xFFFFFFFF != struct.unpack("<I", h[24:28])[0]:
        return None
    return struct.unpack("<IIII", h[8:24])


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


class _Scan:
    """Reads the intact records of one segment in order, a chunk at a time, resynchronising
    after damage.  ``next()`` -> (seq, 33 bytes) or None; only seqs in (``after``, ``limit``)
    are accepted.  ``good_end``: the byte after the last intact record read."""
    __slots__ = ("st", "name", "size", "off", "buf", "boff", "after", "limit", "good_end")

    def __init__(self, st, name, first, limit, off=0):
        self.st = st
        self.name = name
        self.size = st.size(name)
        self.off = off
        self.buf = b""
        self.boff = 0
        self.after = first - 1
        self.limit = limit
        self.good_end = off

    def _at(self, off):
        """Index in ``buf`` of byte ``off``, with a whole record after it in the buffer."""
        i = off - self.boff
        if i < 0 or i + RECORD_LEN > len(self.buf):
            self.buf = self.st.read(self.name, off, CHUNK)
            self.boff = off
            i = 0
        return i

    def next(self):
        off = self.off
        while off + RECORD_LEN <= self.size:
            i = self._at(off)
            buf = self.buf
            if i + RECORD_LEN > len(buf):           # the file shrank under us
                break
            if buf[i] == REC_MAGIC and buf[i + 1] == PAYLOAD_LEN:
                seq = _seq_at(buf, i)
                if seq is not None and self.after < seq < self.limit:
                    self.off = off + RECORD_LEN
                    self.good_end = self.off
                    self.after = seq
                    return seq, buf[i:i + RECORD_LEN]
            off += 1                                # resynchronise byte by byte
        self.off = self.size
        return None


class Log:
    """The contact log in ``store`` (a ``hal.FileStore`` or equivalent) under ``name``.

    ``base_seq`` first sequence number the log may hold (``confirmed = base_seq - 1``),
    ``next_seq`` the number the next record gets, ``recovered_bytes`` torn bytes dropped at open,
    ``damaged``/``damaged_seqs`` damaged records found at open, ``rebuilt`` None or why the head
    was rebuilt at open."""
    __slots__ = ("store", "name", "capacity", "base_seq", "next_seq", "size", "recovered_bytes", "log_id",
                 "origin_seq", "id_source", "segs", "last_slots", "damaged", "damaged_seqs", "rebuilt",
                 "tail_dirty", "writes")

    def __init__(self, store, name="log.bin", capacity=65536, id_source=new_log_id):
        if capacity < HEADER_LEN + RECORD_LEN:
            raise LogError("log capacity %d is too small" % capacity)
        self.store = store
        self.name = name
        self.capacity = capacity
        self.id_source = id_source
        self.writes = 0
        self.open()

    # -- files ----------------------------------------------------------------------
    def _seg(self, start):
        return "%s.%08x" % (self.name, start)

    def _list(self):
        """Sorted first seqs of the segment files (finishing an interrupted replace of one)."""
        pre = self.name + "."
        found = []
        tmps = []
        for n in list(self.store.names(pre)):
            s = n[len(pre):]
            if len(s) == 12 and s.endswith(".tmp"):
                tmps.append(n[:-4])
            elif len(s) == 12 and s.endswith(".new"):
                self.store.remove(n)              # a compaction cut before its rename: the old one holds it
            elif len(s) == 8:
                found.append(n)
        for n in tmps:
            self.store.recover(n)
            if n not in found and self.store.size(n) >= 0:
                found.append(n)
        out = []
        for n in found:
            try:
                out.append(int(n[len(pre):], 16))
            except ValueError:
                pass
        out.sort()
        return out

    def _write_heads(self):
        h = pack_header(self.base_seq, self.log_id, self.origin_seq, self.next_seq)
        self.store.replace(self.name, h)
        self.store.replace(self.name + ".b", h)
        self.writes += 2

    def _limit(self, i):
        """Seqs of segment ``i`` are below this (its slots, and the next segment's first)."""
        segs = self.segs
        lim = segs[i] + SEG_RECORDS
        if i + 1 < len(segs) and segs[i + 1] < lim:
            lim = segs[i + 1]
        return lim

    # -- start-up -----------------------------------------------------------------------
    def open(self):
        """Recover after a power cut or damage: finish an interrupted ack, drop a torn tail,
        skip damaged records, rebuild a damaged head (see the module docstring)."""
        st = self.store
        st.recover(self.name)
        st.recover(self.name + ".b")
        self.recovered_bytes = 0
        self.damaged = 0
        self.damaged_seqs = []
        self.rebuilt = None
        self.tail_dirty = False
        a = st.read(self.name, 0, HEADER_LEN)
        if a[:4] == MAGIC and len(a) >= 5 and a[4] in (1, 2) and self._convert(a):
            a = st.read(self.name, 0, HEADER_LEN)
        ha = _parse_head(a)
        hb = _parse_head(st.read(self.name + ".b", 0, HEADER_LEN))
        head = ha if hb is None or (ha is not None and (ha[0], ha[3]) >= (hb[0], hb[3])) else hb
        self.segs = self._list()
        fresh = head is None and not self.segs and st.size(self.name) <= 0 and st.size(self.name + ".b") <= 0
        if head is not None:
            self.base_seq, self.log_id, self.origin_seq, high = head
            if ha != hb:
                self.rebuilt = "head copy" if ha is None or hb is None else None
        elif fresh:
            self.base_seq, self.log_id, self.origin_seq, high = 1, self.id_source(), 1, 1
        else:
            self.base_seq = self.segs[0] if self.segs else 1
            self.log_id = self.origin_seq = high = 0
        self._scan_all(head is None and not fresh)
        if head is None and not fresh:
            # both heads damaged: a new identity whose first seq is the first record that survived
            self.log_id = self.id_source()
            self.rebuilt = "new identity"
        self.next_seq = max(self.next_seq, high, self.base_seq)
        if head is None or ha != hb:
            try:
                self._write_heads()
            except OSError:
                self.rebuilt = (self.rebuilt or "head") + " (not written: storage error)"

    def _scan_all(self, find_origin):
        """Stream every segment once: next_seq, damaged records, torn tail, reclaimed leftovers."""
        st = self.store
        base = self.base_seq
        keep = []
        self.size = HEADER_LEN
        nxt = base
        first_good = None
        segs = self.segs
        self.last_slots = SEG_RECORDS
        for i in range(len(segs)):
            s = segs[i]
            lim = self._limit(i)
            last = i == len(segs) - 1
            if not last and lim <= base:
                self._try(st.remove, self._seg(s))      # acknowledged (an ack cut before its removal)
                continue
            sc = _Scan(st, self._seg(s), s, lim)
            prev = s - 1
            while True:
                r = sc.next()
                if r is None:
                    break
                if first_good is None and r[0] >= base:
                    first_good = r[0]
                self._note_gap(prev + 1, r[0], base)
                prev = r[0]
            if not last:
                self._note_gap(prev + 1, lim, base)
                nxt = max(nxt, lim)
                self.size += sc.size
                keep.append(s)
                continue
            tail = sc.size - sc.good_end
            whole = tail // RECORD_LEN
            frag = tail - whole * RECORD_LEN
            size = sc.size - frag
            if frag:
                # a torn append (shorter than a record): never acknowledged, cut off
                self.recovered_bytes = frag
                if size > 0:
                    self._try(st.truncate, self._seg(s), size)
            if size <= 0:
                self._try(st.remove, self._seg(s))      # nothing whole in it (creation cut)
                continue
            end = prev + 1 + whole                      # whole damaged slots at the tail keep their seqs
            self._note_gap(prev + 1, end, base)
            self.last_slots = size // RECORD_LEN
            nxt = max(nxt, end)
            self.size += size
            keep.append(s)
        self.segs = keep
        self.next_seq = nxt
        if find_origin:
            self.origin_seq = first_good if first_good is not None else nxt

    def _try(self, f, *args):
        """A repair write at start-up; if the storage refuses, the log still reads right and the
        next append repairs first."""
        try:
            f(*args)
        except OSError:
            self.tail_dirty = True

    def _note_gap(self, a, b, base):
        """Seqs a .. b-1 are damaged (only those not yet acknowledged count)."""
        if a < base:
            a = base
        if b <= a:
            return
        self.damaged += b - a
        while a < b and len(self.damaged_seqs) < DAMAGE_LIST:
            self.damaged_seqs.append(a)
            a += 1

    def _convert(self, h):
        """A version-1 or 2 log (one file, header + records) -> heads + segments, identity kept
        (version 1: a new one).  Streams; a cut before the heads are replaced starts over."""
        st = self.store
        ver = h[4]
        if ver == 1:
            if len(h) < V1_HEADER_LEN or binascii.crc32(h[:12]) & 0xFFFFFFFF != struct.unpack("<I", h[12:16])[0]:
                return False
            base = struct.unpack("<I", h[8:12])[0]
            log_id, origin, hl = self.id_source(), base, V1_HEADER_LEN
        else:
            if len(h) < V2_HEADER_LEN or binascii.crc32(h[:20]) & 0xFFFFFFFF != struct.unpack("<I", h[20:24])[0]:
                return False
            base, log_id, origin = struct.unpack("<III", h[8:20])
            hl = V2_HEADER_LEN
        total = st.size(self.name)
        seq = base
        off = hl
        seg_start = base
        while off + RECORD_LEN <= total:
            chunk = st.read(self.name, off, CHUNK)
            i = j = 0
            while i + RECORD_LEN <= len(chunk):
                if _seq_at(chunk, i) != seq:
                    total = 0                       # the old format ended at its first bad record
                    break
                if seq - seg_start == SEG_RECORDS:
                    if i > j:
                        st.append(self._seg(seg_start), chunk[j:i])
                    seg_start = seq
                    j = i
                if seq == seg_start:
                    st.remove(self._seg(seq))       # left by a conversion cut short
                seq += 1
                i += RECORD_LEN
            if i > j:
                st.append(self._seg(seg_start), chunk[j:i])
            off += i
            if i == 0:
                break
        h3 = pack_header(base, log_id, origin, seq)
        st.replace(self.name + ".b", h3)
        st.replace(self.name, h3)
        return True

    # -- state ----------------------------------------------------------------------------
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

    # -- writing ----------------------------------------------------------------------------
    def append(self, kind, utc_us, time_state, uncertainty_us, body, limb, session, image=-1, ref_seq=0):
        """Write one record and flush it; returns the ``Record``.  ``LogFull`` when there is no room,
        ``LogWriteError`` when the storage refuses (the record is not in the log)."""
        if self.tail_dirty:
            self._repair_tail()
        if self.size + RECORD_LEN > self.capacity:
            self._compact_first()
            if self.size + RECORD_LEN > self.capacity:
                raise LogFull("log full (%d records unsynced): sync with the computer"
                              % (self.next_seq - self.base_seq))
        rec = Record(self.next_seq, kind, utc_us, time_state, uncertainty_us, body, limb, session, image, ref_seq)
        segs = self.segs
        new = not segs or self.last_slots >= SEG_RECORDS or segs[-1] + self.last_slots != self.next_seq
        start = self.next_seq if new else segs[-1]
        try:
            self.store.append(self._seg(start), rec.pack())
        except OSError as e:
            self.tail_dirty = True
            if new and start not in segs:
                segs.append(start)
                self.last_slots = 0
            raise LogWriteError("storage write failed (%s): record not saved" % (e,), _errno(e))
        self.writes += 1
        if new:
            segs.append(start)
            self.last_slots = 0
        self.last_slots += 1
        self.next_seq += 1
        self.size += RECORD_LEN
        return rec

    def _repair_tail(self):
        """After a failed append: cut off whatever part of the record reached the last segment."""
        s = self.segs[-1]
        name = self._seg(s)
        size = self.store.size(name)
        want = self.last_slots * RECORD_LEN
        try:
            if size > want:
                self.store.truncate(name, want)
                self.writes += 1
            if want == 0:
                self.store.remove(name)
                self.segs.pop()
                self.last_slots = SEG_RECORDS
        except OSError as e:
            raise LogWriteError("storage write failed (%s) while repairing the log's tail" % (e,), _errno(e))
        self.tail_dirty = False

    def _compact_first(self):
        """Reclaim the acknowledged records of the first segment: copy its unacknowledged ones to a
        new segment named by ``base_seq`` (atomic replace), then remove the old file."""
        segs = self.segs
        if not segs or segs[0] >= self.base_seq:
            return
        s = segs[0]
        if len(segs) == 1 and self.next_seq <= self.base_seq:
            return
        lim = self._limit(0)
        new = self.base_seq
        if lim <= new:
            return
        st = self.store
        old_size = st.size(self._seg(s))
        part = self._seg(new) + ".new"
        try:
            st.remove(part)
            st.append(part, b"")
            for c in self._raw_chunks(new, lim - 1):
                st.append(part, c)
            st.rename(part, self._seg(new))     # complete: only now does it replace the old one's seqs
            st.remove(self._seg(s))
        except OSError as e:
            st.remove(part)
            raise LogWriteError("storage write failed (%s) while reclaiming space" % (e,), _errno(e))
        self.writes += 1
        new_size = self.store.size(self._seg(new))
        segs[0] = new
        self.size += new_size - old_size
        if len(segs) == 1:
            self.last_slots = self.next_seq - new if new_size == (self.next_seq - new) * RECORD_LEN \
                else SEG_RECORDS

    def _raw_chunks(self, from_seq, last_seq):
        buf = b""
        for seq, raw in self._iter(from_seq):
            if seq > last_seq:
                break
            buf += raw
            if len(buf) >= CHUNK:
                yield buf
                buf = b""
        if buf:
            yield buf

    def ack(self, seq):
        """The host holds every record up to ``seq``: reclaim their space (power-cut safe)."""
        if seq < self.base_seq:
            return                                   # already confirmed
        if seq >= self.next_seq:
            raise LogError("acknowledged seq %d is beyond the last record %d" % (seq, self.next_seq - 1))
        self.base_seq = seq + 1
        try:
            self._write_heads()
        except OSError as e:
            raise LogWriteError("storage write failed (%s) while acknowledging" % (e,), _errno(e))
        segs = self.segs
        while segs:
            last = len(segs) == 1
            if (not last and self._limit(0) > self.base_seq) or (last and self.next_seq > self.base_seq):
                break
            name = self._seg(segs[0])
            self.size -= max(0, self.store.size(name))
            self.store.remove(name)
            segs.pop(0)
            if not segs:
                self.last_slots = SEG_RECORDS

    # -- reading -------------------------------------------------------------------------------
    def _iter(self, from_seq):
        """(seq, packed bytes) of every held record with seq >= ``from_seq`` (and >= ``base_seq``),
        in order, streamed a chunk at a time."""
        if from_seq < self.base_seq:
            from_seq = self.base_seq
        segs = list(self.segs)
        end = self.next_seq
        for i in range(len(segs)):
            s = segs[i]
            lim = s + SEG_RECORDS
            if i + 1 < len(segs) and segs[i + 1] < lim:
                lim = segs[i + 1]
            if lim > end:
                lim = end
            if lim <= from_seq:
                continue
            sc = _Scan(self.store, self._seg(s), s, lim)
            if from_seq > s:                            # the slot where from_seq is when nothing shifted
                off = (from_seq - s) * RECORD_LEN
                if off + RECORD_LEN <= sc.size:
                    j = sc._at(off)
                    if _seq_at(sc.buf, j) == from_seq:
                        sc.off = off
                        sc.after = from_seq - 1
            while True:
                r = sc.next()
                if r is None:
                    break
                if r[0] >= from_seq:
                    yield r

    def read_raw(self, from_seq, max_records):
        """Packed records from ``from_seq`` (clamped to the first held), at most ``max_records``,
        in seq order; damaged records are left out (a gap in the seqs)."""
        out = b""
        n = 0
        if max_records <= 0:
            return out
        for seq, raw in self._iter(from_seq):
            out += raw
            n += 1
            if n >= max_records:
                break
        return out

    def get(self, seq):
        """The record ``seq`` if the log holds it intact, else None."""
        if seq < self.base_seq or seq >= self.next_seq:
            return None
        for s, raw in self._iter(seq):
            return unpack_record(raw) if s == seq else None
        return None

    def iter_records(self, from_seq=0):
        """Every held record from ``from_seq`` as a ``Record``, streamed (a generator)."""
        for s, raw in self._iter(from_seq):
            yield unpack_record(raw)

    def records(self, from_seq=0):
        """Every held record from ``from_seq`` as a list (for tests; the firmware streams)."""
        return list(self.iter_records(from_seq))
