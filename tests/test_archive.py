"""The SQLite archive: schema migrations from every earlier version, idempotent storage,
voids, session grouping, the session document, log identities, the file checks on open,
read-only archives and damaged rows.

Outside references: SQLite's own ``PRAGMA integrity_check`` / ``quick_check`` /
``foreign_key_check``, ``application_id`` and its documented WAL journal mode and URI
``mode=ro`` / ``immutable`` parameters (sqlite.org/wal.html, sqlite.org/pragma.html,
sqlite.org/uri.html); the session document is validated against the ``limbclock-session/1``
keys (DEVELOPERS.md).
"""
import json
import os
import shutil
import sqlite3
import subprocess
import sys

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from engine import timescale
from host import archive
from waiting import HANG_GUARD_S

T0 = timescale.parse_utc("2031-05-14T07:00:00Z")


def contact(seq, dt_s, session=1, body="sun", limb="lower", quality="locked", unc=400):
    return {"seq": seq, "kind": "contact", "utc_us": T0 + int(dt_s * 1e6), "body": body, "limb": limb,
            "session": session, "quality": quality, "uncertainty_us": unc}


def fresh(tmp_path, target=archive.SCHEMA_VERSION):
    return archive.connect(str(tmp_path / "a.sqlite3"), target)


def test_new_archive_has_wal_foreign_keys_and_version(tmp_path):
    conn = fresh(tmp_path)
    # sqlite.org/pragma.html: journal_mode reports "wal", foreign_keys 1, user_version as set
    assert conn.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
    assert conn.execute("PRAGMA foreign_keys").fetchone()[0] == 1
    assert conn.execute("PRAGMA user_version").fetchone()[0] == archive.SCHEMA_VERSION
    assert archive.integrity_ok(conn)


FIX_DOC = '{"format": "limbclock-fix/1", "utc": "2031-05-14T07:00:00.000Z", "lat_deg": 41.5, "lon_deg": -9.5}'


@pytest.mark.parametrize("start", list(range(1, archive.SCHEMA_VERSION)))
def test_migrates_from_every_earlier_version(tmp_path, start):
    path = str(tmp_path / "old.sqlite3")
    conn = archive.connect(path, target=start)
    assert conn.execute("PRAGMA user_version").fetchone()[0] == start
    # data written by the old schema (v1 tables exist in every version; log_id only from v4)
    conn.execute("INSERT INTO devices (device_id, protocol, last_seq) VALUES ('T-0042', 1, 1)")
    conn.execute("INSERT INTO contacts (device_id, seq, utc_us, body, limb, session_no, quality, uncertainty_us) "
                 "VALUES ('T-0042', 0, ?, 'sun', 'lower', 3, 'locked', 500)", (T0,))
    conn.execute("INSERT INTO voids (device_id, seq, voided_seq, utc_us) VALUES ('T-0042', 1, 0, ?)", (T0 + 5,))
    conn.execute("INSERT INTO events (device_id, seq, kind, utc_us, session_no, payload) "
                 "VALUES ('T-0042', 2, 'session-start', ?, 4, '{}')", (T0 + 9,))
    if start >= 2:      # a session with conditions and a fix, as version 2 stored them
        conn.execute("INSERT INTO instruments (name, sha256, document, added_us) VALUES ('s', 'x', "
                     "'{\"images\": [{\"id\": \"i01\", \"deviation_deg\": 5.7}]}', 0)")
        conn.execute("INSERT INTO sessions (device_id, session_no, first_us, last_us, observer, track, "
                     "instrument_id) VALUES ('T-0042', 3, ?, ?, '{\"eye_height_m\": 2.0}', '{}', 1)", (T0, T0))
        conn.execute("INSERT INTO fixes (session_id, computed_us, utc_us, lat_deg, lon_deg, result) "
                     "VALUES (1, 0, ?, 41.5, -9.5, ?)", (T0, FIX_DOC))
    conn.close()
    conn = archive.connect(path)
    if start >= 2:
        assert [(f["lat_deg"], f["result"]) for f in archive.fixes(conn)] == [(41.5, json.loads(FIX_DOC))]
        assert archive.get_instrument(conn, 1)["images"][0]["deviation_deg"] == 5.7
        assert archive.get_session(conn, 1)["log_id"] == archive.LEGACY_LOG
    assert conn.execute("PRAGMA user_version").fetchone()[0] == archive.SCHEMA_VERSION
    assert conn.execute("PRAGMA application_id").fetchone()[0] == archive.APPLICATION_ID
    rows = archive.contacts(conn)
    assert [(r["seq"], r["utc_us"], r["void"], r["image"], r["log_id"]) for r in rows] == \
        [(0, T0, True, None, archive.LEGACY_LOG)]
    # every old row belongs to the device's legacy log identity
    assert [(g["device_id"], g["log_id"], g["last_seq"]) for g in archive.logs(conn)] == [("T-0042", 0, 1)]
    assert [tuple(r) for r in conn.execute("SELECT log_id, seq FROM events")] == [(0, 2)]
    # the newest tables accept rows and enforce their foreign keys
    sid = archive.refresh_sessions(conn)[0]["session_id"]
    with pytest.raises(sqlite3.IntegrityError):
        conn.execute("INSERT INTO fixes (session_id, computed_us, utc_us, lat_deg, lon_deg, result) "
                     "VALUES (?, 0, 0, 0, 0, '{}')", (sid + 99,))
    with pytest.raises(sqlite3.IntegrityError):
        conn.execute("INSERT INTO log_records (device_id, log_id, seq, raw) VALUES ('T-0042', 77, 1, x'00')")
    # a log with an identity takes the same seq again without touching the legacy row
    with archive.transaction(conn):
        archive.ensure_log(conn, "T-0042", 0x1234ABCD, 1)
        assert archive.store_records(conn, "T-0042", [contact(0, 90)], 0x1234ABCD) == (1, 0)
    assert sorted((r["log_id"], r["seq"]) for r in archive.contacts(conn)) == [(0, 0), (0x1234ABCD, 0)]
    assert archive.integrity_ok(conn)


