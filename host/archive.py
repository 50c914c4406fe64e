"""The SQLite archive: every record synced from a timer, sessions, instruments, fixes.

One file (default ``$XDG_DATA_HOME/limbclock/archive.sqlite3``, else
``~/.local/share/limbclock/archive.sqlite3``), opened with the standard
library's ``sqlite3`` in WAL mode with ``foreign_keys=ON`` and
``synchronous=FULL``: a record is on disk when its transaction commits, and the
sync acknowledges to the timer only what has committed.  Killing the program
at any moment leaves the file consistent (SQLite's journal) and the timer
still holding everything not yet acknowledged.

The schema has a version (``PRAGMA user_version``) and a migration for each
step; ``open_archive`` upgrades an older file in one transaction.

  v1  devices, contacts (with time quality), voids, other log records
  v2  instruments and their calibration history, sessions, computed fixes
  v3  contacts.image (label given by identification or the navigator),
      a log of syncs, an index for sessions

Records from the timer are plain dicts (see ``normalize_record``); a record
already in the archive with the same content is a duplicate and is skipped;
one with the same sequence number and different content is an error (the
timer's log was erased or another timer reports the same identity).
"""
import json
import os
import sqlite3
import time

from engine import timescale

SCHEMA_VERSION = 3
DEFAULT_GAP_S = 2 * 3600     # contacts further apart than this start a new session when the timer gave none

BODIES = ("sun", "moon")
LIMBS = ("lower", "upper")


class ArchiveError(ValueError):
    """The archive file or a record offered to it is not what it should be."""


def default_path():
    """Where the archive lives unless ``--db`` says otherwise."""
    base = os.environ.get("XDG_DATA_HOME") or os.path.join(os.path.expanduser("~"), ".local", "share")
    return os.path.join(base, "limbclock", "archive.sqlite3")


# --------------------------------------------------------------------------- schema

_V1 = """
CREATE TABLE devices (
    device_id    TEXT PRIMARY KEY,
    protocol     INTEGER,
    firmware     TEXT,
    last_seq     INTEGER NOT NULL DEFAULT -1,
    first_sync_us INTEGER,
    last_sync_us  INTEGER
);
CREATE TABLE contacts (
    device_id      TEXT NOT NULL REFERENCES devices(device_id),
    seq            INTEGER NOT NULL,
    utc_us         INTEGER NOT NULL,
    body           TEXT NOT NULL,
    limb           TEXT NOT NULL,
    session_no     INTEGER,
    quality        TEXT NOT NULL,
    uncertainty_us INTEGER NOT NULL,
    PRIMARY KEY (device_id, seq)
);
CREATE TABLE voids (
    device_id   TEXT NOT NULL REFERENCES devices(device_id),
    seq         INTEGER NOT NULL,
    voided_seq  INTEGER NOT NULL,
    utc_us      INTEGER NOT NULL,
    PRIMARY KEY (device_id, seq)
);
CREATE TABLE events (
    device_id   TEXT NOT NULL REFERENCES devices(device_id),
    seq         INTEGER NOT NULL,
    kind        TEXT NOT NULL,
    utc_us      INTEGER,
    session_no  INTEGER,
    payload     TEXT NOT NULL,
    PRIMARY KEY (device_id, seq)
);
"""

