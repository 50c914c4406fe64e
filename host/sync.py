"""Sync: pull a timer's log into the archive, resumably and idempotently; push files to it.

The order of operations is what makes it safe::

    the archive opens for writing: a limbclock archive, writable, PRAGMA quick_check clean
    handshake (protocol version 2)        -> device id, log identity (log_id, origin_seq), base/next seq
    from = the first record the timer still holds (base_seq)
    loop: read a batch from the timer     (CRC-checked end to end by the client)
          store it in ONE SQLite transaction (records, their 33 bytes, gaps), COMMIT (synchronous=FULL)
          every ACK_EVERY records and at the end:
             a fresh read-only connection: PRAGMA quick_check, then the CRC-32 of the records
             of the range AS READ BACK FROM THE FILE
             ACK(log_id, base_seq, last_seq, crc): the timer compares it with its own records
             and only then reclaims them

Records are keyed on (device, log identity, seq): a log created again (reflash,
new file) has a new identity, so its sequence numbers 1, 2, ... are new records,
never taken for old ones.  Reading always starts at the timer's first held
record: what the archive already holds comes back as duplicates (compared, not
stored twice), so a sync killed between COMMIT and ACK is completed by the next
one.  A kill, a pulled cable or a power cut at any point leaves whole batches in
the archive and the timer holding everything not proven stored.  A damaged
archive is refused before anything is acknowledged; a refused ACK (the timer's
records differ from what the archive holds) stops the sync with the records
kept on the timer.

Seqs the timer skips inside what it returns (records damaged on its flash) are
noted in the archive (``log_gaps``) and reported as ``missing_on_timer``, never
invented.  Records of this log confirmed to another archive before this one saw
them are counted in ``not_on_timer``.

Serial transport, framing and retries are ``host.timer_client``'s; records are
``device.log.Record`` objects, turned into the archive's plain dicts by
``record_dict``.
"""
import sys
import time

from host import archive

PROGRESS_MIN_RECORDS = 200    # show a progress bar from this many records to fetch ...
PROGRESS_AFTER_S = 2.0        # ... or once a transfer has taken this long (a poor link)
ACK_EVERY = 240               # acknowledge (with its integrity check and proof) at least every this many records


class SyncError(ValueError):
    """The timer's log and the archive disagree in a way sync must not paper over."""


# ---- test hook (inert unless the environment variable is set; DEVELOPERS.md "Test hooks") ----
# LIMBCLOCK_TEST_KILL_AFTER_RECORDS="N:point": the sync process kills itself (SIGKILL, as a pulled
# plug or the OOM killer would) once it has read N records from the timer in this run, at ``point``:
# "handshake" (N is ignored: right after the handshake, before any record is read), "store" (inside
# the batch's transaction, the records written but not committed), "commit" (right after the COMMIT of
# that batch, before its ACK: the window the ordering above protects) or "ack" (right after the next
# ACK the timer accepted).  tests/test_sync.py uses it to kill a real sync at chosen points instead of
# at random moments.
TEST_KILL_ENV = "LIMBCLOCK_TEST_KILL_AFTER_RECORDS"
TEST_KILL_POINTS = ("handshake", "store", "commit", "ack")


def _test_kill_spec():
    import os
    spec = os.environ.get(TEST_KILL_ENV)
    if not spec:
        return None
    n, _, point = spec.partition(":")
    if not n.isdigit() or point not in TEST_KILL_POINTS:
        raise SyncError("%s=%r: expected N:point with point one of %s" % (TEST_KILL_ENV, spec,
                                                                          ", ".join(TEST_KILL_POINTS)))
    return int(n), point


def _test_kill(spec, point, records):
    """Kill this process when the test hook ``spec`` asks for it at ``point`` after ``records``."""
    if spec is not None and spec[1] == point and records >= spec[0]:
        import os
        import signal
        sys.stdout.flush()
        sys.stderr.flush()
        os.kill(os.getpid(), signal.SIGKILL)


