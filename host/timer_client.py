"""Host side of the timer link: ``TimerClient`` over a serial port (pyserial).

The frames are built and parsed by ``device.frame`` (the same codec the timer
runs).  Every request carries a sequence number and is answered by one frame,
or, when the answer is longer than the link's part size, by ``PART`` frames
that each carry their byte offset (protocol 2, ``device/PROTOCOL.md``)::

    with TimerClient("/dev/ttyACM0") as t:
        info = t.handshake()       # {"protocol", "firmware", "device_id", "log_id", "origin_seq", "base_seq", "next_seq"}
        log_id, base, nxt, recs = t.read_log_batch(base)   # device.log.Record objects, CRC-checked end to end
        t.ack(log_id, base, recs[-1].seq, device.protocol.proof(records the host HOLDS))

How a request completes on a poor link (measured in ``bench/bench_host.py``):

* Rounds.  The host sends the request and collects what comes back until the
  answer is whole, the timer NAKs a damaged request (resend at once), or the
  line has been quiet for ``QUIET_S`` after the last byte.  Then it asks
  again: the whole request if nothing of the answer came (the timer answers a
  repeat from its cache, so a retried ACK or file chunk is not applied twice),
  else ``RESEND`` with a bitmap of the parts still missing (selective repeat).
  A round also ends as soon as the frames it expects have all ended.
* Frame size.  The client estimates the byte error rate from the frames it
  receives whole and damaged and picks the part size that carries the most
  data per byte sent, about 1 / (error rate) (``part_for``); RESEND and LINK
  tell the timer.  File chunks follow the same size.  When a request frame is
  more likely damaged than not it goes twice in a row, and the last few short
  parts are asked for in copies.
* Backoff.  When nothing at all comes back the wait grows by ``BACKOFF`` per
  round, up to ``MAX_BACKOFF`` times ``timeout`` (a timer busy with an
  on-board reduction, a slow USB hub).
* Giving up.  ``NoAnswer`` after ``retries + 1`` rounds without a single
  byte; ``NoisyLink`` after ``patience`` rounds in a row in which bytes came
  but nothing usable.  Records stay on the timer either way.

Errors are ``TimerError`` subclasses (an ``OSError``) with a message for the
navigator: ``PortUnavailable``, ``NoAnswer``, ``NoisyLink``,
``VersionMismatch``, ``DeviceRefused``, ``TransferError``.
"""
import binascii
import json
import math
import struct
import time

from device import PROTOCOL_VERSION, frame, protocol as P
from device.log import unpack_records, LogError, RECORD_LEN


QUIET_S = 0.01                   # after the last byte, this much silence ends a round
ROUND_EXTRA = 4.0                # a round receiving bytes ends at the latest this many timeouts after the wait
BACKOFF = 1.5                    # the wait for a first byte grows by this per silent round
MAX_BACKOFF = 4.0                # ... up to this many times ``timeout``
PATIENCE = 200                   # rounds in a row with bytes but no usable frame: the link is too noisy
START_PART = 256                 # part size asked for at the handshake (grows on a clean link)
MIN_PART = 12                    # the client never asks for smaller parts
MIN_CHUNK = 16                   # smallest file chunk sent
COPY_MAX_WIRE = 64               # parts longer than this on the wire are never sent twice
TAIL_PARTS = 8                   # this few parts missing: the timer may send them more than once
FRAME_OVERHEAD = 13              # wire bytes of a PART frame besides its data (header, CRC, COBS, 0x00)


class TimerError(OSError):
    """A problem talking to the timer."""


class PortUnavailable(TimerError):
    """The serial port does not exist, is busy or cannot be opened."""


class NoAnswer(TimerError):
    """The timer did not answer at all (switched off, wrong port, cable out)."""


class NoisyLink(TimerError):
    """Answers arrive, but damaged, round after round."""


class VersionMismatch(TimerError):
    """The timer speaks another protocol version."""


