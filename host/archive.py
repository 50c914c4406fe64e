"""The SQLite archive: every record synced from a timer, sessions, instruments, fixes.

One file (default ``$XDG_DATA_HOME/limbclock/archive.sqlite3``, else
``~/.local/share/limbclock/archive.sqlite3``), opened with the standard
library's ``sqlite3`` in WAL mode with ``foreign_keys=ON`` and
``synchronous=FULL``: a record is on disk when its transaction commits, and the
sync acknowledges to the timer only what has committed and been read back.

Opening (``connect``).  For writing, the file must be a limbclock archive
(``PRAGMA application_id`` = ``APPLICATION_ID``, or an older limbclock schema
recognised by its tables), writable, and pass SQLite's ``PRAGMA quick_check``;
a missing file becomes a new archive, a 0-byte file or an empty SQLite
database only when ``new=True`` (``limbclock sync --new``), a foreign file
never (a new archive is built in a temporary file and linked in place, so no
half-made file is ever seen).  ``mode="read"`` takes a snapshot of the file
into memory without writing anything, not even SQLite's side files
(``open_readonly``: the ``immutable``/``mode=ro`` URIs, or a private copy when
a ``-wal`` must be applied on read-only media), migrated to the current schema
there: everything reads the same way and nothing reaches the file.

The schema has a version (``PRAGMA user_version``) and a migration for each
step; ``migrate`` upgrades an older file one step per transaction.

  v1  devices, contacts (with time quality), voids, other log records
  v2  instruments and their calibration history, sessions, computed fixes
  v3  contacts.image (label given by identification or the navigator),
      a log of syncs, an index for sessions
  v4  log identity: ``logs`` (device, log_id, origin_seq); contacts, voids,
      events and sessions keyed by (device, log_id, seq); ``log_records`` (each
      record's 33 bytes as received, the source of an ACK's proof);
      ``log_gaps`` (seqs the timer could not give: damaged there); the
      ``application_id`` marker.  Rows of older archives belong to the
      ``LEGACY_LOG`` (0) identity of their device.

Records from the timer are ``device.log.Record`` objects (or plain dicts, see
``normalize_record``); a record already held for the same (device, log, seq)
with the same content is a duplicate and is skipped; different content is an
error.  Values read back are checked (type and range) before anything computes
with them: a damaged row gives a one-line ``ArchiveError`` naming the table,
the key and the field.
"""
import json
import os
import shutil
import sqlite3
import tempfile
import time

from engine import timescale

SCHEMA_VERSION = 4
APPLICATION_ID = 0x4C434C4B  # "LCLK" in the SQLite header (PRAGMA application_id)
LEGACY_LOG = 0               # the log identity of rows synced before logs had one
DEFAULT_GAP_S = 2 * 3600     # contacts further apart than this start a new session when the timer gave none
RECORD_LEN = 33              # device/log.py: one packed record

BODIES = ("sun", "moon")
LIMBS = ("lower", "upper")
MAX_US = 2 ** 62             # far beyond any instant the engine handles; a bound for damaged integers


class ArchiveError(ValueError):
    """The archive file or a record offered to it is not what it should be."""


class ArchiveDamaged(ArchiveError):
    """SQLite's integrity check fails: nothing may be written to it or acknowledged from it."""


class ArchiveReadOnly(ArchiveError):
    """The archive cannot be written (file mode, read-only directory or medium)."""


def default_path():
    """Where the archive lives unless ``--db`` says otherwise."""
    base = os.environ.get("XDG_DATA_HOME") or os.path.join(os.path.expanduser("~"), ".local", "share")
    return os.path.join(base, "limbclock", "archive.sqlite3")


def log_label(log_id):
    """A log identity as people read it: 8 hex digits, or ``legacy``."""
    return "legacy" if log_id == LEGACY_LOG else "%08x" % log_id


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