def record_dict(r):
    """A ``device.log.Record`` (or a dict) -> the archive's record dict (with ``raw``, its packed bytes)."""
    if isinstance(r, dict):
        return r
    from device import log as dlog
    kind = dlog.KIND_NAMES.get(r.kind, "kind-%d" % r.kind)
    d = {"seq": r.seq, "kind": kind, "utc_us": r.utc_us, "session": r.session,
         "quality": _name(dlog.TIME_STATE_NAMES, r.time_state, "state"), "uncertainty_us": r.uncertainty_us,
         "raw": r.pack()}
    # -- record kinds and untimed records (device/log.py; owned with the timer's firmware) --
    untimed = r.time_state == 0 and kind != "void"
    if untimed:
        # logged before the timer had any time: utc_us holds the oscillator's tick (us since that
        # boot) and ref_seq the boot count; a later "stamp" record gives the UTC (apply_stamps)
        d["tick_us"] = r.utc_us
        d["boot"] = r.ref_seq
    if kind == "contact":
        d["body"] = _name(dlog.BODY_NAMES, r.body, "body")
        d["limb"] = _name(dlog.LIMB_NAMES, r.limb, "limb")
        if r.image >= 0:
            d["image_index"] = r.image
    elif kind == "void":
        d["voided_seq"] = r.ref_seq
    elif kind == "stamp":
        d["stamps_seq"] = r.ref_seq
        d["body"] = _name(dlog.BODY_NAMES, r.body, "body")
        d["limb"] = _name(dlog.LIMB_NAMES, r.limb, "limb")
    elif kind == "fault":
        d["fault_kind"] = r.image
        d["fault_count"] = r.ref_seq
    else:
        d["body"] = _name(dlog.BODY_NAMES, r.body, "body")
        d["limb"] = _name(dlog.LIMB_NAMES, r.limb, "limb")
        if r.ref_seq and not untimed:
            d["ref_seq"] = r.ref_seq
    return d


def _name(names, k, what):
    return names[k] if 0 <= k < len(names) else "%s-%d" % (what, k)


class TextProgress(object):
    """A one-line text progress bar on a stream (stderr), redrawn with a carriage return;
    ``link`` (optional) returns a short text on the link's state."""
    __slots__ = ("stream", "total", "label", "width", "shown", "t0", "link", "last_len")

    def __init__(self, total, label, stream=None, width=30, link=None, t0=None):
        self.stream = stream if stream is not None else sys.stderr
        self.total = max(1, total)
        self.label = label
        self.width = width
        self.shown = False
        self.t0 = time.monotonic() if t0 is None else t0
        self.link = link
        self.last_len = 0

    def update(self, done):
        frac = min(1.0, done / float(self.total))
        n = int(round(frac * self.width))
        rate = done / max(1e-3, time.monotonic() - self.t0)
        extra = self.link() if self.link is not None else ""
        line = "%s [%s%s] %d/%d records, %.0f/s%s" % (self.label, "#" * n, "." * (self.width - n), done, self.total,
                                                     rate, extra)
        self.stream.write("\r" + line + " " * max(0, self.last_len - len(line)))
        self.last_len = len(line)
        self.stream.flush()
        self.shown = True

    def close(self):
        if self.shown:
            self.stream.write("\n")
            self.stream.flush()


def _link_text(client):
    def text():
        e = client.error_rate() if hasattr(client, "error_rate") else 0.0
        return "; link %.1f %% damaged, %d-byte parts" % (100.0 * e, client.part_len) if e >= 0.0005 else ""
    return text