class DeviceRefused(TimerError):
    """The timer answered with an error (``code``, ``message``)."""

    def __init__(self, code, message):
        TimerError.__init__(self, "the timer refused: %s" % message)
        self.code = code
        self.message = message


class TransferError(TimerError):
    """Data arrived whole but inconsistent (bad lengths, records out of order)."""


def part_for(error_rate):
    """The part size (bytes of answer per frame) that carries the most data per byte on a link
    damaging ``error_rate`` of its bytes: maximise p (1 - e)^(p + overhead), i.e. p = -1 / ln(1 - e)."""
    e = min(max(error_rate, 1e-5), 0.5)
    return int(max(MIN_PART, min(P.MAX_PART, -1.0 / math.log(1.0 - e))))


class LinkStats(object):
    """The frames received lately (wire length, whole or damaged) and the byte error rate they
    point to: the maximum-likelihood e for independent byte errors, where a frame of L bytes
    arrives whole with probability (1 - e)^L (searched on a log grid)."""
    __slots__ = ("recent", "total_good", "total_bad", "total_bytes", "_cache")
    WINDOW = 256
    GRID = [10 ** (-4.5 + 0.1 * k) for k in range(42)]      # 3e-5 .. 0.4

    def __init__(self):
        import collections
        self.recent = collections.deque(maxlen=self.WINDOW)
        self.total_good = self.total_bad = self.total_bytes = 0
        self._cache = None

    def add(self, length, ok):
        self.recent.append((length, ok))
        self._cache = None
        if ok:
            self.total_good += 1
        else:
            self.total_bad += 1
        self.total_bytes += length

    def error_rate(self):
        """Estimated fraction of bytes damaged; 0 before any frame arrived."""
        if self._cache is not None:
            return self._cache
        if not self.recent:
            return 0.0
        counts = {}
        for k in self.recent:
            counts[k] = counts.get(k, 0) + 1
        if all(ok for (_, ok) in counts):
            clean = sum(n * length for (length, _), n in counts.items())
            self._cache = 1.0 / (clean + 1.0)              # no damage seen: below one in that many bytes
            return self._cache
        best, best_e = None, 0.0
        for e in self.GRID:
            q = math.log(1.0 - e)
            ll = 0.0
            for (length, ok), n in counts.items():
                ll += n * (length * q if ok else math.log(max(1e-300, 1.0 - math.exp(length * q))))
            if best is None or ll > best:
                best, best_e = ll, e
        self._cache = best_e
        return best_e