_V2 = """
CREATE TABLE instruments (
    instrument_id INTEGER PRIMARY KEY,
    name          TEXT NOT NULL,
    sha256        TEXT NOT NULL UNIQUE,
    document      TEXT NOT NULL,
    added_us      INTEGER NOT NULL
);
CREATE TABLE calibrations (
    calibration_id INTEGER PRIMARY KEY,
    instrument_id  INTEGER NOT NULL REFERENCES instruments(instrument_id),
    computed_us    INTEGER NOT NULL,
    result         TEXT NOT NULL
);
CREATE TABLE sessions (
    session_id    INTEGER PRIMARY KEY,
    device_id     TEXT NOT NULL REFERENCES devices(device_id),
    session_no    INTEGER,
    first_us      INTEGER NOT NULL,
    last_us       INTEGER NOT NULL,
    observer      TEXT,
    track         TEXT,
    instrument_id INTEGER REFERENCES instruments(instrument_id),
    UNIQUE (device_id, session_no, first_us)
);
CREATE TABLE fixes (
    fix_id         INTEGER PRIMARY KEY,
    session_id     INTEGER NOT NULL REFERENCES sessions(session_id) ON DELETE CASCADE,
    computed_us    INTEGER NOT NULL,
    utc_us         INTEGER NOT NULL,
    lat_deg        REAL NOT NULL,
    lon_deg        REAL NOT NULL,
    major_nm       REAL,
    minor_nm       REAL,
    major_axis_deg REAL,
    result         TEXT NOT NULL
);
"""

_V3 = """
ALTER TABLE contacts ADD COLUMN image TEXT;
CREATE INDEX contacts_by_session ON contacts (device_id, session_no, utc_us);
CREATE TABLE syncs (
    sync_id     INTEGER PRIMARY KEY,
    device_id   TEXT NOT NULL REFERENCES devices(device_id),
    started_us  INTEGER NOT NULL,
    finished_us INTEGER,
    new         INTEGER NOT NULL DEFAULT 0,
    duplicates  INTEGER NOT NULL DEFAULT 0
);
"""

# MIGRATIONS[v] takes a database at version v to v + 1 (v = 0: an empty file).
MIGRATIONS = {0: _V1, 1: _V2, 2: _V3}


def _statements(script):
    return [s.strip() for s in script.split(";") if s.strip()]


def migrate(conn, target=SCHEMA_VERSION):
    """Bring the database to ``target``, one step at a time, each in one transaction.

    The version is read inside the write transaction, so two programs opening a new
    archive at once do not both create it.  Returns the list of versions passed through."""
    steps = []
    while True:
        conn.execute("BEGIN IMMEDIATE")
        try:
            version = conn.execute("PRAGMA user_version").fetchone()[0]
            if version > SCHEMA_VERSION:
                raise ArchiveError("archive schema version %d is newer than this limbclock understands (%d): "
                                   "upgrade limbclock" % (version, SCHEMA_VERSION))
            if version >= target:
                conn.execute("COMMIT")
                return steps
            for stmt in _statements(MIGRATIONS[version]):
                conn.execute(stmt)
            conn.execute("PRAGMA user_version = %d" % (version + 1))
            conn.execute("COMMIT")
        except BaseException:
            conn.execute("ROLLBACK")
            raise
        steps.append(version + 1)


def connect(path, target=SCHEMA_VERSION):
    """Open (creating if needed) the archive at ``path``; return a ``sqlite3.Connection``
    in autocommit mode (transactions are explicit, see ``transaction``)."""
    if path != ":memory:":
        folder = os.path.dirname(os.path.abspath(path))
        if not os.path.isdir(folder):
            os.makedirs(folder, exist_ok=True)
        if os.path.exists(path):
            with open(path, "rb") as f:
                head = f.read(16)
            if head and head != b"SQLite format 3\x00":
                raise ArchiveError("%s: not a limbclock archive (not an SQLite database)" % path)
    try:
        conn = sqlite3.connect(path, isolation_level=None, timeout=10.0)
        conn.row_factory = sqlite3.Row
        conn.execute("PRAGMA journal_mode=WAL")
        conn.execute("PRAGMA synchronous=FULL")
        conn.execute("PRAGMA foreign_keys=ON")
        migrate(conn, target)
    except sqlite3.DatabaseError as exc:
        raise ArchiveError("%s: cannot open the archive: %s" % (path, exc))
    return conn