def sync(client, conn, progress=None, batch=None, stream=None, ack_every=ACK_EVERY):
    """Pull every record the timer holds into ``conn`` (an archive opened for writing) and
    acknowledge them with proof; return ``{"new", "duplicates", "device", "log_id", "origin_seq",
    "last_seq", "batches", "acks", "missing_on_timer", "missing_seqs", "not_on_timer", "confirmed_seq"}``.
    ``progress``: True / False / None (auto: stderr is a terminal)."""
    if getattr(conn, "readonly", False):
        raise archive.ArchiveReadOnly("archive %s is opened read-only: sync needs to write to it" % conn.path)
    started = archive.now_us()
    kill = _test_kill_spec()
    info = client.handshake()
    _test_kill(kill, "handshake", 0)
    device_id = info["device_id"]
    log_id = info["log_id"]
    origin = info["origin_seq"]
    with archive.transaction(conn):
        archive.ensure_device(conn, device_id, info.get("protocol"), info.get("firmware"))
        archive.ensure_log(conn, device_id, log_id, origin)
    held = archive.last_seq(conn, device_id, log_id)
    base = info["base_seq"]
    nxt = info["next_seq"]
    first_wanted = held + 1 if held >= 0 else origin
    not_on_timer = max(0, min(base, nxt) - max(first_wanted, origin))
    kw = {} if batch is None else {"batch": batch}
    new = dup = batches = acks = 0
    missing = []
    s = base
    ack_from = base                      # the timer's first held record: where the next ACK starts
    last_stored = None                   # the last seq stored (or found) and not yet acknowledged
    bar = None
    t0 = time.monotonic()
    show = progress if progress is not None else _isatty(stream or sys.stderr)
    confirmed = base - 1
    try:
        while s < nxt:
            lid, b, nxt, recs = client.read_log_batch(s, **kw)
            if lid != log_id:
                raise SyncError("the timer's log changed during the sync (identity %s, now %s): nothing of the "
                                "new log was acknowledged; sync again" % (archive.log_label(log_id),
                                                                          archive.log_label(lid)))
            if b > s:
                # reclaimed on the timer meanwhile (another host acknowledged them): not here
                not_on_timer += b - s
                s = b
                ack_from = max(ack_from, b)
            top = recs[-1].seq if recs else nxt - 1
            have = set(r.seq for r in recs)
            gap = [q for q in range(s, top + 1) if q not in have]
            with archive.transaction(conn):
                n, d = archive.store_records(conn, device_id, [record_dict(r) for r in recs], log_id)
                if gap:
                    archive.note_gaps(conn, device_id, log_id, gap)
                archive.apply_stamps(conn, device_id, log_id)  # late stamps of untimed contacts
                _test_kill(kill, "store", new + dup + n + d)
            new += n
            dup += d
            _test_kill(kill, "commit", new + dup)
            missing += gap
            batches += 1
            if recs or gap:
                last_stored = top
            s = top + 1
            if bar is None and show and (nxt - base >= PROGRESS_MIN_RECORDS or time.monotonic() - t0 > PROGRESS_AFTER_S):
                bar = TextProgress(nxt - base, "sync %s" % device_id, stream, link=_link_text(client), t0=t0)
            if bar is not None:
                bar.total = max(1, nxt - base)
                bar.update(s - base)
            if last_stored is not None and (last_stored - ack_from + 1 >= ack_every or s >= nxt):
                ans = _ack(client, conn, device_id, log_id, ack_from, last_stored)
                acks += 1
                _test_kill(kill, "ack", new + dup)
                confirmed = ans["confirmed_seq"]
                ack_from = ans["base_seq"]
                last_stored = None
    finally:
        if bar is not None:
            bar.close()
    with archive.transaction(conn):
        archive.record_sync(conn, device_id, started, new, dup, log_id, len(missing))
    return {"new": new, "duplicates": dup, "device": device_id, "log_id": log_id, "origin_seq": origin,
            "last_seq": archive.last_seq(conn, device_id, log_id), "batches": batches, "acks": acks,
            "confirmed_seq": confirmed, "missing_on_timer": len(missing), "missing_seqs": missing,
            "not_on_timer": not_on_timer}


def verify(conn, device_id, log_id, first_seq, last_seq):
    """Read back what the archive holds for ``first_seq..last_seq`` through a FRESH read-only
    connection to the file (not this process's cache): ``PRAGMA quick_check``, then the CRC-32
    of the stored records (``archive.range_proof``).  ``ArchiveDamaged`` when the check fails."""
    path = getattr(conn, "path", None)
    if not path or path == ":memory:":
        probe = conn
    else:
        import sqlite3
        from urllib.parse import quote
        import os
        probe = sqlite3.connect("file:%s?mode=ro" % quote(os.path.abspath(path)), uri=True, timeout=10.0)
    try:
        problems = archive.quick_check(probe)
        if problems:
            raise archive.ArchiveDamaged(archive.damaged_message(path, problems, before_ack=True))
        try:
            return archive.range_proof(probe, device_id, log_id, first_seq, last_seq)
        except archive.ArchiveError as exc:
            raise archive.ArchiveDamaged("%s; not acknowledged: the timer keeps these records" % exc)
        except Exception as exc:  # sqlite3.DatabaseError on a malformed page
            raise archive.ArchiveDamaged(archive.damaged_message(path, [exc], before_ack=True))
    finally:
        if probe is not conn:
            probe.close()


def _ack(client, conn, device_id, log_id, first, last):
    """Acknowledge ``first..last`` with the proof read back from the archive."""
    from host.timer_client import DeviceRefused
    from device import protocol as P
    crc, _ = verify(conn, device_id, log_id, first, last)
    try:
        return client.ack(log_id, first, last, crc)
    except DeviceRefused as exc:
        if exc.code == P.E_PROOF:
            raise SyncError("the timer refused the acknowledgement: the records %d..%d of log %s in the archive "
                            "differ from those on the timer (%s); the timer keeps them"
                            % (first, last, archive.log_label(log_id), exc.message))
        if exc.code == P.E_IDENTITY:
            raise SyncError("the timer's log changed during the sync (%s): the timer keeps its records; sync again"
                            % exc.message)
        raise


