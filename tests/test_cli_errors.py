"""Bad input gives one clear line on stderr and exit code 2 (``python -m host`` as a subprocess):
a missing port, a busy port, a silent port, a corrupt session file, an unknown or malformed
instrument file, a file that is not an archive, a missing archive.

Reference: the project's command-line contract (DEVELOPERS.md, "The command line": one line
and exit code 2, the traceback only with --debug); POSIX exit status 2 for usage/input errors
is common practice.
"""
import os
import subprocess
import sys

import pytest

from engine import timescale
from host import archive
from waiting import HANG_GUARD_S

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))


def limbclock(*args, timeout=HANG_GUARD_S):
    p = subprocess.run([sys.executable, "-m", "host"] + list(args), cwd=ROOT, capture_output=True, text=True,
                       timeout=timeout)
    return p.returncode, p.stdout, p.stderr


def one_line_error(rc, err, command, *words):
    assert rc == 2, err
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert lines[0].startswith("limbclock %s: error: " % command)
    assert "Traceback" not in err
    for w in words:
        assert w in lines[0], lines[0]
    return lines[0]


def test_missing_port(tmp_path):
    rc, _, err = limbclock("sync", "--port", "/dev/no-such-timer", "--db", str(tmp_path / "a.sqlite3"))
    one_line_error(rc, err, "sync", "cannot open serial port /dev/no-such-timer")


def test_busy_port(tmp_path):
    import serial
    master, slave = os.openpty()
    name = os.ttyname(slave)
    holder = serial.Serial(name, 115200, exclusive=True)
    try:
        rc, _, err = limbclock("sync", "--port", name, "--db", str(tmp_path / "a.sqlite3"))
    finally:
        holder.close()
        os.close(master)
        os.close(slave)
    one_line_error(rc, err, "sync", "busy")


def test_silent_port(tmp_path):
    master, slave = os.openpty()
    try:
        rc, _, err = limbclock("sync", "--port", os.ttyname(slave), "--db", str(tmp_path / "a.sqlite3"),
                               "--timeout", "0.05")
    finally:
        os.close(master)
        os.close(slave)
    one_line_error(rc, err, "sync", "no answer from the timer")


@pytest.mark.parametrize("text, words", [
    ('{"format": "limbclock-session/1", "observer": {"eye_height_m": 2.0}', ("not valid JSON",)),
    ('{"format": "limbclock-session/1", "observer": {"eye_height_m": 2.0}, "instrument": {"images": '
     '[{"id": "i01", "deviation_deg": 5.7}]}, "track": {"utc": "2031-05-14T06:00:00Z", "lat_deg": 41.0, '
     '"lon_deg": -9.0}, "contacts": [{"utc": "14 May 2031 07:00", "body": "sun", "limb": "lower"}]}',
     ("contacts[0].utc",)),
])
def test_corrupt_session_file(tmp_path, text, words):
    path = tmp_path / "s.json"
    path.write_text(text)
    rc, _, err = limbclock("fix", str(path))
    line = one_line_error(rc, err, "fix")
    assert any(w in line for w in words) or "JSON" in line, line


@pytest.fixture
def db_with_session(tmp_path):
    path = str(tmp_path / "a.sqlite3")
    conn = archive.connect(path)
    t0 = timescale.parse_utc("2031-05-14T07:00:00Z")
    with archive.transaction(conn):
        archive.ensure_device(conn, "T-1")
        archive.store_records(conn, "T-1", [{"seq": 1, "kind": "contact", "utc_us": t0, "body": "sun",
                                             "limb": "lower", "session": 1, "quality": "locked",
                                             "uncertainty_us": 20}])
    sid = archive.refresh_sessions(conn)[0]["session_id"]
    conn.close()
    return path, sid


def test_unknown_instrument_file(tmp_path, db_with_session):
    db, sid = db_with_session
    rc, _, err = limbclock("session", "--db", db, "--session", str(sid), "--eye-height", "2",
                           "--instrument", str(tmp_path / "nowhere.json"))
    one_line_error(rc, err, "session", "nowhere.json", "No such file")
    bad = tmp_path / "other.json"
    bad.write_text('{"format": "someone-elses-instrument/3", "images": []}')
    rc, _, err = limbclock("session", "--db", db, "--session", str(sid), "--instrument", str(bad))
    one_line_error(rc, err, "session", "format")


def test_bad_track_and_unknown_session(db_with_session):
    db, sid = db_with_session
    rc, _, err = limbclock("session", "--db", db, "--session", str(sid), "--track", "2031-05-14T06:00:00Z,95,3,0,0")
    one_line_error(rc, err, "session", "latitude")
    rc, _, err = limbclock("archive", "fix", "--db", db, "--session", str(sid + 40))
    one_line_error(rc, err, "archive", "no such session")
    rc, _, err = limbclock("archive", "fix", "--db", db, "--session", str(sid))
    one_line_error(rc, err, "archive", "not attached")


def test_not_an_archive_and_missing_archive(tmp_path):
    junk = tmp_path / "junk.sqlite3"
    junk.write_bytes(b"this is a shopping list, not a database\n" * 10)
    rc, _, err = limbclock("export", "--db", str(junk), "--json")
    one_line_error(rc, err, "export", "not a limbclock archive")
    rc, _, err = limbclock("session", "--db", str(tmp_path / "none.sqlite3"))
    one_line_error(rc, err, "session", "no archive at")


def test_push_refuses_a_bad_file_before_sending(tmp_path):
    bad = tmp_path / "inst.json"
    bad.write_text('{"format": "limbclock-instrument/1", "images": [{"id": "i01"}]}')
    rc, _, err = limbclock("push", "--port", "/dev/no-such-timer", "--instrument", str(bad))
    one_line_error(rc, err, "push", "images[0].deviation_deg")     # the file, not the port, is named


def test_attach_without_a_session(db_with_session):
    db, _ = db_with_session
    rc, _, err = limbclock("session", "--db", db, "--eye-height", "2.5")
    one_line_error(rc, err, "session", "--eye-height: say which session")