# v4: a primary key cannot be altered in SQLite, so the record tables are rebuilt (new table,
# copy, drop, rename: sqlite.org/lang_altertable.html, "making other kinds of table schema changes")
_V4 = """
CREATE TABLE logs (
    device_id     TEXT NOT NULL REFERENCES devices(device_id),
    log_id        INTEGER NOT NULL,
    origin_seq    INTEGER,
    last_seq      INTEGER NOT NULL DEFAULT -1,
    first_sync_us INTEGER,
    last_sync_us  INTEGER,
    PRIMARY KEY (device_id, log_id)
);
INSERT INTO logs (device_id, log_id, origin_seq, last_seq, first_sync_us, last_sync_us)
    SELECT device_id, 0, NULL, last_seq, first_sync_us, last_sync_us FROM devices;
ALTER TABLE devices ADD COLUMN log_id INTEGER;
UPDATE devices SET log_id = 0;
CREATE TABLE contacts_v4 (
    device_id      TEXT NOT NULL,
    log_id         INTEGER NOT NULL,
    seq            INTEGER NOT NULL,
    utc_us         INTEGER NOT NULL,
    body           TEXT NOT NULL,
    limb           TEXT NOT NULL,
    session_no     INTEGER,
    quality        TEXT NOT NULL,
    uncertainty_us INTEGER NOT NULL,
    image          TEXT,
    PRIMARY KEY (device_id, log_id, seq),
    FOREIGN KEY (device_id, log_id) REFERENCES logs(device_id, log_id)
);
INSERT INTO contacts_v4 SELECT device_id, 0, seq, utc_us, body, limb, session_no, quality, uncertainty_us, image
    FROM contacts;
DROP TABLE contacts;
ALTER TABLE contacts_v4 RENAME TO contacts;
CREATE INDEX contacts_by_session ON contacts (device_id, log_id, session_no, utc_us);
CREATE TABLE voids_v4 (
    device_id   TEXT NOT NULL,
    log_id      INTEGER NOT NULL,
    seq         INTEGER NOT NULL,
    voided_seq  INTEGER NOT NULL,
    utc_us      INTEGER NOT NULL,
    PRIMARY KEY (device_id, log_id, seq),
    FOREIGN KEY (device_id, log_id) REFERENCES logs(device_id, log_id)
);
INSERT INTO voids_v4 SELECT device_id, 0, seq, voided_seq, utc_us FROM voids;
DROP TABLE voids;
ALTER TABLE voids_v4 RENAME TO voids;
CREATE TABLE events_v4 (
    device_id   TEXT NOT NULL,
    log_id      INTEGER NOT NULL,
    seq         INTEGER NOT NULL,
    kind        TEXT NOT NULL,
    utc_us      INTEGER,
    session_no  INTEGER,
    payload     TEXT NOT NULL,
    PRIMARY KEY (device_id, log_id, seq),
    FOREIGN KEY (device_id, log_id) REFERENCES logs(device_id, log_id)
);
INSERT INTO events_v4 SELECT device_id, 0, seq, kind, utc_us, session_no, payload FROM events;
DROP TABLE events;
ALTER TABLE events_v4 RENAME TO events;
CREATE TABLE log_records (
    device_id   TEXT NOT NULL,
    log_id      INTEGER NOT NULL,
    seq         INTEGER NOT NULL,
    raw         BLOB NOT NULL,
    PRIMARY KEY (device_id, log_id, seq),
    FOREIGN KEY (device_id, log_id) REFERENCES logs(device_id, log_id)
);
CREATE TABLE log_gaps (
    device_id   TEXT NOT NULL,
    log_id      INTEGER NOT NULL,
    seq         INTEGER NOT NULL,
    noted_us    INTEGER NOT NULL,
    PRIMARY KEY (device_id, log_id, seq),
    FOREIGN KEY (device_id, log_id) REFERENCES logs(device_id, log_id)
);
ALTER TABLE sessions ADD COLUMN log_id INTEGER NOT NULL DEFAULT 0;
ALTER TABLE syncs ADD COLUMN log_id INTEGER;
ALTER TABLE syncs ADD COLUMN missing_on_timer INTEGER NOT NULL DEFAULT 0;
PRAGMA application_id = %d
""" % APPLICATION_ID

# MIGRATIONS[v] takes a database at version v to v + 1 (v = 0: an empty file).
MIGRATIONS = {0: _V1, 1: _V2, 2: _V3, 3: _V4}
OLD_TABLES = ("devices", "contacts", "voids", "events")      # what every limbclock archive (v1+) has


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
            if version + 1 >= 4:
                conn.execute("PRAGMA application_id = %d" % APPLICATION_ID)
            conn.execute("PRAGMA user_version = %d" % (version + 1))
            conn.execute("COMMIT")
        except BaseException:
            conn.execute("ROLLBACK")
            raise
        steps.append(version + 1)


class Connection(sqlite3.Connection):
    """An archive connection: ``path`` (the file), ``readonly`` (a snapshot: writes stay in memory)."""
    path = None
    readonly = False


def _sqlite(target, uri=False):
    conn = sqlite3.connect(target, isolation_level=None, timeout=10.0, uri=uri, factory=Connection)
    conn.row_factory = sqlite3.Row
    return conn


def writable_problem(path):
    """Why the archive at ``path`` cannot be written, or None."""
    folder = os.path.dirname(os.path.abspath(path)) or "."
    if os.path.exists(path) and not os.access(path, os.W_OK):
        return "the file is read-only"
    if os.path.isdir(folder) and not os.access(folder, os.W_OK):
        return "its directory %s is read-only (SQLite needs to write its journal beside it)" % folder
    return None