def test_a_legacy_record_seen_again_under_an_identity_is_not_stored_twice(tmp_path):
    """A timer upgraded from protocol 1 keeps its unacknowledged records under a new log identity
    (device/log.py upgrades a version-1 header); records the archive already holds from before
    identities move to that identity instead of being stored twice."""
    conn = fresh(tmp_path)
    with archive.transaction(conn):
        archive.ensure_device(conn, "T-5")
        archive.store_records(conn, "T-5", [contact(s, 10 * s) for s in range(1, 6)])         # legacy
    with archive.transaction(conn):
        archive.ensure_log(conn, "T-5", 0xCAFE, 4)
        new, dup = archive.store_records(conn, "T-5", [contact(s, 10 * s) for s in (4, 5, 6)], 0xCAFE)
    assert (new, dup) == (1, 2)
    assert sorted((r["log_id"], r["seq"]) for r in archive.contacts(conn)) == \
        [(0, 1), (0, 2), (0, 3), (0xCAFE, 4), (0xCAFE, 5), (0xCAFE, 6)]
    with archive.transaction(conn):                    # a restarted log whose seq 1 is another contact
        archive.ensure_log(conn, "T-5", 0xBEEF, 1)
        assert archive.store_records(conn, "T-5", [contact(1, 999)], 0xBEEF) == (1, 0)
    assert len(archive.contacts(conn)) == 7


def test_refuses_newer_schema_and_non_sqlite(tmp_path):
    path = str(tmp_path / "future.sqlite3")
    conn = sqlite3.connect(path)
    conn.execute("PRAGMA user_version = 99")
    conn.close()
    with pytest.raises(archive.ArchiveError, match="newer"):
        archive.connect(path)
    junk = tmp_path / "junk.sqlite3"
    junk.write_bytes(b"not a database at all, just text\n" * 4)
    with pytest.raises(archive.ArchiveError, match="not a limbclock archive"):
        archive.connect(str(junk))
    with pytest.raises(archive.ArchiveError, match="not a limbclock archive"):
        archive.connect(str(junk), mode="read")
    other = str(tmp_path / "other.sqlite3")
    conn = sqlite3.connect(other)
    conn.execute("CREATE TABLE devices (x)")                 # a name we use, another program's table
    conn.commit()
    conn.close()
    for mode in ("write", "read"):
        with pytest.raises(archive.ArchiveError, match="another program's SQLite database"):
            archive.connect(other, mode=mode)
    empty = tmp_path / "empty.sqlite3"
    empty.write_bytes(b"")
    with pytest.raises(archive.ArchiveError, match="0 bytes"):
        archive.connect(str(empty))
    assert empty.read_bytes() == b""                          # refused, not touched
    conn = archive.connect(str(empty), new=True)
    assert conn.execute("PRAGMA application_id").fetchone()[0] == archive.APPLICATION_ID


