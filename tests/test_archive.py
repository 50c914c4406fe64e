"""The SQLite archive: schema migrations from every earlier version, idempotent storage,
voids, session grouping, the session document.

Outside references: SQLite's own ``PRAGMA integrity_check`` / ``foreign_key_check``
and its documented WAL journal mode (sqlite.org/wal.html, sqlite.org/pragma.html);
the session document is validated against the ``limbclock-session/1`` keys (DEVELOPERS.md).
"""
import json
import sqlite3

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from engine import timescale
from host import archive

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


@pytest.mark.parametrize("start", list(range(1, archive.SCHEMA_VERSION)))
def test_migrates_from_every_earlier_version(tmp_path, start):
    path = str(tmp_path / "old.sqlite3")
    conn = archive.connect(path, target=start)
    assert conn.execute("PRAGMA user_version").fetchone()[0] == start
    # data written by the old schema (v1 tables exist in every version)
    conn.execute("INSERT INTO devices (device_id, protocol, last_seq) VALUES ('T-0042', 1, 1)")
    conn.execute("INSERT INTO contacts (device_id, seq, utc_us, body, limb, session_no, quality, uncertainty_us) "
                 "VALUES ('T-0042', 0, ?, 'sun', 'lower', 3, 'locked', 500)", (T0,))
    conn.execute("INSERT INTO voids (device_id, seq, voided_seq, utc_us) VALUES ('T-0042', 1, 0, ?)", (T0 + 5,))
    if start >= 2:      # a session with conditions and a fix, as version 2 stored them
        conn.execute("INSERT INTO instruments (name, sha256, document, added_us) VALUES ('s', 'x', "
                     "'{\"images\": [{\"id\": \"i01\", \"deviation_deg\": 5.7}]}', 0)")
        conn.execute("INSERT INTO sessions (device_id, session_no, first_us, last_us, observer, track, "
                     "instrument_id) VALUES ('T-0042', 3, ?, ?, '{\"eye_height_m\": 2.0}', '{}', 1)", (T0, T0))
        conn.execute("INSERT INTO fixes (session_id, computed_us, utc_us, lat_deg, lon_deg, result) "
                     "VALUES (1, 0, ?, 41.5, -9.5, '{\"lat_deg\": 41.5}')", (T0,))
    conn.close()
    conn = archive.connect(path)
    if start >= 2:
        assert [(f["lat_deg"], f["result"]) for f in archive.fixes(conn)] == [(41.5, {"lat_deg": 41.5})]
        assert archive.get_instrument(conn, 1)["images"][0]["deviation_deg"] == 5.7
    assert conn.execute("PRAGMA user_version").fetchone()[0] == archive.SCHEMA_VERSION
    rows = archive.contacts(conn)
    assert [(r["seq"], r["utc_us"], r["void"], r["image"]) for r in rows] == [(0, T0, True, None)]
    # the newest tables accept rows and enforce their foreign keys
    sid = archive.refresh_sessions(conn)[0]["session_id"]
    with pytest.raises(sqlite3.IntegrityError):
        conn.execute("INSERT INTO fixes (session_id, computed_us, utc_us, lat_deg, lon_deg, result) "
                     "VALUES (?, 0, 0, 0, 0, '{}')", (sid + 99,))
    assert archive.integrity_ok(conn)


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