class transaction(object):
    """``with transaction(conn):`` — BEGIN IMMEDIATE ... COMMIT, ROLLBACK on any exception."""
    __slots__ = ("conn",)

    def __init__(self, conn):
        self.conn = conn

    def __enter__(self):
        self.conn.execute("BEGIN IMMEDIATE")
        return self.conn

    def __exit__(self, exc_type, exc, tb):
        if exc_type is None:
            self.conn.execute("COMMIT")
        else:
            self.conn.execute("ROLLBACK")
        return False


def now_us():
    return int(time.time() * 1000000)


# --------------------------------------------------------------------------- records from the timer

def normalize_record(rec):
    """Check one log record (a dict from the timer client) and return a plain dict with
    ``seq, kind, utc_us, body, limb, session_no, quality, uncertainty_us, voided_seq, extra``.

    Accepts the field names ``session``/``session_no``, ``quality``/``time_state``/``state``,
    ``voided_seq``/``voids``/``target``; ``utc_us`` may also come as ISO 8601 ``utc``."""
    if not isinstance(rec, dict):
        raise ArchiveError("log record: expected an object, got %r" % (rec,))
    seq = rec.get("seq")
    if not isinstance(seq, int) or isinstance(seq, bool) or seq < 0:
        raise ArchiveError("log record: seq must be a non-negative integer, got %r" % (seq,))
    kind = rec.get("kind")
    if not isinstance(kind, str) or not kind:
        raise ArchiveError("log record %d: kind missing" % seq)
    utc_us = rec.get("utc_us")
    if utc_us is None and isinstance(rec.get("utc"), str):
        utc_us = timescale.parse_utc(rec["utc"])
    if utc_us is not None and (not isinstance(utc_us, int) or isinstance(utc_us, bool)):
        raise ArchiveError("log record %d: utc_us must be an integer, got %r" % (seq, utc_us))
    session_no = _first(rec, ("session_no", "session"))
    quality = _first(rec, ("quality", "time_state", "state", "time_quality"))
    unc = _first(rec, ("uncertainty_us", "time_uncertainty_us"))
    voided = _first(rec, ("voided_seq", "voids", "target", "target_seq"))
    known = {"seq", "kind", "utc_us", "utc", "body", "limb", "session_no", "session", "quality",
             "time_state", "state", "time_quality", "uncertainty_us", "time_uncertainty_us",
             "voided_seq", "voids", "target", "target_seq"}
    out = {"seq": seq, "kind": kind, "utc_us": utc_us, "body": rec.get("body"), "limb": rec.get("limb"),
           "session_no": session_no, "quality": quality, "uncertainty_us": unc, "voided_seq": voided,
           "extra": dict((k, v) for k, v in rec.items() if k not in known)}
    if kind == "contact":
        if utc_us is None:
            raise ArchiveError("log record %d: a contact needs utc_us" % seq)
        if out["body"] not in BODIES:
            raise ArchiveError("log record %d: body must be one of %s, got %r" % (seq, BODIES, out["body"]))
        if out["limb"] not in LIMBS:
            raise ArchiveError("log record %d: limb must be one of %s, got %r" % (seq, LIMBS, out["limb"]))
        if not isinstance(quality, str):
            raise ArchiveError("log record %d: time quality state missing" % seq)
        if not isinstance(unc, int) or unc < 0:
            raise ArchiveError("log record %d: uncertainty_us must be a non-negative integer, got %r" % (seq, unc))
    elif kind == "void":
        if not isinstance(voided, int) or voided < 0 or voided >= seq:
            raise ArchiveError("log record %d: a void must name an earlier seq, got %r" % (seq, voided))
    return out


def _first(rec, names):
    for n in names:
        if n in rec and rec[n] is not None:
            return rec[n]
    return None


def ensure_device(conn, device_id, protocol=None, firmware=None):
    """Insert the device if new; remember its protocol/firmware. Call inside a transaction."""
    if not isinstance(device_id, str) or not device_id:
        raise ArchiveError("device id must be a non-empty string, got %r" % (device_id,))
    t = now_us()
    conn.execute("INSERT OR IGNORE INTO devices (device_id, protocol, firmware, first_sync_us) VALUES (?,?,?,?)",
                 (device_id, protocol, firmware, t))
    conn.execute("UPDATE devices SET protocol=COALESCE(?, protocol), firmware=COALESCE(?, firmware), "
                 "last_sync_us=? WHERE device_id=?", (protocol, firmware, t, device_id))