def test_store_is_idempotent_and_conflicts_are_errors(tmp_path):
    conn = fresh(tmp_path)
    recs = [contact(0, 0), contact(1, 60), {"seq": 2, "kind": "void", "voided_seq": 1, "utc_us": T0 + 61000000},
            {"seq": 3, "kind": "session-start", "utc_us": T0 + 120000000, "session": 2}]
    with archive.transaction(conn):
        archive.ensure_device(conn, "T-0042", protocol=1)
        assert archive.store_records(conn, "T-0042", recs) == (4, 0)
    with archive.transaction(conn):
        assert archive.store_records(conn, "T-0042", recs) == (0, 4)
    assert archive.last_seq(conn, "T-0042") == 3
    rows = archive.contacts(conn)
    assert [(r["seq"], r["void"]) for r in rows] == [(0, False), (1, True)]
    changed = dict(recs[0], utc_us=recs[0]["utc_us"] + 1)
    with pytest.raises(archive.ArchiveError, match="seq 0: the archive holds a different record"):
        with archive.transaction(conn):
            archive.store_records(conn, "T-0042", [contact(4, 200), changed])
    # the failed batch left nothing behind
    assert archive.last_seq(conn, "T-0042") == 3
    assert len(archive.contacts(conn)) == 2


@pytest.mark.parametrize("bad, msg", [
    ({"kind": "contact"}, "seq must be"),
    ({"seq": 1, "kind": "contact", "utc_us": T0, "body": "mars", "limb": "lower", "quality": "locked",
      "uncertainty_us": 1}, "body must be"),
    ({"seq": 1, "kind": "contact", "utc_us": T0, "body": "sun", "limb": "side", "quality": "locked",
      "uncertainty_us": 1}, "limb must be"),
    ({"seq": 1, "kind": "contact", "utc_us": T0, "body": "sun", "limb": "upper", "quality": "locked",
      "uncertainty_us": -3}, "uncertainty_us"),
    ({"seq": 4, "kind": "void", "voided_seq": 4}, "earlier seq"),
])
def test_bad_records_name_the_field(bad, msg):
    with pytest.raises(archive.ArchiveError, match=msg):
        archive.normalize_record(bad)