def _identity(conn, path, new):
    """Check that ``conn`` is a limbclock archive (or an empty database when ``new``)."""
    app = conn.execute("PRAGMA application_id").fetchone()[0]
    version = conn.execute("PRAGMA user_version").fetchone()[0]
    tables = set(r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type='table'"))
    if app == APPLICATION_ID:
        return
    if app == 0 and 1 <= version <= 3 and set(OLD_TABLES) <= tables:
        return                                   # an archive written before the marker (schema 1-3)
    if app == 0 and version == 0 and not tables:
        if new:
            return
        raise ArchiveError("%s is an empty database, not a limbclock archive: `limbclock sync --new` makes a new "
                           "archive there" % path)
    raise ArchiveError("%s: not a limbclock archive (another program's SQLite database): choose another --db"
                       % path)


def quick_check(conn):
    """SQLite's ``PRAGMA quick_check`` (sqlite.org/pragma.html): [] when the file is sound, else
    the first problems it reports (a malformed file may also raise ``sqlite3.DatabaseError``)."""
    try:
        rows = [r[0] for r in conn.execute("PRAGMA quick_check(5)")]
    except sqlite3.DatabaseError as exc:
        return [str(exc)]
    return [] if rows == ["ok"] else rows


def damaged_message(path, problems, before_ack=False):
    what = ("the records since the last acknowledgement were NOT acknowledged: the timer keeps them"
            if before_ack else "nothing was written to it and nothing acknowledged to the timer")
    return ("archive %s is damaged (SQLite quick_check: %s): %s; keep the file, restore a backup or sync into a "
            "new archive" % (path, "; ".join(str(p) for p in problems[:2]), what))


def connect(path, target=SCHEMA_VERSION, mode="write", new=False):
    """Open the archive at ``path``; return a ``Connection`` in autocommit mode (transactions
    are explicit, see ``transaction``).

    ``mode="write"``: create a missing file, refuse a 0-byte file or an empty database unless
    ``new``, refuse foreign files, read-only files and a damaged file (``quick_check``), migrate.
    ``mode="read"``: a read-only snapshot (see the module docstring)."""
    if mode == "read":
        return open_readonly(path, target)
    if mode != "write":
        raise ValueError("archive mode must be 'write' or 'read', got %r" % (mode,))
    if path == ":memory:":
        conn = _sqlite(path)
        conn.path = path
        migrate(conn, target)
        return conn
    _check_file(path, new)
    folder = os.path.dirname(os.path.abspath(path))
    if not os.path.isdir(folder):
        try:
            os.makedirs(folder, exist_ok=True)
        except OSError as exc:
            raise ArchiveReadOnly("cannot create the archive's directory %s: %s" % (folder, exc.strerror or exc))
    why = writable_problem(path)
    if why:
        raise ArchiveReadOnly("archive %s cannot be written: %s" % (path, why))
    if not os.path.exists(path):
        _create(path, target)
    try:
        conn = _sqlite(path)
        conn.path = path
        _identity(conn, path, new)
        problems = quick_check(conn)
        if problems:
            conn.close()
            raise ArchiveDamaged(damaged_message(path, problems))
        conn.execute("PRAGMA journal_mode=WAL")
        conn.execute("PRAGMA synchronous=FULL")
        conn.execute("PRAGMA foreign_keys=ON")
        migrate(conn, target)
    except sqlite3.DatabaseError as exc:
        text = str(exc)
        if "readonly" in text or "read-only" in text:
            raise ArchiveReadOnly("archive %s cannot be written: %s" % (path, text))
        if "malformed" in text or "not a database" in text:
            raise ArchiveDamaged(damaged_message(path, [text]))
        raise ArchiveError("%s: cannot open the archive: %s" % (path, text))
    return conn


def _create(path, target):
    """Make a new archive at ``path`` atomically: built complete in a temporary file beside it,
    then linked in place (when two programs race, the first link wins and the other opens it), so
    no 0-byte or half-made file is ever seen at ``path``."""
    folder = os.path.dirname(os.path.abspath(path))
    fd, tmp = tempfile.mkstemp(prefix=".limbclock-new-", suffix=".sqlite3", dir=folder)
    os.close(fd)
    try:
        conn = _sqlite(tmp)
        try:
            conn.execute("PRAGMA journal_mode=WAL")
            conn.execute("PRAGMA synchronous=FULL")
            migrate(conn, target)
        finally:
            conn.close()
        try:
            os.link(tmp, path)
        except FileExistsError:
            pass
        except OSError:                      # no hard links here (FAT): a plain rename
            if not os.path.exists(path):
                os.replace(tmp, path)
    except sqlite3.DatabaseError as exc:
        raise ArchiveError("%s: cannot create the archive: %s" % (path, exc))
    finally:
        for suffix in ("", "-wal", "-shm"):
            try:
                os.remove(tmp + suffix)
            except OSError:
                pass


def _check_file(path, new):
    if not os.path.exists(path):
        return
    if os.path.isdir(path):
        raise ArchiveError("%s is a directory, not an archive file" % path)
    with open(path, "rb") as f:
        head = f.read(16)
    if not head:
        if new:
            return
        raise ArchiveError("%s is an empty file (0 bytes), not a limbclock archive: `limbclock sync --new` makes "
                           "a new archive there" % path)
    if head != b"SQLite format 3\x00":
        raise ArchiveError("%s: not a limbclock archive (not an SQLite database)" % path)


def open_readonly(path, target=SCHEMA_VERSION):
    """A read-only snapshot of the archive at ``path``, in memory, at schema ``target``.

    Nothing is written, not even SQLite's side files: without a ``-wal`` holding transactions
    (no writer has it open, or it was checkpointed) the file is opened ``immutable=1``
    (sqlite.org/uri.html) and copied into memory at once; with one, ``mode=ro`` reads the file
    and its ``-wal`` together, and on read-only media without a usable ``-shm`` (sqlite.org/wal.html,
    "read-only databases") a private copy of both is read instead."""
    if path != ":memory:":
        if not os.path.exists(path):
            raise ArchiveError("no archive at %s" % path)
        _check_file(path, False)
    from urllib.parse import quote
    uri = "file:%s" % quote(os.path.abspath(path))
    wal = path + "-wal"
    pending = os.path.exists(wal) and os.path.getsize(wal) > 0
    tmp = None
    src = None
    try:
        if not pending:
            src = _sqlite(uri + "?mode=ro&immutable=1", uri=True)
        else:
            try:
                src = _sqlite(uri + "?mode=ro", uri=True)
                src.execute("SELECT count(*) FROM sqlite_master").fetchone()
            except sqlite3.OperationalError:
                if src is not None:
                    src.close()
                tmp = tempfile.mkdtemp(prefix="limbclock-ro-")
                copy = os.path.join(tmp, "archive.sqlite3")
                shutil.copyfile(path, copy)
                shutil.copyfile(wal, copy + "-wal")
                src = _sqlite(copy)
        _identity(src, path, False)
        snap = _sqlite(":memory:")
        src.backup(snap)
    except sqlite3.DatabaseError as exc:
        text = str(exc)
        if "malformed" in text or "not a database" in text:
            raise ArchiveDamaged("archive %s is damaged (SQLite: %s): restore a backup (the sqlite3 shell's "
                                 "`.recover` salvages the readable rows into a new file)" % (path, text))
        raise ArchiveError("%s: cannot read the archive: %s" % (path, text))
    finally:
        if src is not None:
            src.close()
        if tmp is not None:
            shutil.rmtree(tmp, ignore_errors=True)
    snap.path = path
    snap.readonly = True
    snap.execute("PRAGMA foreign_keys=ON")
    migrate(snap, target)
    return snap


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


# --------------------------------------------------------------------------- checking what is read back

def _bad(table, key, field, value, expected):
    v = repr(value)
    if len(v) > 40:
        v = v[:37] + "..."
    return ArchiveError("archive table %s, %s: field %s holds %s, expected %s (a damaged row: restore a backup "
                        "or correct it)" % (table, key, field, v, expected))


def _int(table, key, field, v, lo=-MAX_US, hi=MAX_US, null=False):
    if v is None and null:
        return v
    if not isinstance(v, int) or isinstance(v, bool) or not lo <= v <= hi:
        raise _bad(table, key, field, v, "an integer in %d..%d" % (lo, hi) + (" or null" if null else ""))
    return v


def _real(table, key, field, v, lo, hi, null=False):
    if v is None and null:
        return v
    if isinstance(v, int) and not isinstance(v, bool):
        v = float(v)
    if not isinstance(v, float) or not lo <= v <= hi:
        raise _bad(table, key, field, v, "a number in %g..%g" % (lo, hi) + (" or null" if null else ""))
    return v


def _text(table, key, field, v, choices=None, null=False):
    if v is None and null:
        return v
    if not isinstance(v, str) or (choices is not None and v not in choices):
        raise _bad(table, key, field, v, "one of %s" % (", ".join(choices),) if choices else "text")
    return v


def _json(table, key, field, v, null=False):
    if v is None and null:
        return None
    if not isinstance(v, str):
        raise _bad(table, key, field, v, "JSON text")
    try:
        return json.loads(v)
    except ValueError:
        raise _bad(table, key, field, v, "JSON text")


def _record_key(d):
    return "device %s log %s seq %s" % (d.get("device_id"), log_label(d["log_id"]) if isinstance(d.get("log_id"), int)
                                        else d.get("log_id"), d.get("seq"))


def _check_contact(d):
    key = _record_key(d)
    _text("contacts", key, "device_id", d["device_id"])
    _int("contacts", key, "log_id", d["log_id"], 0, 0xFFFFFFFF)
    _int("contacts", key, "seq", d["seq"], 0, 0xFFFFFFFF)
    _int("contacts", key, "utc_us", d["utc_us"])
    _text("contacts", key, "body", d["body"], BODIES)
    _text("contacts", key, "limb", d["limb"], LIMBS)
    _int("contacts", key, "session_no", d["session_no"], 0, 0xFFFFFFFF, null=True)
    _text("contacts", key, "quality", d["quality"])
    _int("contacts", key, "uncertainty_us", d["uncertainty_us"], 0, 0xFFFFFFFF)
    _text("contacts", key, "image", d["image"], null=True)
    return d


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
             "voided_seq", "voids", "target", "target_seq", "raw"}
    out = {"seq": seq, "kind": kind, "utc_us": utc_us, "body": rec.get("body"), "limb": rec.get("limb"),
           "session_no": session_no, "quality": quality, "uncertainty_us": unc, "voided_seq": voided,
           "extra": dict((k, v) for k, v in rec.items() if k not in known), "raw": rec.get("raw")}
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
    raw = out["raw"]
    if raw is not None and (not isinstance(raw, (bytes, bytearray)) or len(raw) != RECORD_LEN):
        raise ArchiveError("log record %d: raw must be the %d packed bytes" % (seq, RECORD_LEN))
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