def last_seq(conn, device_id):
    """Highest sequence number committed for the device, -1 if none."""
    row = conn.execute("SELECT last_seq FROM devices WHERE device_id=?", (device_id,)).fetchone()
    return -1 if row is None else row[0]


def _existing(conn, device_id, seq):
    for table, cols in (("contacts", "utc_us, body, limb, session_no, quality, uncertainty_us"),
                        ("voids", "voided_seq, utc_us"), ("events", "kind, utc_us, session_no, payload")):
        row = conn.execute("SELECT %s FROM %s WHERE device_id=? AND seq=?" % (cols, table),
                           (device_id, seq)).fetchone()
        if row is not None:
            return table, tuple(row)
    return None, None


def _row_of(r):
    if r["kind"] == "contact":
        return "contacts", (r["utc_us"], r["body"], r["limb"], r["session_no"], r["quality"], r["uncertainty_us"])
    if r["kind"] == "void":
        return "voids", (r["voided_seq"], r["utc_us"] if r["utc_us"] is not None else 0)
    payload = dict(r["extra"])
    for k in ("body", "limb", "quality", "uncertainty_us", "voided_seq"):
        if r[k] is not None:
            payload[k] = r[k]
    return "events", (r["kind"], r["utc_us"], r["session_no"], json.dumps(payload, sort_keys=True))


def store_records(conn, device_id, records):
    """Store timer log records for ``device_id`` (call inside a transaction).

    Returns ``(new, duplicates)``. Raises ``ArchiveError`` when a sequence number
    already holds a different record."""
    new = dup = 0
    top = last_seq(conn, device_id)
    for rec in records:
        r = normalize_record(rec)
        table, row = _row_of(r)
        old_table, old_row = _existing(conn, device_id, r["seq"])
        if old_table is not None:
            if (old_table, old_row) != (table, row):
                raise ArchiveError("device %s seq %d: the archive holds a different record "
                                   "(was the timer's log erased, or do two timers share an id?)"
                                   % (device_id, r["seq"]))
            dup += 1
            continue
        if table == "contacts":
            conn.execute("INSERT INTO contacts (device_id, seq, utc_us, body, limb, session_no, quality, "
                         "uncertainty_us) VALUES (?,?,?,?,?,?,?,?)", (device_id, r["seq"]) + row)
        elif table == "voids":
            conn.execute("INSERT INTO voids (device_id, seq, voided_seq, utc_us) VALUES (?,?,?,?)",
                         (device_id, r["seq"]) + row)
        else:
            conn.execute("INSERT INTO events (device_id, seq, kind, utc_us, session_no, payload) "
                         "VALUES (?,?,?,?,?,?)", (device_id, r["seq"]) + row)
        new += 1
        top = max(top, r["seq"])
    conn.execute("UPDATE devices SET last_seq=? WHERE device_id=?", (top, device_id))
    return new, dup


# -- late stamps (the timer's STAMP records; owned with device/log.py) ------------------------------

def apply_stamps(conn, device_id):
    """Give the timer's untimed contacts (quality ``none``: logged before it had any time, their
    ``utc_us`` the oscillator's tick) the UTC of the later ``stamp`` record that names them
    (``stamps_seq``), with its quality and uncertainty.  Call inside a transaction, after
    ``store_records``; idempotent (a contact already stamped is left alone).  Returns how many
    contacts got their time."""
    n = 0
    rows = conn.execute("SELECT utc_us, payload FROM events WHERE device_id=? AND kind='stamp' ORDER BY seq",
                        (device_id,)).fetchall()
    for utc_us, payload in rows:
        p = json.loads(payload)
        target, quality, unc = p.get("stamps_seq"), p.get("quality"), p.get("uncertainty_us")
        if not isinstance(target, int) or not isinstance(quality, str) or quality == "none" or \
                not isinstance(unc, int) or not isinstance(utc_us, int):
            continue
        cur = conn.execute("UPDATE contacts SET utc_us=?, quality=?, uncertainty_us=? WHERE device_id=? AND seq=? "
                           "AND quality='none'", (utc_us, quality, unc, device_id, target))
        n += cur.rowcount
    return n