@settings(max_examples=40, deadline=None)
@given(st.lists(st.integers(min_value=0, max_value=30), min_size=1, max_size=30))
def test_any_replay_order_gives_the_same_archive(order):
    """However batches are replayed (duplicates, any order), the archive holds each seq once."""
    conn = archive.connect(":memory:")
    pool = [contact(i, 30 * i, session=1 + i // 10) for i in range(31)]
    with archive.transaction(conn):
        archive.ensure_device(conn, "T-7")
        new, dup = archive.store_records(conn, "T-7", [pool[i] for i in order])
    assert new == len(set(order)) and dup == len(order) - len(set(order))
    assert sorted(r["seq"] for r in archive.contacts(conn)) == sorted(set(order))
    assert archive.last_seq(conn, "T-7") == max(order)


def test_sessions_by_number_and_by_gap(tmp_path):
    conn = fresh(tmp_path)
    recs = [contact(0, 0, 5), contact(1, 300, 5), contact(2, 5000, 6),
            dict(contact(3, 90000, None)), dict(contact(4, 90100, None)),
            dict(contact(5, 90100 + archive.DEFAULT_GAP_S + 1, None))]
    with archive.transaction(conn):
        archive.ensure_device(conn, "T-1")
        archive.store_records(conn, "T-1", recs)
    rows = archive.refresh_sessions(conn)
    assert [(r["session_no"], r["contacts"]) for r in rows] == [(5, 2), (6, 1), (None, 2), (None, 1)]
    # refreshing again keeps the same ids
    assert [r["session_id"] for r in archive.refresh_sessions(conn)] == [r["session_id"] for r in rows]


def test_session_document_round_trip(tmp_path):
    conn = fresh(tmp_path)
    with archive.transaction(conn):
        archive.ensure_device(conn, "T-1")
        archive.store_records(conn, "T-1", [contact(0, 0), contact(1, 400, limb="upper"),
                                            {"seq": 2, "kind": "void", "voided_seq": 0, "utc_us": T0 + 1}])
    sid = archive.refresh_sessions(conn)[0]["session_id"]
    with pytest.raises(archive.ArchiveError, match="observer, track, instrument not attached"):
        archive.session_document(conn, sid)
    with archive.transaction(conn):
        iid = archive.add_instrument(conn, {"format": "limbclock-instrument/1", "name": "stack A",
                                            "images": [{"id": "i01", "deviation_deg": 5.4},
                                                       {"id": "i02", "deviation_deg": 8.1, "sigma_arcmin": 0.4}]})
    archive.attach_conditions(conn, sid, observer={"eye_height_m": 2.4, "temperature_c": 17.0,
                                                   "pressure_hpa": 1008.0},
                              track={"utc": "2031-05-14T06:00:00Z", "lat_deg": 41.2, "lon_deg": 9.7,
                                     "course_deg": 135.0, "speed_kn": 6.0, "known": False},
                              instrument_id=iid)
    archive.set_image_labels(conn, "T-1", {1: "i02"})
    doc = json.loads(archive.session_text(conn, sid))
    # limbclock-session/1 (DEVELOPERS.md): format, observer, instrument.images, track, contacts[utc, body, limb, image]
    assert doc["format"] == "limbclock-session/1"
    assert doc["instrument"]["images"][1] == {"id": "i02", "deviation_deg": 8.1, "sigma_arcmin": 0.4}
    assert [(c["utc"], c["limb"], c["image"], c.get("void", False), c["sigma_s"]) for c in doc["contacts"]] == [
        ("2031-05-14T07:00:00.000000Z", "lower", None, True, 0.0004),      # voided: kept, marked
        ("2031-05-14T07:06:40.000000Z", "upper", "i02", False, 0.0004)]
    assert timescale.parse_utc(doc["contacts"][1]["utc"]) == T0 + 400000000
    # the engine's reader accepts it (the limbclock-session/1 contract, DEVELOPERS.md)
    from engine.session import parse_session
    s = parse_session(json.dumps(doc))
    assert [c.void for c in s.contacts] == [True, False] and s.contacts[1].image == "i02"
    assert s.observer.eye_height_m == 2.4 and s.track.course_deg == 135.0


def test_store_fix_and_read_back(tmp_path):
    conn = fresh(tmp_path)
    with archive.transaction(conn):
        archive.ensure_device(conn, "T-1")
        archive.store_records(conn, "T-1", [contact(0, 0)])
    sid = archive.refresh_sessions(conn)[0]["session_id"]
    res = {"format": "limbclock-fix/1", "utc": "2031-05-14T07:30:00.000Z", "lat_deg": 41.1, "lon_deg": 9.8,
           "ellipse_95": {"major_nm": 2.5, "minor_nm": 1.0, "major_axis_deg": 120.0}}
    fid = archive.store_fix(conn, sid, res)
    got = archive.fixes(conn, sid)
    assert [f["fix_id"] for f in got] == [fid]
    assert got[0]["utc_us"] == T0 + 1800000000 and got[0]["result"] == res
    assert archive.sessions(conn)[0]["fixes"] == 1


def test_default_path_follows_xdg(monkeypatch, tmp_path):
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path))
    assert archive.default_path() == str(tmp_path / "limbclock" / "archive.sqlite3")
    monkeypatch.delenv("XDG_DATA_HOME")
    monkeypatch.setenv("HOME", str(tmp_path / "home"))
    assert archive.default_path() == str(tmp_path / "home" / ".local" / "share" / "limbclock" / "archive.sqlite3")