def ensure_log(conn, device_id, log_id=LEGACY_LOG, origin_seq=None):
    """Insert the device's log ``log_id`` if new (inside a transaction); returns True when it was."""
    if not isinstance(log_id, int) or isinstance(log_id, bool) or not 0 <= log_id <= 0xFFFFFFFF:
        raise ArchiveError("log id must be a 32-bit unsigned integer, got %r" % (log_id,))
    t = now_us()
    cur = conn.execute("INSERT OR IGNORE INTO logs (device_id, log_id, origin_seq, first_sync_us) VALUES (?,?,?,?)",
                       (device_id, log_id, origin_seq, t))
    conn.execute("UPDATE logs SET last_sync_us=?, origin_seq=COALESCE(origin_seq, ?) WHERE device_id=? AND log_id=?",
                 (t, origin_seq, device_id, log_id))
    return cur.rowcount == 1


def last_seq(conn, device_id, log_id=None):
    """Highest sequence number committed for the device's log ``log_id`` (None: the log synced
    last), -1 if none."""
    if log_id is None:
        row = conn.execute("SELECT log_id FROM devices WHERE device_id=?", (device_id,)).fetchone()
        if row is None or row[0] is None:
            return -1
        log_id = row[0]
    row = conn.execute("SELECT last_seq FROM logs WHERE device_id=? AND log_id=?", (device_id, log_id)).fetchone()
    return -1 if row is None else _int("logs", "device %s log %s" % (device_id, log_label(log_id)), "last_seq",
                                       row[0], -1, 0xFFFFFFFF)