def _isatty(stream):
    try:
        return stream.isatty()
    except (AttributeError, ValueError):
        return False


def sync_port(port, db_path, progress=None, timeout=1.0, retries=4, batch=None, new=False, stream=None):
    """Open the archive at ``db_path`` for writing (checked first: nothing is asked of the timer
    when the archive cannot take its records), then the timer on ``port``; sync; close both."""
    from host.timer_client import TimerClient
    conn = archive.connect(db_path, new=new)
    try:
        with TimerClient(port, timeout=timeout, retries=retries) as client:
            res = sync(client, conn, progress, batch, stream)
            res["link"] = client.link_figures()
            return res
    finally:
        conn.close()


# --------------------------------------------------------------------------- push

def check_file(slot, data):
    """Validate a file before it goes to the timer; return the bytes to send.

    instrument: ``limbclock-instrument/1``; almanac: an ``.lca`` almanac file;
    track: a ``limbclock-track/1`` file or a ``limbclock-session/1`` file, sent as the
    ``limbclock-track/1`` file of its track and observer (``track_bytes``)."""
    if slot == "instrument":
        from engine import instrument
        instrument.parse_instrument(data)
        return data
    if slot == "almanac":
        from engine import almanac
        almanac.parse(data, "almanac file")
        return data
    if slot == "track":
        return track_bytes(data)
    raise SyncError("push: unknown slot %r (instrument, almanac or track)" % slot)


TRACK_FORMATS = ("limbclock-track/1", "limbclock-session/1")


def track_bytes(data):
    """The ``limbclock-track/1`` bytes to push from a ``limbclock-track/1`` or ``limbclock-session/1``
    file (bytes): the DR track WITH the observer, built by ``device.onboard.track_file`` and checked by
    ``device.onboard.parse_track`` (the rules the timer applies).  The observer is required: without
    the height of eye the timer cannot reduce on board."""
    from device.onboard import TRACK_FORMAT, parse_track, track_file
    from engine import limits
    doc = limits.load_json(bytes(data), "track file", SyncError)    # size, UTF-8, JSON, nesting
    limits.check_tree(doc, SyncError)
    if not isinstance(doc, dict):
        raise SyncError("track file: expected a JSON object (a %s or %s file)" % TRACK_FORMATS)
    fmt = doc.get("format")
    if fmt == TRACK_FORMAT:
        track, observer = parse_track(doc)
        what = "track file"
    elif fmt == TRACK_FORMATS[1] or (fmt is None and "track" in doc):
        track, observer = doc.get("track"), doc.get("observer")
        what = "session file"
        if not isinstance(track, dict):
            raise SyncError("session file: 'track' must be an object (the DR track: utc, lat_deg, lon_deg, "
                            "course_deg, speed_kn)")
        if observer is not None and not isinstance(observer, dict):
            raise SyncError("session file: 'observer' must be an object")
    elif fmt is None:
        raise SyncError("track file: no 'format' (expected %r or %r)" % TRACK_FORMATS)
    else:
        raise SyncError("track file: format %r, expected %r or %r" % ((fmt,) + TRACK_FORMATS))
    if observer is None:
        raise SyncError("%s: no 'observer' (eye_height_m): the timer needs the height of eye to reduce "
                        "on board" % what)
    out = track_file(track, observer)
    parse_track(out)                   # the session reader's rules; messages name the field
    return out


def push(client, slot, data, progress=None):
    """Send a checked file to the timer and verify it there (size and CRC-32 read back); the
    result carries the timer's plan after it (``next_contact``, or ``plan_problem``: why none)."""
    import binascii
    data = check_file(slot, data)
    info = client.handshake()
    result = client.push_file(slot, data, progress)
    back = client.file_info(slot)
    crc = binascii.crc32(data) & 0xFFFFFFFF
    if back.get("size") != len(data) or back.get("crc32") != crc:
        raise SyncError("the timer holds %s as %s bytes, CRC %s; sent %d bytes, CRC %08x"
                        % (slot, back.get("size"), back.get("crc32"), len(data), crc))
    st = client.status()          # the timer replans at once when a file arrives
    return {"device": info.get("device_id"), "slot": slot, "size": len(data), "crc32": "%08x" % crc,
            "verified": True, "timer": result, "next_contact": st.get("next_contact"),
            "plan_problem": st.get("plan_problem"), "clock_state": (st.get("clock") or {}).get("state")}