def test_two_programs_creating_one_archive(tmp_path):
    """Both see a new file; the version is read inside the write lock, so only one creates it."""
    import threading
    path = str(tmp_path / "race.sqlite3")
    errors = []

    def open_it():
        try:
            archive.connect(path).close()
        except Exception as exc:  # collected for the assertion
            errors.append(exc)
    threads = [threading.Thread(target=open_it) for _ in range(6)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert errors == []
    conn = archive.connect(path)
    assert conn.execute("PRAGMA user_version").fetchone()[0] == archive.SCHEMA_VERSION and archive.integrity_ok(conn)


def small_archive(path):
    conn = archive.connect(path)
    with archive.transaction(conn):
        archive.ensure_device(conn, "T-1")
        archive.ensure_log(conn, "T-1", 0xA1, 1)
        archive.store_records(conn, "T-1", [contact(s, 60 * s, session=1 + s // 4) for s in range(1, 9)], 0xA1)
    sid = archive.refresh_sessions(conn)[0]["session_id"]
    archive.store_fix(conn, sid, json.loads(FIX_DOC))
    return conn


def test_a_damaged_row_is_named_before_anything_computes_with_it(tmp_path):
    """SQLite columns take any type: a damaged or hand-edited value is refused by name (table,
    key, field) with one line, never turned into arithmetic on text."""
    conn = small_archive(str(tmp_path / "a.sqlite3"))
    conn.execute("UPDATE contacts SET utc_us='12:00' WHERE seq=3")
    with pytest.raises(archive.ArchiveError) as e:
        archive.contacts(conn)
    assert str(e.value).startswith("archive table contacts, device T-1 log 000000a1 seq 3: field utc_us holds "
                                   "'12:00', expected an integer")
    conn.execute("UPDATE contacts SET utc_us=? WHERE seq=3", (T0,))
    conn.execute("UPDATE contacts SET body='mars' WHERE seq=5")
    with pytest.raises(archive.ArchiveError, match="contacts, device T-1 log 000000a1 seq 5: field body holds 'mars'"):
        archive.contacts(conn)
    conn.execute("UPDATE contacts SET body='sun'")
    conn.execute("UPDATE fixes SET lat_deg=123.0")
    with pytest.raises(archive.ArchiveError, match="table fixes, fix_id 1: field lat_deg holds 123.0"):
        archive.fixes(conn)
    conn.execute("UPDATE fixes SET lat_deg=41.5, result='{not json'")
    with pytest.raises(archive.ArchiveError, match="table fixes, fix_id 1: field result"):
        archive.fixes(conn)
    conn.execute("UPDATE fixes SET result=?", (FIX_DOC,))
    conn.execute("UPDATE sessions SET observer='[1, 2]'")
    with pytest.raises(archive.ArchiveError, match="table sessions, session_id 1: field observer"):
        archive.sessions(conn)


def test_quick_check_on_open_refuses_a_damaged_file(tmp_path):
    path = str(tmp_path / "a.sqlite3")
    conn = small_archive(path)
    with archive.transaction(conn):
        archive.store_records(conn, "T-1", [contact(s, 60 * s) for s in range(9, 900)], 0xA1)
    conn.execute("PRAGMA wal_checkpoint(TRUNCATE)")
    conn.close()
    size = os.path.getsize(path)
    with open(path, "r+b") as f:                      # 8 KB of pseudo-random bytes in the middle
        f.seek(size // 2 - 4096)
        f.write(bytes((k * 7919 + 13) % 251 for k in range(8192)))
    raw = sqlite3.connect(path)
    try:                                              # SQLite's own full check agrees it is damaged
        assert raw.execute("PRAGMA integrity_check").fetchone()[0] != "ok"
    except sqlite3.DatabaseError as exc:
        assert "malformed" in str(exc)
    raw.close()
    with pytest.raises(archive.ArchiveDamaged) as e:
        archive.connect(path)
    assert "is damaged (SQLite quick_check" in str(e.value) and "\n" not in str(e.value)


def test_quick_check_on_open_finds_a_damaged_data_page_nothing_else_reads(tmp_path):
    """The last page of the file (rows of the log, read by no query on open) overwritten: the schema
    and the tables' roots are intact, so opening and migrating would go on; only SQLite's quick_check
    (sqlite.org/pragma.html#pragma_quick_check) finds it, and the archive is refused before any write."""
    path = str(tmp_path / "a.sqlite3")
    conn = small_archive(path)
    with archive.transaction(conn):
        archive.store_records(conn, "T-1", [contact(s, 60 * s) for s in range(9, 900)], 0xA1)
    conn.execute("PRAGMA wal_checkpoint(TRUNCATE)")
    conn.close()
    raw = sqlite3.connect(path)
    page = raw.execute("PRAGMA page_size").fetchone()[0]
    raw.close()
    size = os.path.getsize(path)
    assert size // page > 20
    with open(path, "r+b") as f:
        f.seek(size - page)
        f.write(bytes((k * 7919 + 13) % 251 for k in range(page)))
    raw = sqlite3.connect(path)                       # the schema still reads
    assert len(raw.execute("SELECT name FROM sqlite_master WHERE type='table'").fetchall()) >= 10
    raw.close()
    with open(path, "rb") as f:
        before = f.read()
    with pytest.raises(archive.ArchiveDamaged) as e:
        archive.connect(path)
    assert "is damaged (SQLite quick_check" in str(e.value) and "nothing was written" in str(e.value)
    with open(path, "rb") as f:
        assert f.read() == before
    assert not os.path.exists(path + "-wal")


def readonly_runner():
    """A way to run a command with a path on read-only media: a private mount namespace where the
    path is bind-mounted read-only (``unshare``, util-linux), or plain file modes for a user other
    than root (root ignores them).  None when neither works here."""
    if os.geteuid() != 0:
        return "chmod"
    if shutil.which("unshare") is None:
        return None
    probe = subprocess.run(["unshare", "-r", "-m", "sh", "-c", "mount --bind / / 2>/dev/null; "
                            "mount -o remount,ro,bind / / && echo ok"], capture_output=True, text=True)
    return "mount" if probe.stdout.strip().endswith("ok") else None


def run_readonly(kind, target, argv):
    """``python -m host argv`` with ``target`` (a file or a directory) read-only."""
    how = readonly_runner()
    if how is None:
        pytest.skip("no way to make a read-only path here (neither a non-root user nor unshare)")
    cmd = [sys.executable, "-m", "host"] + argv
    if how == "chmod":
        mode = os.stat(target).st_mode
        os.chmod(target, 0o555 if kind == "dir" else 0o444)
        try:
            return subprocess.run(cmd, cwd=ROOT, capture_output=True, text=True, timeout=HANG_GUARD_S)
        finally:
            os.chmod(target, mode)
    script = 'mount --bind "$0" "$0" && mount -o remount,ro,bind "$0" "$0" && shift 0 && exec "$@"'
    return subprocess.run(["unshare", "-r", "-m", "sh", "-c", script, target] + cmd, cwd=ROOT, capture_output=True,
                          text=True, timeout=HANG_GUARD_S)


ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))


@pytest.mark.parametrize("kind", ["file", "dir"])
def test_read_only_archive_exports_and_refuses_sync(tmp_path, kind):
    """A read-only archive (file mode 0444, or a read-only directory / medium): export reads it
    (nothing is written: the file's bytes stay the same), archive fix reduces from it and says it
    did not store the fix, and sync refuses in one line before talking to any timer."""
    folder = tmp_path / "ro"
    folder.mkdir()
    path = str(folder / "a.sqlite3")
    small_archive(path).close()
    before = _bytes(path)
    target = path if kind == "file" else str(folder)
    p = run_readonly(kind, target, ["export", "--db", path, "--json"])
    assert p.returncode == 0, p.stderr
    out = json.loads(p.stdout)
    assert [(c["seq"], c["log_id"]) for c in out["contacts"]] == [(s, "000000a1") for s in range(1, 9)]
    assert out["fixes"][0]["lat_deg"] == 41.5
    q = run_readonly(kind, target, ["sync", "--port", "/dev/limbclock-never-opened", "--db", path])
    lines = q.stderr.strip().splitlines()
    assert q.returncode == 2 and len(lines) == 1 and "cannot be written" in lines[0], q.stderr
    assert "nothing was read from the timer" in lines[0] and "never-opened" not in lines[0]
    r = run_readonly(kind, target, ["session", "--db", path])
    assert r.returncode == 0 and "T-1" in r.stdout, r.stderr
    assert _bytes(path) == before
    assert sorted(os.listdir(str(folder))) == ["a.sqlite3"]


def test_read_only_wal_archive_with_unapplied_transactions(tmp_path):
    """On read-only media a WAL archive whose last transactions sit in its -wal file (the writer
    was killed before a checkpoint) is read with those transactions (from a private copy)."""
    folder = tmp_path / "ro"
    folder.mkdir()
    path = str(folder / "a.sqlite3")
    small_archive(path).close()
    code = ("import os, sys; sys.path.insert(0, %r); from host import archive; c = archive.connect(%r); "
            "c.execute('PRAGMA wal_autocheckpoint=0'); c.execute('BEGIN IMMEDIATE'); "
            "archive.store_records(c, 'T-1', [{'seq': 9, 'kind': 'contact', 'utc_us': %d, 'body': 'moon', "
            "'limb': 'upper', 'session': 3, 'quality': 'locked', 'uncertainty_us': 9}], 0xA1); "
            "c.execute('COMMIT'); os._exit(0)" % (ROOT, path, T0 + 10 ** 9))
    subprocess.run([sys.executable, "-c", code], check=True, timeout=HANG_GUARD_S)
    assert os.path.getsize(path + "-wal") > 0
    for name in ("-shm",):
        if os.path.exists(path + name):
            os.remove(path + name)
    p = run_readonly("dir", str(folder), ["export", "--db", path, "--json"])
    assert p.returncode == 0, p.stderr
    bodies = [(c["seq"], c["body"]) for c in json.loads(p.stdout)["contacts"]]
    assert bodies[-1] == (9, "moon") and len(bodies) == 9


def test_export_opens_read_only_and_writes_nothing(tmp_path):
    path = str(tmp_path / "a.sqlite3")
    conn = small_archive(path)
    conn.execute("DELETE FROM sessions WHERE session_id NOT IN (SELECT session_id FROM fixes)")
    conn.execute("PRAGMA wal_checkpoint(TRUNCATE)")
    conn.close()
    before = _bytes(path)
    snap = archive.connect(path, mode="read")
    assert snap.readonly and len(archive.refresh_sessions(snap)) == 3      # grouped in the snapshot only
    snap.close()
    p = subprocess.run([sys.executable, "-m", "host", "export", "--db", path, "--json"], cwd=ROOT,
                       capture_output=True, text=True, timeout=HANG_GUARD_S)
    assert p.returncode == 0 and len(json.loads(p.stdout)["sessions"]) == 3, p.stderr
    assert _bytes(path) == before
    conn = archive.connect(path)
    assert len(archive.sessions(conn)) == 1


def _bytes(path):
    with open(path, "rb") as f:
        return f.read()


def test_archive_fix_on_a_read_only_archive(tmp_path):
    """``archive fix`` on a read-only archive reduces the session (the same fix as ``limbclock fix`` on
    the session file: vectors/sessions/morning_run.json, contacts from DE421 + ERFA), draws its plots
    (PNG signature, ISO/IEC 15948 section 5.2) and says the fix was not stored; the file is unchanged."""
    with open(os.path.join(ROOT, "vectors", "sessions", "morning_run.json")) as f:
        doc = json.load(f)
    folder = tmp_path / "ro"
    folder.mkdir()
    path = str(folder / "a.sqlite3")
    conn = archive.connect(path)
    recs = [{"seq": k + 1, "kind": "contact", "utc": c["utc"], "body": c["body"], "limb": c["limb"], "session": 1,
             "quality": "locked", "uncertainty_us": 20} for k, c in enumerate(doc["contacts"])]
    with archive.transaction(conn):
        archive.ensure_device(conn, "T-REF")
        archive.ensure_log(conn, "T-REF", 0x5EED, 1)
        archive.store_records(conn, "T-REF", recs, 0x5EED)
        iid = archive.add_instrument(conn, dict(doc["instrument"], format="limbclock-instrument/1"))
    sid = archive.refresh_sessions(conn)[0]["session_id"]
    archive.attach_conditions(conn, sid, doc["observer"], doc["track"], iid)
    archive.set_image_labels(conn, "T-REF", dict((k + 1, c["image"]) for k, c in enumerate(doc["contacts"])))
    conn.execute("PRAGMA wal_checkpoint(TRUNCATE)")
    conn.close()
    before = _bytes(path)
    plots = str(tmp_path / "plots")
    p = run_readonly("dir", str(folder), ["archive", "fix", "--db", path, "--session", str(sid), "--json",
                                          "--plot", plots])
    assert p.returncode == 0, p.stderr
    got = json.loads(p.stdout)
    assert got["stored"] is False and got["fix_id"] is None
    pngs = sorted(os.listdir(plots))
    assert len(pngs) == 2 and all(_bytes(os.path.join(plots, f))[:8] == b"\x89PNG\r\n\x1a\n" for f in pngs)
    assert "read-only" in p.stderr and "not stored" in p.stderr
    ref = subprocess.run([sys.executable, "-m", "host", "fix", os.path.join(ROOT, "vectors", "sessions",
                                                                           "morning_run.json"), "--json"],
                         cwd=ROOT, capture_output=True, text=True, timeout=HANG_GUARD_S)
    want = json.loads(ref.stdout)
    assert abs(got["lat_deg"] - want["lat_deg"]) < 1e-9 and abs(got["lon_deg"] - want["lon_deg"]) < 1e-9
    assert _bytes(path) == before