def logs(conn, device_id=None):
    """The logs the archive knows, as dicts (``device_id, log_id, origin_seq, last_seq, ...``)."""
    sql = "SELECT * FROM logs" + (" WHERE device_id=?" if device_id is not None else "") + \
        " ORDER BY device_id, first_sync_us, log_id"
    out = []
    for r in conn.execute(sql, (device_id,) if device_id is not None else ()):
        d = dict(r)
        key = "device %s log %s" % (d["device_id"], d["log_id"])
        _int("logs", key, "log_id", d["log_id"], 0, 0xFFFFFFFF)
        _int("logs", key, "last_seq", d["last_seq"], -1, 0xFFFFFFFF)
        _int("logs", key, "origin_seq", d["origin_seq"], 0, 0xFFFFFFFF, null=True)
        out.append(d)
    return out


_TABLE_COLS = (("contacts", "utc_us, body, limb, session_no, quality, uncertainty_us"),
               ("voids", "voided_seq, utc_us"), ("events", "kind, utc_us, session_no, payload"))


def _existing(conn, device_id, log_id, seq):
    for table, cols in _TABLE_COLS:
        row = conn.execute("SELECT %s FROM %s WHERE device_id=? AND log_id=? AND seq=?" % (cols, table),
                           (device_id, log_id, seq)).fetchone()
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


def store_records(conn, device_id, records, log_id=LEGACY_LOG):
    """Store timer log records of ``device_id``'s log ``log_id`` (call inside a transaction).

    ``records``: dicts as ``normalize_record`` takes them, with ``raw`` (the 33 packed bytes)
    when they come from a timer.  Returns ``(new, duplicates)``.  Raises ``ArchiveError`` when
    (device, log, seq) already holds a different record.  A record of a log seen for the first
    time that equals, seq and content, a ``LEGACY_LOG`` row (timed contact) is that row (a log
    from before identities, upgraded in place on the timer): the row moves to the new identity
    and counts as a duplicate."""
    new = dup = 0
    ensure_log(conn, device_id, log_id)
    top = last_seq(conn, device_id, log_id)
    for rec in records:
        r = normalize_record(rec)
        table, row = _row_of(r)
        old_table, old_row = _existing(conn, device_id, log_id, r["seq"])
        if old_table is None and log_id != LEGACY_LOG and r["kind"] == "contact" and r["quality"] != "none":
            if _existing(conn, device_id, LEGACY_LOG, r["seq"]) == (table, row):
                conn.execute("UPDATE contacts SET log_id=? WHERE device_id=? AND log_id=? AND seq=?",
                             (log_id, device_id, LEGACY_LOG, r["seq"]))
                old_table, old_row = table, row
        same_raw = r["raw"] is not None and _store_raw(conn, device_id, log_id, r["seq"], bytes(r["raw"]))
        if old_table is not None:
            # the stored bytes are the record: a contact given its UTC since by a late stamp
            # (apply_stamps) is still the same record when it is read again
            if not same_raw and (old_table, old_row) != (table, row):
                raise ArchiveError("device %s log %s seq %d: the archive holds a different record "
                                   "(do two timers share a device id and a log identity?)"
                                   % (device_id, log_label(log_id), r["seq"]))
            dup += 1
            top = max(top, r["seq"])
            continue
        if table == "contacts":
            conn.execute("INSERT INTO contacts (device_id, log_id, seq, utc_us, body, limb, session_no, quality, "
                         "uncertainty_us) VALUES (?,?,?,?,?,?,?,?,?)", (device_id, log_id, r["seq"]) + row)
        elif table == "voids":
            conn.execute("INSERT INTO voids (device_id, log_id, seq, voided_seq, utc_us) VALUES (?,?,?,?,?)",
                         (device_id, log_id, r["seq"]) + row)
        else:
            conn.execute("INSERT INTO events (device_id, log_id, seq, kind, utc_us, session_no, payload) "
                         "VALUES (?,?,?,?,?,?,?)", (device_id, log_id, r["seq"]) + row)
        new += 1
        top = max(top, r["seq"])
    conn.execute("UPDATE logs SET last_seq=? WHERE device_id=? AND log_id=?", (top, device_id, log_id))
    conn.execute("UPDATE devices SET last_seq=?, log_id=? WHERE device_id=?", (top, log_id, device_id))
    return new, dup