class Assembly(object):
    """The answer to one request, whole (one frame) or from PART frames placed by offset."""
    __slots__ = ("rtype", "total", "buf", "have")

    def __init__(self):
        self.rtype = None
        self.total = None
        self.buf = None
        self.have = []                     # merged [start, end) ranges received

    def add(self, body, types):
        """Place one PART body; False if it does not belong to this answer (``types``: the answer
        types expected)."""
        if len(body) < P.PART_HEAD:
            return False
        rtype, total, off = struct.unpack("<BHH", bytes(body[:P.PART_HEAD]))
        data = bytes(body[P.PART_HEAD:])
        if rtype not in types:
            return False
        if self.total is None:
            self.rtype, self.total, self.buf = rtype, total, bytearray(total)
        elif (rtype, total) != (self.rtype, self.total):
            return False
        end = off + len(data)
        if end > total:
            return False
        self.buf[off:end] = data
        rs = sorted(self.have + [[off, end]])
        merged = []
        for a, b in rs:
            if merged and a <= merged[-1][1]:
                merged[-1][1] = max(merged[-1][1], b)
            else:
                merged.append([a, b])
        self.have = merged
        return True

    def held(self):
        return sum(b - a for a, b in self.have)

    def complete(self):
        return self.total is not None and (self.total == 0 and bool(self.have) or self.held() == self.total)

    def covered(self, a, b):
        return any(x <= a and b <= y for x, y in self.have)

    def missing_cells(self, plen, limit=P.MAX_CELLS):
        """``(first, bitmap bytes, count)``: the parts of ``plen`` bytes (on the grid from offset 0)
        not wholly received, up to ``limit`` of them from the first missing one."""
        cells = (self.total + plen - 1) // plen
        want = [c for c in range(cells) if not self.covered(c * plen, min(self.total, (c + 1) * plen))]
        if not want:
            return 0, b"", 0
        first = want[0]
        bits = bytearray((min(limit, want[-1] - first + 1) + 7) // 8)
        n = 0
        for c in want:
            i = c - first
            if i >= 8 * len(bits):
                break
            bits[i // 8] |= 1 << (i % 8)
            n += 1
        return first, bytes(bits), n


class TimerClient:
    """Talk to a limbclock timer on ``port`` (a device path, or any object with
    ``read``/``write`` such as ``VirtualTimer.loopback()``)."""

    def __init__(self, port, baudrate=115200, timeout=1.0, retries=4, patience=PATIENCE):
        self.timeout = timeout
        self.retries = retries
        self.patience = patience
        self.decoder = frame.Decoder()
        self.seq = int(time.monotonic() * 1000) & 0xFF
        self.device = None
        self.requests = 0
        self.retried = 0                   # rounds beyond the first, over all requests
        self.naks = 0
        self.answers = 0
        self.stats = LinkStats()
        self.part_len = START_PART         # the part size the timer cuts answers into (after handshake)
        self.target = START_PART           # the part size the link estimate asks for
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

    def _pending(self):
        try:
            return bool(getattr(self.port, "in_waiting", 0))
        except Exception:  # a port that went away: the next read says so
            return False

    # -- link figures -----------------------------------------------------------
    def error_rate(self):
        """Estimated fraction of bytes damaged on the way back from the timer."""
        return self.stats.error_rate()

    @property
    def max_body(self):
        """The frame body the host sends (file chunks) on this link now."""
        return max(MIN_CHUNK + 4, min(frame.MAX_BODY, self.target + 4))

    def link_figures(self):
        return {"frames": self.stats.total_good, "damaged": self.stats.total_bad,
                "bytes": self.stats.total_bytes, "error_rate": round(self.error_rate(), 5),
                "part_len": self.part_len, "requests": self.requests, "rounds_retried": self.retried,
                "naks": self.naks}

    # -- requests -------------------------------------------------------------
    def request(self, ftype, body=b"", answer_max=None):
        """Send one command, return the answer body (see the module docstring for the rounds).

        ``body`` may be a function of the frame body size the link allows now (``max_body``);
        it is built once, so a repeat is the same request.  ``answer_max``: the longest answer
        the command can give, when known (a round then ends as soon as its one frame is in)."""
        self._adapt_between()
        return self._request(ftype, body, answer_max)

    def _request(self, ftype, body, answer_max=None):
        self.seq = (self.seq + 1) & 0xFF
        seq = self.seq
        self.requests += 1
        raw = body(self.max_body) if callable(body) else body
        wire = frame.encode(ftype, seq, raw)
        asm = Assembly()
        wait = self.timeout
        silent = stall = rounds = 0
        t0 = self._now()
        heard = False
        send = wire

        def one():                           # frames a fresh answer brings, when known
            return 1 if answer_max is not None and answer_max <= self.part_len else None
        expect = one()                       # frames the round should bring (None: not known)
        while True:
            try:
                self.port.write(send * self._request_copies(len(send)))
            except Exception as e:
                raise PortUnavailable("cannot write to the timer on %s: %s" % (self.name, e))
            rounds += 1
            outcome, got, progress, nbytes = self._round(ftype, seq, asm, wait, expect, self.part_len)
            heard = heard or nbytes > 0
            if outcome == "done":
                self.answers += 1
                rtype, rbody = got
                if rtype == P.ERROR:
                    code = rbody[0] if rbody else 0
                    if code == P.E_GONE and send is not wire:
                        asm = Assembly()          # the timer lost the answer: ask again
                        send, expect = wire, one()
                        continue
                    raise DeviceRefused(code, bytes(rbody[1:]).decode("utf-8", "replace"))
                return rbody
            self.retried += 1
            if nbytes == 0:
                silent += 1
                if silent > self.retries:
                    self._give_up(heard, rounds, t0)
                wait = min(wait * BACKOFF, self.timeout * MAX_BACKOFF)
            else:
                silent = 0
                wait = self.timeout
                stall = 0 if progress else stall + 1
                if stall > self.patience:
                    self._give_up(True, rounds, t0)
            self._adapt()
            if outcome == "stale":
                asm = Assembly()
                send, expect = wire, one()      # the timer answers another request under this seq
            elif outcome == "nak" and send is wire or (nbytes == 0 and asm.total is None):
                send, expect = wire, one()      # the request was damaged or lost: send it again
            else:
                # the timer answered, damaged or in part: ask for the parts still missing, in the size
                # the link allows now (the whole answer when nothing of it arrived)
                plen = min(self.target, self.part_len)    # within one answer parts only shrink
                copies = 1
                if asm.total is not None:
                    cell0, bits, expect = asm.missing_cells(plen)
                    copies = self._copies(plen, expect)
                    expect *= copies
                else:
                    cell0, bits, expect = 0, b"", None
                send = frame.encode(P.RESEND, seq, struct.pack("<HHB", plen, cell0, copies) + bits)
                self.part_len = plen

    def _give_up(self, heard, rounds, t0):
        dt = self._now() - t0
        st = self.stats
        if not heard:
            if self.answers:
                raise NoAnswer("the timer on %s stopped answering (nothing for %d tries over %.1f s): was the "
                               "cable pulled or the timer switched off? Nothing is lost: sync again"
                               % (self.name, rounds, dt))
            raise NoAnswer("no answer from the timer on %s after %d tries over %.1f s: is it switched on, the "
                           "cable in, and is %s the right port?" % (self.name, rounds, dt, self.name))
        raise NoisyLink("the link is noisy: answers from the timer on %s arrive damaged (%d of %d frames "
                        "damaged, about %.1f %% of the bytes; %d tries over %.1f s without a usable frame). "
                        "Nothing is lost, the records stay on the timer: check the cable and its connectors, "
                        "use a shorter one away from radios and motors, then sync again"
                        % (self.name, st.total_bad, st.total_bad + st.total_good, 100.0 * self.error_rate(),
                           rounds, dt))

    def _round(self, ftype, seq, asm, wait, expect=None, plen=0):
        """Collect frames for request ``seq`` until its answer is whole, a NAK, ``QUIET_S`` of
        silence after some bytes (or, sooner, the ``expect`` frames asked for have all ended and
        nothing more is waiting), or ``wait`` with nothing.  ``plen``: the part size the timer
        cuts this answer into (to know how many frames a multi-part answer brings).  Returns
        (outcome, (rtype, body) or None, progress, bytes received); outcome is "done", "nak",
        "stale" (an answer of another type under this seq: the timer never got this request) or
        "open"."""
        start = self._now()
        last_rx = None
        nbytes = 0
        progress = False
        outcome = "open"
        got = None
        types = (ftype | P.RESPONSE, P.ERROR)
        ends = 0
        while True:
            now = self._now()
            if last_rx is None and now - start >= wait:
                break
            if last_rx is not None and (now - last_rx >= QUIET_S or now - start >= wait + ROUND_EXTRA * self.timeout):
                break                      # the answer is over (or bytes keep coming that are none)
            if expect is None and asm.total is not None and plen:
                expect = max(1, (asm.total + plen - 1) // plen)
            if expect and ends >= expect and not self._pending():
                break
            try:
                n = getattr(self.port, "in_waiting", 0) or 1
                data = self.port.read(n)
            except Exception as e:
                raise PortUnavailable("the timer on %s went away: %s" % (self.name, e))
            if not data:
                continue
            last_rx = self._now()
            nbytes += len(data)
            ends += data.count(0)
            for rtype, rseq, rbody in self._frames(data):
                if rtype == P.ERROR and rbody[:1] == bytes((P.E_DAMAGED,)):
                    self.naks += 1
                    outcome = "nak"              # the timer saw a damaged request: resend at once
                    continue
                if rseq != seq:
                    continue                     # a stale answer to an earlier request
                if rtype == P.PART:
                    before = asm.held()
                    if not asm.add(rbody, types):
                        outcome = "stale"        # the timer holds another answer under this seq
                        continue
                    progress = progress or asm.held() > before
                    if asm.complete():
                        outcome, got = "done", (asm.rtype, bytes(asm.buf))
                elif rtype in types:
                    outcome, got, progress = "done", (rtype, bytes(rbody)), True
                else:
                    outcome = "stale"
            if outcome == "done" or outcome == "nak":
                break
        if outcome != "done" and self.decoder.buf:
            self.stats.add(len(self.decoder.buf), False)
            self.decoder.buf = bytearray()       # a frame cut short (its 0x00 lost): drop it
            self.decoder.errors += 1
        return outcome, got, progress, nbytes

    def _frames(self, data):
        """Decode ``data``, recording each frame's wire length and whether it arrived whole."""
        out = []
        start = 0
        while start < len(data):
            end = data.find(b"\x00", start)
            if end < 0:
                self.decoder.feed(data[start:])
                break
            pending = len(self.decoder.buf)
            errors = self.decoder.errors
            got = self.decoder.feed(data[start:end + 1])
            length = pending + end + 1 - start
            if got:
                self.stats.add(length, True)
                out.extend(got)
            elif self.decoder.errors != errors:
                self.stats.add(length, False)
            start = end + 1
        return out

    def _request_copies(self, nbytes):
        """Send a request twice in a row when one copy would more likely be damaged than not
        (the timer answers an identical pair once)."""
        return 2 if (1.0 - self.error_rate()) ** nbytes < 0.5 else 1

    def _copies(self, plen, missing):
        """How many times the timer should send each of the last ``missing`` parts: enough that
        each arrives whole in a round with a chance of about 3 in 4, when few are missing and the
        parts are short (a copy then costs less line time than another round)."""
        if missing > TAIL_PARTS or plen + FRAME_OVERHEAD > COPY_MAX_WIRE:
            return 1
        ok = (1.0 - self.error_rate()) ** (plen + FRAME_OVERHEAD)
        if ok >= 0.75:
            return 1
        return int(max(1, min(4, math.ceil(math.log(0.25) / math.log(1.0 - ok)))))

    def _adapt(self):
        """Follow the link: the part size the error estimate asks for (used by the next RESEND)."""
        if self.stats.recent:
            self.target = part_for(self.error_rate())

    def _adapt_between(self):
        """Before a new request: tell the timer a new part size when the estimate moved far."""
        if self.device is None:
            return
        self._adapt()
        if self.target * 3 < self.part_len * 2 or self.target > self.part_len * 2:
            got = self._request(P.LINK, struct.pack("<H", self.target), 2)
            if len(got) == 2:
                self.part_len = struct.unpack("<H", got)[0] or P.MAX_PART

    def _json(self, ftype, body=b""):
        raw = self.request(ftype, body)
        try:
            return json.loads(bytes(raw).decode())
        except ValueError:
            raise TransferError("the timer sent an unreadable answer to command 0x%02x" % ftype)

    # -- commands -------------------------------------------------------------
    def handshake(self):
        """Check the protocol version and set the part size; returns ``{"protocol", "firmware",
        "device_id", "log_id", "origin_seq", "base_seq", "next_seq"}``."""
        self.device = None
        info = self._json(P.HELLO, struct.pack("<BH", PROTOCOL_VERSION, self.part_len))
        if not isinstance(info, dict):
            raise TransferError("the timer sent an unreadable greeting")
        version = info.get("protocol")
        if version != PROTOCOL_VERSION:
            if isinstance(version, int) and version < PROTOCOL_VERSION:
                raise VersionMismatch(
                    "the timer speaks protocol version %d (older firmware, no log identity) but this limbclock "
                    "speaks %d: update the timer's firmware, then sync; nothing was read or acknowledged"
                    % (version, PROTOCOL_VERSION))
            raise VersionMismatch("the timer speaks protocol version %s but this limbclock speaks %d: update "
                                  "limbclock so they match; nothing was read or acknowledged"
                                  % (version, PROTOCOL_VERSION))
        for k in ("log_id", "origin_seq", "base_seq", "next_seq"):
            if not isinstance(info.get(k), int) or isinstance(info.get(k), bool) or not 0 <= info[k] <= 0xFFFFFFFF:
                raise TransferError("the timer's greeting has no valid %s" % k)
        if not isinstance(info.get("device_id"), str) or not info["device_id"]:
            raise TransferError("the timer's greeting has no device id")
        self.device = info
        return info

    def status(self):
        """The timer's status dict (clock, log, session, display lines; see device/PROTOCOL.md)."""
        text = b""
        total = None
        while total is None or len(text) < total:
            raw = self.request(P.STATUS, struct.pack("<HH", len(text), frame.MAX_BODY - 2))
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
        """``(log_id, base_seq, next_seq, [Record])``: up to ``batch`` records the timer holds with
        ``seq >= from_seq``, in seq order, each CRC-checked.  Seqs absent between ``from_seq`` and
        the last record returned are not held by the timer (damaged there and skipped)."""
        count = max(1, min(batch, P.LOG_BATCH_MAX))
        raw = self.request(P.READ_LOG, struct.pack("<IH", from_seq, count), P.LOG_HEAD + count * RECORD_LEN)
        if len(raw) < P.LOG_HEAD:
            raise TransferError("short read-log answer")
        log_id, base, nxt, count = struct.unpack("<IIII", bytes(raw[:P.LOG_HEAD]))
        data = bytes(raw[P.LOG_HEAD:])
        if len(data) != count * RECORD_LEN:
            raise TransferError("read-log answer holds %d bytes for %d records" % (len(data), count))
        try:
            recs = unpack_records(data)
        except LogError as e:
            raise TransferError("log data damaged in transit: %s" % e)
        prev = max(from_seq, base) - 1
        for r in recs:
            if r.seq <= prev or r.seq >= nxt:
                raise TransferError("log records out of order: got seq %d after %d (next %d)" % (r.seq, prev, nxt))
            prev = r.seq
        return log_id, base, nxt, recs

    def read_log(self, from_seq=0, batch=P.LOG_BATCH_MAX):
        """Yield every ``device.log.Record`` the timer holds from ``from_seq`` on, batch by batch
        (resumable: start again from the last seq seen + 1)."""
        s = from_seq
        while True:
            _, base, nxt, recs = self.read_log_batch(s, batch)
            for r in recs:
                yield r
            if not recs:
                return
            s = recs[-1].seq + 1
            if s >= nxt:
                return

    def ack(self, log_id, from_seq, last_seq, crc):
        """Confirm that the host holds the records ``from_seq..last_seq`` of log ``log_id``, whose
        packed bytes have CRC-32 ``crc`` (``device.protocol.proof``); the timer checks it against
        what it holds and reclaims them.  Returns ``{"log_id", "confirmed_seq", "base_seq",
        "next_seq", "free_records"}``; ``DeviceRefused`` (code ``E_IDENTITY``, ``E_PROOF`` or
        ``E_LOG``) when it does not match: the timer keeps the records."""
        raw = self.request(P.ACK, struct.pack("<IIII", log_id, from_seq, last_seq, crc), 16)
        if len(raw) != 16:
            raise TransferError("the timer sent an unreadable answer to the acknowledgement")
        lid, base, nxt, free = struct.unpack("<IIII", bytes(raw))
        return {"log_id": lid, "confirmed_seq": base - 1, "base_seq": base, "next_seq": nxt, "free_records": free}

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
                               data[start:start + max(MIN_CHUNK, min(P.CHUNK, m - 4))])
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