def record_sync(conn, device_id, started_us, new, duplicates):
    conn.execute("INSERT INTO syncs (device_id, started_us, finished_us, new, duplicates) VALUES (?,?,?,?,?)",
                 (device_id, started_us, now_us(), new, duplicates))


# --------------------------------------------------------------------------- reading back

def devices(conn):
    return [dict(r) for r in conn.execute("SELECT * FROM devices ORDER BY device_id")]


def contacts(conn, device_id=None, include_voided=True):
    """Contacts in time order as dicts, each with ``void`` (True if a later void record names it)."""
    sql = ("SELECT c.*, EXISTS(SELECT 1 FROM voids v WHERE v.device_id=c.device_id AND v.voided_seq=c.seq) "
           "AS void FROM contacts c")
    args = ()
    if device_id is not None:
        sql += " WHERE c.device_id=?"
        args = (device_id,)
    sql += " ORDER BY c.utc_us, c.device_id, c.seq"
    out = []
    for r in conn.execute(sql, args):
        d = dict(r)
        d["void"] = bool(d["void"])
        if include_voided or not d["void"]:
            out.append(d)
    return out


def group_sessions(contact_rows, gap_s=DEFAULT_GAP_S):
    """Group contacts (dicts as from ``contacts``) into sessions: by the timer's session
    number when it gave one, else by time gaps longer than ``gap_s``.

    Returns a list of dicts ``{device_id, session_no, first_us, last_us, seqs}`` in time order."""
    groups = []
    open_by_key = {}
    for c in sorted(contact_rows, key=lambda c: (c["device_id"], c["utc_us"], c["seq"])):
        if c["session_no"] is not None:
            key = (c["device_id"], c["session_no"])
            g = open_by_key.get(key)
        else:
            key = (c["device_id"], None)
            g = open_by_key.get(key)
            if g is not None and c["utc_us"] - g["last_us"] > gap_s * 1000000:
                g = None
        if g is None:
            g = {"device_id": c["device_id"], "session_no": c["session_no"], "first_us": c["utc_us"],
                 "last_us": c["utc_us"], "seqs": []}
            open_by_key[key] = g
            groups.append(g)
        g["seqs"].append(c["seq"])
        g["last_us"] = max(g["last_us"], c["utc_us"])
    groups.sort(key=lambda g: (g["first_us"], g["device_id"]))
    return groups


def refresh_sessions(conn, gap_s=DEFAULT_GAP_S):
    """Make sure every group of contacts has a row in ``sessions`` (keeping attached
    observer/track/instrument); return the session rows as dicts in time order."""
    groups = group_sessions(contacts(conn, include_voided=True), gap_s)
    with transaction(conn):
        for g in groups:
            row = _find_session(conn, g)
            if row is None:
                conn.execute("INSERT INTO sessions (device_id, session_no, first_us, last_us) VALUES (?,?,?,?)",
                             (g["device_id"], g["session_no"], g["first_us"], g["last_us"]))
            else:
                conn.execute("UPDATE sessions SET first_us=?, last_us=? WHERE session_id=?",
                             (g["first_us"], g["last_us"], row["session_id"]))
    return sessions(conn)