def _store_raw(conn, device_id, log_id, seq, raw):
    row = conn.execute("SELECT raw FROM log_records WHERE device_id=? AND log_id=? AND seq=?",
                       (device_id, log_id, seq)).fetchone()
    if row is None:
        conn.execute("INSERT INTO log_records (device_id, log_id, seq, raw) VALUES (?,?,?,?)",
                     (device_id, log_id, seq, raw))
        return False
    if bytes(row[0]) != raw:
        raise ArchiveError("device %s log %s seq %d: the archive holds other bytes for this record"
                           % (device_id, log_label(log_id), seq))
    return True


def note_gaps(conn, device_id, log_id, seqs):
    """Record seqs the timer could not give (damaged there and skipped); returns how many are new
    to the archive.  Call inside a transaction."""
    t = now_us()
    n = 0
    for s in seqs:
        cur = conn.execute("INSERT OR IGNORE INTO log_gaps (device_id, log_id, seq, noted_us) VALUES (?,?,?,?)",
                           (device_id, log_id, s, t))
        n += cur.rowcount
    return n


# -- late stamps (the timer's STAMP records; owned with device/log.py) ------------------------------

def apply_stamps(conn, device_id, log_id=LEGACY_LOG):
    """Give the timer's untimed contacts of the log ``log_id`` (quality ``none``: logged before it had
    any time, their ``utc_us`` the oscillator's tick) the UTC of the later ``stamp`` record that names
    them (``stamps_seq``), with its quality and uncertainty.  Call inside a transaction, after
    ``store_records``; idempotent (a contact already stamped is left alone).  Returns how many
    contacts got their time."""
    n = 0
    rows = conn.execute("SELECT utc_us, payload FROM events WHERE device_id=? AND log_id=? AND kind='stamp' "
                        "ORDER BY seq", (device_id, log_id)).fetchall()
    for utc_us, payload in rows:
        p = json.loads(payload)
        target, quality, unc = p.get("stamps_seq"), p.get("quality"), p.get("uncertainty_us")
        if not isinstance(target, int) or not isinstance(quality, str) or quality == "none" or \
                not isinstance(unc, int) or not isinstance(utc_us, int):
            continue
        cur = conn.execute("UPDATE contacts SET utc_us=?, quality=?, uncertainty_us=? WHERE device_id=? AND log_id=? "
                           "AND seq=? AND quality='none'", (utc_us, quality, unc, device_id, log_id, target))
        n += cur.rowcount
    return n


def gaps(conn, device_id=None, log_id=None):
    """``[(device_id, log_id, seq)]`` the timer reported missing (damaged on the timer)."""
    sql = "SELECT device_id, log_id, seq FROM log_gaps"
    args = []
    if device_id is not None:
        sql += " WHERE device_id=?"
        args.append(device_id)
        if log_id is not None:
            sql += " AND log_id=?"
            args.append(log_id)
    return [tuple(r) for r in conn.execute(sql + " ORDER BY device_id, log_id, seq", args)]


def range_proof(conn, device_id, log_id, first_seq, last_seq):
    """``(proof, count)`` over the packed records the archive holds for the log with
    ``first_seq <= seq <= last_seq``, in seq order (``device.protocol.proof``: what an ACK
    carries).  Each stored record is checked first: 33 bytes, its own CRC-32, its seq."""
    from device.log import unpack_record
    from device.protocol import proof
    crc = 0
    n = 0
    for seq, raw in conn.execute("SELECT seq, raw FROM log_records WHERE device_id=? AND log_id=? AND seq BETWEEN ? "
                                 "AND ? ORDER BY seq", (device_id, log_id, first_seq, last_seq)):
        key = "device %s log %s seq %s" % (device_id, log_label(log_id), seq)
        if not isinstance(raw, bytes) or len(raw) != RECORD_LEN:
            raise _bad("log_records", key, "raw", raw, "the record's %d bytes" % RECORD_LEN)
        rec = unpack_record(raw)
        if rec is None or rec.seq != seq:
            raise _bad("log_records", key, "raw", raw, "a record with a valid CRC-32 and this seq")
        crc = proof((raw,), crc)
        n += 1
    return crc, n


def record_sync(conn, device_id, started_us, new, duplicates, log_id=None, missing=0):
    conn.execute("INSERT INTO syncs (device_id, started_us, finished_us, new, duplicates, log_id, missing_on_timer) "
                 "VALUES (?,?,?,?,?,?,?)", (device_id, started_us, now_us(), new, duplicates, log_id, missing))


# --------------------------------------------------------------------------- reading back

def devices(conn):
    out = []
    for r in conn.execute("SELECT * FROM devices ORDER BY device_id"):
        d = dict(r)
        key = "device %s" % (d["device_id"],)
        _text("devices", key, "device_id", d["device_id"])
        _int("devices", key, "last_seq", d["last_seq"], -1, 0xFFFFFFFF)
        _int("devices", key, "log_id", d["log_id"], 0, 0xFFFFFFFF, null=True)
        out.append(d)
    return out


