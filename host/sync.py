"""Sync: pull a timer's log into the archive, resumably and idempotently; push files to it.

The order of operations is what makes it safe::

    handshake (protocol version)          -> device id
    from = archive's last committed seq + 1
    loop: read a batch from the timer     (CRC-checked end to end by the client)
          store it in ONE SQLite transaction, COMMIT (synchronous=FULL: on disk)
          THEN acknowledge the batch's last seq to the timer
    finally: acknowledge what the archive holds but the timer was never told

A kill, a pulled cable or a power cut at any point leaves the archive with
whole batches only, and the timer still holding (unacknowledged) everything
the archive may lack; the next sync starts from the archive's last committed
seq, so nothing is lost and nothing is stored twice.  A record the archive
already holds is counted as a duplicate; one that differs is an error.  Records
the timer no longer has (confirmed to another archive, then reclaimed) are
counted in ``not_on_timer``.

Serial transport, framing and retries are ``host.timer_client``'s; records
are ``device.log.Record`` objects, turned into the archive's plain dicts by
``record_dict``.
"""
import sys
import time

from host import archive

PROGRESS_MIN_RECORDS = 200    # show a progress bar from this many records to fetch
FIRST_SEQ = 1                 # a new timer log numbers its first record 1 (device/log.py, Log.open)


class SyncError(ValueError):
    """The timer's log and the archive disagree in a way sync must not paper over."""


def record_dict(r):
    """A ``device.log.Record`` (or a dict) -> the archive's record dict."""
    if isinstance(r, dict):
        return r
    from device import log as dlog
    kind = dlog.KIND_NAMES.get(r.kind, "kind-%d" % r.kind)
    d = {"seq": r.seq, "kind": kind, "utc_us": r.utc_us, "session": r.session,
         "quality": _name(dlog.TIME_STATE_NAMES, r.time_state, "state"), "uncertainty_us": r.uncertainty_us}
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
    """A one-line text progress bar on a stream (stderr), redrawn with a carriage return."""
    __slots__ = ("stream", "total", "label", "width", "shown", "t0")

    def __init__(self, total, label, stream=None, width=30):
        self.stream = stream if stream is not None else sys.stderr
        self.total = max(1, total)
        self.label = label
        self.width = width
        self.shown = False
        self.t0 = time.monotonic()

    def update(self, done):
        frac = min(1.0, done / float(self.total))
        n = int(round(frac * self.width))
        rate = done / max(1e-6, time.monotonic() - self.t0)
        self.stream.write("\r%s [%s%s] %d/%d records, %.0f/s" % (self.label, "#" * n, "." * (self.width - n), done,
                                                                 self.total, rate))
        self.stream.flush()
        self.shown = True

    def close(self):
        if self.shown:
            self.stream.write("\n")
            self.stream.flush()


def sync(client, conn, progress=None, batch=None, stream=None):
    """Pull every record the archive lacks from the timer behind ``client`` (a
    ``TimerClient``) into ``conn``; return ``{"new", "duplicates", "device", "last_seq",
    "batches"}``.  ``progress``: True / False / None (auto: stderr is a terminal)."""
    started = archive.now_us()
    info = client.handshake()
    device_id = info.get("device_id")
    with archive.transaction(conn):
        archive.ensure_device(conn, device_id, info.get("protocol"), info.get("firmware"))
    have = archive.last_seq(conn, device_id)
    s = max(have + 1, FIRST_SEQ)
    new = dup = batches = skipped = 0
    bar = None
    kw = {} if batch is None else {"batch": batch}
    base = nxt = None
    try:
        while True:
            base, nxt, recs = client.read_log_batch(s, **kw)
            if have >= nxt:
                raise SyncError("timer %s numbers its next record %d but the archive already holds up to %d: "
                                "was the timer reset? (its log restarted; refusing to mix the two)"
                                % (device_id, nxt, have))
            if batches == 0 and base > s:
                # already confirmed to another archive and reclaimed on the timer: gone from here
                skipped = base - s
            if bar is None:
                todo = max(0, nxt - max(s, base))
                show = progress if progress is not None else _isatty(stream or sys.stderr)
                if show and todo >= PROGRESS_MIN_RECORDS:
                    bar = TextProgress(todo, "sync %s" % device_id, stream)
                    done0 = max(s, base)
            if not recs:
                break
            with archive.transaction(conn):
                n, d = archive.store_records(conn, device_id, [record_dict(r) for r in recs])
                archive.apply_stamps(conn, device_id)          # late stamps of untimed contacts
            new += n
            dup += d
            batches += 1
            have = archive.last_seq(conn, device_id)
            client.ack(recs[-1].seq)          # only after the COMMIT above
            s = recs[-1].seq + 1
            if bar is not None:
                bar.update(s - done0)
            if s >= nxt:
                break
        # records the archive holds but the timer never heard were confirmed (killed between
        # commit and ack): confirm them now so the timer can reclaim the space
        if base is not None and have >= base and have < nxt:
            client.ack(have)
    finally:
        if bar is not None:
            bar.close()
    with archive.transaction(conn):
        archive.record_sync(conn, device_id, started, new, dup)
    return {"new": new, "duplicates": dup, "device": device_id, "last_seq": have, "batches": batches,
            "not_on_timer": skipped}


def _isatty(stream):
    try:
        return stream.isatty()
    except (AttributeError, ValueError):
        return False


def sync_port(port, db_path, progress=None, timeout=1.0, retries=6, batch=None):
    """Open the timer on ``port`` and the archive at ``db_path``, sync, close both."""
    from host.timer_client import TimerClient
    conn = archive.connect(db_path)
    try:
        with TimerClient(port, timeout=timeout, retries=retries) as client:
            return sync(client, conn, progress, batch)
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
    import json
    from device.onboard import TRACK_FORMAT, parse_track, track_file
    try:
        doc = json.loads(bytes(data).decode("utf-8"))
    except (UnicodeDecodeError, ValueError) as exc:
        raise SyncError("track file: not JSON (%s)" % exc)
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