def _find_session(conn, g):
    if g["session_no"] is not None:
        return conn.execute("SELECT * FROM sessions WHERE device_id=? AND session_no=?",
                            (g["device_id"], g["session_no"])).fetchone()
    return conn.execute("SELECT * FROM sessions WHERE device_id=? AND session_no IS NULL AND "
                        "first_us<=? AND last_us>=? ORDER BY first_us LIMIT 1",
                        (g["device_id"], g["last_us"], g["first_us"])).fetchone()


def sessions(conn):
    out = []
    for r in conn.execute("SELECT s.*, (SELECT COUNT(*) FROM fixes f WHERE f.session_id=s.session_id) AS fixes "
                          "FROM sessions s ORDER BY s.first_us, s.device_id"):
        d = dict(r)
        d["contacts"] = len(session_contacts(conn, d))
        out.append(d)
    return out


def get_session(conn, session_id):
    row = conn.execute("SELECT * FROM sessions WHERE session_id=?", (session_id,)).fetchone()
    if row is None:
        raise ArchiveError("session %r: no such session in the archive (see `limbclock session --list`)"
                           % (session_id,))
    return dict(row)


def find_session(conn, device_id, session_no):
    row = conn.execute("SELECT * FROM sessions WHERE device_id=? AND session_no=?",
                       (device_id, session_no)).fetchone()
    if row is None:
        raise ArchiveError("device %s session %s: not in the archive" % (device_id, session_no))
    return dict(row)


def session_contacts(conn, srow, include_voided=False):
    """The contacts of a session row, time order; voided ones left out unless asked."""
    if srow["session_no"] is not None:
        rows = conn.execute("SELECT * FROM contacts WHERE device_id=? AND session_no=? ORDER BY utc_us, seq",
                            (srow["device_id"], srow["session_no"]))
    else:
        rows = conn.execute("SELECT * FROM contacts WHERE device_id=? AND session_no IS NULL AND utc_us>=? "
                            "AND utc_us<=? ORDER BY utc_us, seq",
                            (srow["device_id"], srow["first_us"], srow["last_us"]))
    voided = set(r[0] for r in conn.execute("SELECT voided_seq FROM voids WHERE device_id=?", (srow["device_id"],)))
    out = []
    for r in rows:
        d = dict(r)
        d["void"] = d["seq"] in voided
        if include_voided or not d["void"]:
            out.append(d)
    return out


# --------------------------------------------------------------------------- instruments, conditions, fixes

def add_instrument(conn, document, name=None):
    """Store an instrument document (a dict with ``images``); return its id (same content → same id)."""
    import hashlib
    text = json.dumps(document, sort_keys=True, separators=(",", ":"))
    digest = hashlib.sha256(text.encode("utf-8")).hexdigest()
    row = conn.execute("SELECT instrument_id FROM instruments WHERE sha256=?", (digest,)).fetchone()
    if row is not None:
        return row[0]
    cur = conn.execute("INSERT INTO instruments (name, sha256, document, added_us) VALUES (?,?,?,?)",
                       (name or document.get("name") or "instrument-" + digest[:8], digest, text, now_us()))
    return cur.lastrowid


def get_instrument(conn, instrument_id):
    row = conn.execute("SELECT * FROM instruments WHERE instrument_id=?", (instrument_id,)).fetchone()
    if row is None:
        raise ArchiveError("instrument %r: not in the archive" % (instrument_id,))
    return json.loads(row["document"])


def add_calibration(conn, instrument_id, result):
    cur = conn.execute("INSERT INTO calibrations (instrument_id, computed_us, result) VALUES (?,?,?)",
                       (instrument_id, now_us(), json.dumps(result, sort_keys=True)))
    return cur.lastrowid


def calibrations(conn, instrument_id):
    return [dict(r, result=json.loads(r["result"])) for r in
            conn.execute("SELECT * FROM calibrations WHERE instrument_id=? ORDER BY computed_us", (instrument_id,))]