_VOIDED = ("EXISTS(SELECT 1 FROM voids v WHERE v.device_id=c.device_id AND v.log_id=c.log_id "
           "AND v.voided_seq=c.seq) AS void")


def contacts(conn, device_id=None, include_voided=True):
    """Contacts in time order as dicts, each with ``void`` (True if a later void record of the
    same log names it); values checked."""
    sql = "SELECT c.*, %s FROM contacts c" % _VOIDED
    args = ()
    if device_id is not None:
        sql += " WHERE c.device_id=?"
        args = (device_id,)
    sql += " ORDER BY c.utc_us, c.device_id, c.log_id, c.seq"
    out = []
    for r in conn.execute(sql, args):
        d = _check_contact(dict(r))
        d["void"] = bool(d["void"])
        if include_voided or not d["void"]:
            out.append(d)
    return out


def group_sessions(contact_rows, gap_s=DEFAULT_GAP_S):
    """Group contacts (dicts as from ``contacts``) into sessions: by the timer's session
    number within one log when it gave one, else by time gaps longer than ``gap_s``.

    Returns a list of dicts ``{device_id, log_id, session_no, first_us, last_us, seqs}`` in time order."""
    groups = []
    open_by_key = {}
    for c in sorted(contact_rows, key=lambda c: (c["device_id"], c.get("log_id", 0), c["utc_us"], c["seq"])):
        log_id = c.get("log_id", LEGACY_LOG)
        if c["session_no"] is not None:
            key = (c["device_id"], log_id, c["session_no"])
            g = open_by_key.get(key)
        else:
            key = (c["device_id"], log_id, None)
            g = open_by_key.get(key)
            if g is not None and c["utc_us"] - g["last_us"] > gap_s * 1000000:
                g = None
        if g is None:
            g = {"device_id": c["device_id"], "log_id": log_id, "session_no": c["session_no"],
                 "first_us": c["utc_us"], "last_us": c["utc_us"], "seqs": []}
            open_by_key[key] = g
            groups.append(g)
        g["seqs"].append(c["seq"])
        g["last_us"] = max(g["last_us"], c["utc_us"])
    groups.sort(key=lambda g: (g["first_us"], g["device_id"], g["log_id"]))
    return groups


def refresh_sessions(conn, gap_s=DEFAULT_GAP_S):
    """Make sure every group of contacts has a row in ``sessions`` (keeping attached
    observer/track/instrument); return the session rows as dicts in time order.  (On a
    read-only archive this updates the in-memory snapshot only.)"""
    groups = group_sessions(contacts(conn, include_voided=True), gap_s)
    with transaction(conn):
        for g in groups:
            row = _find_session(conn, g)
            if row is None:
                conn.execute("INSERT INTO sessions (device_id, log_id, session_no, first_us, last_us) "
                             "VALUES (?,?,?,?,?)", (g["device_id"], g["log_id"], g["session_no"], g["first_us"],
                                                    g["last_us"]))
            else:
                conn.execute("UPDATE sessions SET first_us=?, last_us=? WHERE session_id=?",
                             (g["first_us"], g["last_us"], row["session_id"]))
    return sessions(conn)


def _find_session(conn, g):
    if g["session_no"] is not None:
        return conn.execute("SELECT * FROM sessions WHERE device_id=? AND log_id=? AND session_no=?",
                            (g["device_id"], g["log_id"], g["session_no"])).fetchone()
    return conn.execute("SELECT * FROM sessions WHERE device_id=? AND log_id=? AND session_no IS NULL AND "
                        "first_us<=? AND last_us>=? ORDER BY first_us LIMIT 1",
                        (g["device_id"], g["log_id"], g["last_us"], g["first_us"])).fetchone()


def _check_session(d):
    key = "session_id %s" % (d.get("session_id"),)
    _int("sessions", key, "session_id", d["session_id"], 1, MAX_US)
    _text("sessions", key, "device_id", d["device_id"])
    _int("sessions", key, "log_id", d["log_id"], 0, 0xFFFFFFFF)
    _int("sessions", key, "session_no", d["session_no"], 0, 0xFFFFFFFF, null=True)
    _int("sessions", key, "first_us", d["first_us"])
    _int("sessions", key, "last_us", d["last_us"])
    for k in ("observer", "track"):
        v = _json("sessions", key, k, d[k], null=True)
        if v is not None and not isinstance(v, dict):
            raise _bad("sessions", key, k, d[k], "a JSON object")
    _int("sessions", key, "instrument_id", d["instrument_id"], 1, MAX_US, null=True)
    return d


def sessions(conn):
    out = []
    for r in conn.execute("SELECT s.*, (SELECT COUNT(*) FROM fixes f WHERE f.session_id=s.session_id) AS fixes "
                          "FROM sessions s ORDER BY s.first_us, s.device_id, s.log_id"):
        d = _check_session(dict(r))
        d["contacts"] = len(session_contacts(conn, d))
        out.append(d)
    return out