def attach_conditions(conn, session_id, observer=None, track=None, instrument_id=None):
    """Attach observer conditions (dict), DR track (dict, session-file form) and an instrument."""
    get_session(conn, session_id)
    with transaction(conn):
        if observer is not None:
            conn.execute("UPDATE sessions SET observer=? WHERE session_id=?", (json.dumps(observer), session_id))
        if track is not None:
            conn.execute("UPDATE sessions SET track=? WHERE session_id=?", (json.dumps(track), session_id))
        if instrument_id is not None:
            conn.execute("UPDATE sessions SET instrument_id=? WHERE session_id=?", (instrument_id, session_id))


def set_image_labels(conn, device_id, labels):
    """Record image labels: ``labels`` maps seq -> image id (or None)."""
    with transaction(conn):
        for seq, image in labels.items():
            conn.execute("UPDATE contacts SET image=? WHERE device_id=? AND seq=?", (image, device_id, seq))


def session_document(conn, session_id):
    """The ``limbclock-session/1`` document (dict) of an archived session with its attached conditions.

    Raises ``ArchiveError`` naming what is missing (observer, track or instrument)."""
    s = get_session(conn, session_id)
    missing = [k for k in ("observer", "track", "instrument_id") if s[k] is None]
    if missing:
        raise ArchiveError("session %d: %s not attached yet (use `limbclock session --session %d "
                           "--eye-height ... --track ... --instrument FILE`)"
                           % (session_id, ", ".join(m.replace("_id", "") for m in missing), session_id))
    from engine.instrument import parse_instrument
    inst = parse_instrument(get_instrument(conn, s["instrument_id"]))
    rows = session_contacts(conn, s, include_voided=True)
    return {"format": "limbclock-session/1",
            "observer": json.loads(s["observer"]),
            "instrument": inst.session_instrument(),
            "track": json.loads(s["track"]),
            "contacts": [_session_contact(c) for c in rows],
            "archive": {"session_id": session_id, "device": s["device_id"], "session_no": s["session_no"]}}


def _session_contact(c):
    """One archived contact in session-file form: the timer's stamp uncertainty becomes
    ``sigma_s``; a voided contact is kept with ``void: true`` (never used by the fix)."""
    d = {"utc": timescale.format_utc(c["utc_us"], 6), "body": c["body"], "limb": c["limb"], "image": c["image"],
         "seq": c["seq"], "time_quality": c["quality"]}
    if c["uncertainty_us"]:
        d["sigma_s"] = min(c["uncertainty_us"] / 1e6, 60.0)
    if c["void"]:
        d["void"] = True
    return d


def session_text(db, session_id):
    """``limbclock-session/1`` text of an archived session; ``db`` is a path or a connection.

    The helper the fix / plan / calibrate commands call to work straight from the archive."""
    conn = connect(db) if isinstance(db, str) else db
    try:
        return json.dumps(session_document(conn, session_id), indent=1)
    finally:
        if isinstance(db, str):
            conn.close()


def store_fix(conn, session_id, result):
    """Store a fix result dict (``limbclock-fix/1``); return its id."""
    e = result.get("ellipse_95") or {}
    with transaction(conn):
        cur = conn.execute("INSERT INTO fixes (session_id, computed_us, utc_us, lat_deg, lon_deg, major_nm, "
                           "minor_nm, major_axis_deg, result) VALUES (?,?,?,?,?,?,?,?,?)",
                           (session_id, now_us(), timescale.parse_utc(result["utc"]), float(result["lat_deg"]),
                            float(result["lon_deg"]), e.get("major_nm"), e.get("minor_nm"),
                            e.get("major_axis_deg"), json.dumps(result, sort_keys=True)))
    return cur.lastrowid


def fixes(conn, session_id=None):
    sql = "SELECT * FROM fixes"
    args = ()
    if session_id is not None:
        sql += " WHERE session_id=?"
        args = (session_id,)
    return [dict(r, result=json.loads(r["result"])) for r in conn.execute(sql + " ORDER BY utc_us, fix_id", args)]


def integrity_ok(conn):
    return conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok" and \
        not conn.execute("PRAGMA foreign_key_check").fetchall()