def get_session(conn, session_id):
    row = conn.execute("SELECT * FROM sessions WHERE session_id=?", (session_id,)).fetchone()
    if row is None:
        raise ArchiveError("session %r: no such session in the archive (see `limbclock session --list`)"
                           % (session_id,))
    return _check_session(dict(row))


def find_session(conn, device_id, session_no):
    rows = conn.execute("SELECT * FROM sessions WHERE device_id=? AND session_no=? ORDER BY first_us",
                        (device_id, session_no)).fetchall()
    if not rows:
        raise ArchiveError("device %s session %s: not in the archive" % (device_id, session_no))
    if len(rows) > 1:
        raise ArchiveError("device %s session %s: %d sessions carry that number (logs %s): give --session ID"
                           % (device_id, session_no, len(rows), ", ".join(log_label(r["log_id"]) for r in rows)))
    return _check_session(dict(rows[0]))


def session_contacts(conn, srow, include_voided=False):
    """The contacts of a session row, time order; voided ones left out unless asked."""
    log_id = srow.get("log_id", LEGACY_LOG) if hasattr(srow, "get") else srow["log_id"]
    if srow["session_no"] is not None:
        rows = conn.execute("SELECT c.*, %s FROM contacts c WHERE c.device_id=? AND c.log_id=? AND c.session_no=? "
                            "ORDER BY c.utc_us, c.seq" % _VOIDED, (srow["device_id"], log_id, srow["session_no"]))
    else:
        rows = conn.execute("SELECT c.*, %s FROM contacts c WHERE c.device_id=? AND c.log_id=? AND "
                            "c.session_no IS NULL AND c.utc_us>=? AND c.utc_us<=? ORDER BY c.utc_us, c.seq"
                            % _VOIDED, (srow["device_id"], log_id, srow["first_us"], srow["last_us"]))
    out = []
    for r in rows:
        d = _check_contact(dict(r))
        d["void"] = bool(d["void"])
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
    doc = _json("instruments", "instrument_id %s" % instrument_id, "document", row["document"])
    if not isinstance(doc, dict):
        raise _bad("instruments", "instrument_id %s" % instrument_id, "document", row["document"], "a JSON object")
    return doc


def add_calibration(conn, instrument_id, result):
    cur = conn.execute("INSERT INTO calibrations (instrument_id, computed_us, result) VALUES (?,?,?)",
                       (instrument_id, now_us(), json.dumps(result, sort_keys=True)))
    return cur.lastrowid


def calibrations(conn, instrument_id):
    out = []
    for r in conn.execute("SELECT * FROM calibrations WHERE instrument_id=? ORDER BY computed_us", (instrument_id,)):
        key = "calibration_id %s" % r["calibration_id"]
        _int("calibrations", key, "computed_us", r["computed_us"])
        out.append(dict(r, result=_json("calibrations", key, "result", r["result"])))
    return out


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


def set_image_labels(conn, device_id, labels, log_id=None):
    """Record image labels: ``labels`` maps seq -> image id (or None), for the contacts of the
    device's log ``log_id`` (None: the one log holding each seq; two logs holding it is an error)."""
    with transaction(conn):
        for seq, image in labels.items():
            lid = log_id
            if lid is None:
                held = [r[0] for r in conn.execute("SELECT log_id FROM contacts WHERE device_id=? AND seq=?",
                                                   (device_id, seq))]
                if len(held) > 1:
                    raise ArchiveError("device %s seq %s: %d logs hold that seq (%s): say which log"
                                       % (device_id, seq, len(held), ", ".join(log_label(x) for x in held)))
                if not held:
                    continue
                lid = held[0]
            conn.execute("UPDATE contacts SET image=? WHERE device_id=? AND log_id=? AND seq=?",
                         (image, device_id, lid, seq))


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
            "archive": {"session_id": session_id, "device": s["device_id"], "log_id": s["log_id"],
                        "session_no": s["session_no"]}}


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
    conn = connect(db, mode="read") if isinstance(db, str) else db
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
    out = []
    for r in conn.execute(sql + " ORDER BY utc_us, fix_id", args):
        key = "fix_id %s" % r["fix_id"]
        _int("fixes", key, "session_id", r["session_id"], 1, MAX_US)
        _int("fixes", key, "utc_us", r["utc_us"])
        _real("fixes", key, "lat_deg", r["lat_deg"], -90.0, 90.0)
        _real("fixes", key, "lon_deg", r["lon_deg"], -360.0, 360.0)
        for k in ("major_nm", "minor_nm"):
            _real("fixes", key, k, r[k], 0.0, 1e6, null=True)
        _real("fixes", key, "major_axis_deg", r["major_axis_deg"], -360.0, 360.0, null=True)
        res = _json("fixes", key, "result", r["result"])
        if not isinstance(res, dict) or not isinstance(res.get("utc"), str) or \
                not isinstance(res.get("lat_deg"), (int, float)) or not isinstance(res.get("lon_deg"), (int, float)):
            raise _bad("fixes", key, "result", r["result"], "a limbclock-fix/1 object (utc, lat_deg, lon_deg)")
        out.append(dict(r, result=res))
    return out


def integrity_ok(conn):
    return conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok" and \
        not conn.execute("PRAGMA foreign_key_check").fetchall()
