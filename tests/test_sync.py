"""Sync from the virtual timer into the archive: through a real pseudo-terminal with link
faults, across a pulled cable, and with the sync process killed at random moments.

The outside reference here is the timer's own log (``device.log``, read straight from
its store before any sync): the archive must end holding exactly those records, each
once, and SQLite's ``PRAGMA integrity_check`` / ``foreign_key_check`` must pass
(sqlite.org/pragma.html).  Ordering "commit, then acknowledge" is the contract under
test (host/sync.py docstring).
"""
import os
import random
import signal
import subprocess
import sys
import time

import pytest

from device.log import KIND_NAMES
from device.sim import VirtualTimer
from engine import timescale
from host import archive, sync
from host.timer_client import NoAnswer, TimerClient, TimerError, VersionMismatch

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
T0 = timescale.parse_utc("2031-05-14T07:00:00Z")


def presses(n, step_s=4, moon_every=0):
    out = []
    for k in range(n):
        body = "moon" if moon_every and k % moon_every == moon_every - 1 else "sun"
        out.append((T0 + k * step_s * 1000000, body, "lower"))
    return out


def device_records(vt):
    """Every record on the timer's log (not yet acknowledged), straight from its store."""
    log = vt.fw.log
    return list(log.records(log.first_seq))


def archived(conn, device_id):
    rows = conn.execute("SELECT seq FROM contacts WHERE device_id=? UNION ALL SELECT seq FROM voids WHERE "
                        "device_id=? UNION ALL SELECT seq FROM events WHERE device_id=?",
                        (device_id, device_id, device_id)).fetchall()
    return sorted(r[0] for r in rows)


def check_same(conn, vt, recs):
    dev = vt.device_id
    assert archived(conn, dev) == [r.seq for r in recs]           # each once, none missing
    by_seq = dict((c["seq"], c) for c in archive.contacts(conn, dev))
    for r in recs:
        if KIND_NAMES[r.kind] == "contact":
            c = by_seq[r.seq]
            assert (c["utc_us"], c["body"], c["limb"], c["uncertainty_us"]) == \
                (r.utc_us, ("sun", "moon")[r.body], ("lower", "upper")[r.limb], r.uncertainty_us)
    assert archive.integrity_ok(conn)


def committed(db, device_id):
    """Highest seq committed for the device, read without taking any lock (-1: nothing yet)."""
    import sqlite3
    if not os.path.exists(db):
        return -1
    try:
        conn = sqlite3.connect("file:%s?mode=ro" % db, uri=True, timeout=1.0)
        try:
            row = conn.execute("SELECT last_seq FROM devices WHERE device_id=?", (device_id,)).fetchone()
        finally:
            conn.close()
    except sqlite3.DatabaseError:          # not created yet
        return -1
    return -1 if row is None else row[0]


def test_sync_over_pty_with_link_faults(tmp_path):
    vt = VirtualTimer(contacts=presses(60, moon_every=7), link_faults=0.001, seed=3)
    vt.run_contacts()
    recs = device_records(vt)
    assert len(recs) >= 60
    port = vt.start()
    try:
        db = str(tmp_path / "a.sqlite3")
        first = sync.sync_port(port, db, progress=False, timeout=0.1)
        again = sync.sync_port(port, db, progress=False, timeout=0.1)
    finally:
        vt.stop()
    assert first["new"] == len(recs) and first["device"] == vt.device_id
    assert again == dict(again, new=0, duplicates=0)
    conn = archive.connect(db)
    check_same(conn, vt, recs)
    # everything committed was acknowledged: the timer may reclaim all of it
    assert vt.fw.log.confirmed_seq == recs[-1].seq == archive.last_seq(conn, vt.device_id)


class CutCable(object):
    """A transport that dies for good after ``limit`` bytes were read (the cable is pulled)."""

    def __init__(self, inner, limit):
        self.inner = inner
        self.left = limit

    def __getattr__(self, name):
        return getattr(self.inner, name)

    def read(self, n=1):
        if self.left <= 0:
            raise OSError("device disconnected")
        data = self.inner.read(n)
        self.left -= len(data)
        return data


def test_pulled_cable_then_resync_gets_exactly_the_rest(tmp_path):
    vt = VirtualTimer(contacts=presses(300))
    vt.run_contacts()
    recs = device_records(vt)
    conn = archive.connect(str(tmp_path / "a.sqlite3"))
    with pytest.raises(OSError, match="went away"):
        sync.sync(TimerClient(CutCable(vt.loopback(), 3000)), conn, progress=False)
    part = archive.last_seq(conn, vt.device_id)
    assert 0 < part < recs[-1].seq
    assert archived(conn, vt.device_id) == [r.seq for r in recs if r.seq <= part]   # whole batches only
    # a noisy reconnection that also loses bursts mid-frame (the loopback's own cable fault)
    lb = vt.loopback(faults=0.002)
    lb.disconnect_after = 2000
    res = sync.sync(TimerClient(lb, timeout=0.2, retries=12), conn, progress=False)
    assert res["new"] == recs[-1].seq - part and res["duplicates"] == 0
    check_same(conn, vt, recs)


def test_progress_bar_on_long_transfers(tmp_path):
    import io
    vt = VirtualTimer(contacts=presses(260))
    vt.run_contacts()
    err = io.StringIO()
    conn = archive.connect(str(tmp_path / "a.sqlite3"))
    res = sync.sync(TimerClient(vt.loopback()), conn, progress=True, stream=err)
    text = err.getvalue()
    assert res["new"] >= 260
    assert text.startswith("\rsync %s [" % vt.device_id) and text.endswith("/s\n") and text.count("\r") >= 5
    assert "] %d/%d records" % (res["new"], res["new"]) in text


def test_version_mismatch_and_silence(monkeypatch, tmp_path):
    import device.protocol
    vt = VirtualTimer(contacts=presses(3))
    monkeypatch.setattr(device.protocol, "PROTOCOL_VERSION", 99)
    conn = archive.connect(str(tmp_path / "a.sqlite3"))
    with pytest.raises(VersionMismatch, match="protocol version 99"):
        sync.sync(TimerClient(vt.loopback()), conn)
    assert archive.devices(conn) == []
    master, slave = os.openpty()          # a port where nobody answers
    try:
        with pytest.raises(NoAnswer, match="no answer from the timer"):
            sync.sync_port(os.ttyname(slave), str(tmp_path / "b.sqlite3"), timeout=0.05, retries=1)
    finally:
        os.close(master)
        os.close(slave)


def test_reset_timer_is_refused(tmp_path):
    """A timer whose log restarted below what the archive holds is not silently mixed in."""
    conn = archive.connect(str(tmp_path / "a.sqlite3"))
    vt = VirtualTimer(contacts=presses(40))
    vt.run_contacts()
    sync.sync(TimerClient(vt.loopback()), conn)
    fresh = VirtualTimer(contacts=presses(5))      # same id, log starting again at 1
    fresh.run_contacts()
    with pytest.raises(sync.SyncError, match="was the timer reset"):
        sync.sync(TimerClient(fresh.loopback()), conn)


def test_push_instrument_is_verified(tmp_path):
    vt = VirtualTimer(contacts=presses(2))
    doc = (b'{"format": "limbclock-instrument/1", "name": "t", "images": '
           b'[{"id": "i01", "deviation_deg": 5.7}, {"id": "i02", "deviation_deg": 8.8}]}')
    client = TimerClient(vt.loopback())
    res = sync.push(client, "instrument", doc)
    import binascii
    assert res["verified"] and res["size"] == len(doc) and res["crc32"] == "%08x" % binascii.crc32(doc)
    assert client.file_info("instrument")["crc32"] == binascii.crc32(doc)
    with pytest.raises(ValueError, match="format"):
        sync.push(client, "instrument", b'{"format": "something-else/1"}')
    with open(os.path.join(ROOT, "engine", "data", "2031.lca"), "rb") as f:
        lca = f.read()
    res = sync.push(client, "almanac", lca)
    assert res["size"] == len(lca) and client.file_info("almanac")["crc32"] == binascii.crc32(lca)
    with pytest.raises(ValueError):
        sync.push(client, "almanac", lca[:-1] + bytes((lca[-1] ^ 1,)))     # its own CRC-32 fails
    track = b'{"track": {"utc": "2031-05-14T06:00:00Z", "lat_deg": 41.2, "lon_deg": -9.7, "course_deg": 135, ' \
            b'"speed_kn": 6}, "observer": {"eye_height_m": 2.5}}'
    res = sync.push(client, "track", track)
    assert res["verified"] and client.file_info("track")["size"] == res["size"]
    with pytest.raises(ValueError, match="lat_deg"):
        sync.push(client, "track", b'{"format": "limbclock-track/1", "utc": "2031-05-14T06:00:00Z", '
                                   b'"lat_deg": 141.2, "lon_deg": -9.7, "observer": {"eye_height_m": 2.5}}')


def test_killed_sync_loses_and_duplicates_nothing(tmp_path):
    """Kill ``limbclock sync`` (SIGKILL) at seeded random moments, then sync to the end."""
    vt = VirtualTimer(contacts=presses(1500, step_s=2))
    vt.run_contacts()
    recs = device_records(vt)
    port = vt.start()
    db = str(tmp_path / "a.sqlite3")
    rng = random.Random(1234)
    cmd = [sys.executable, "-m", "host", "sync", "--port", port, "--db", db, "--no-progress", "--timeout", "0.3",
           "--batch", "4"]
    mid_transfer = 0
    try:
        for _ in range(10):
            held = committed(db, vt.device_id)
            proc = subprocess.Popen(cmd, cwd=ROOT, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
            if rng.random() < 0.3:
                time.sleep(rng.uniform(0.0, 0.3))               # early: start-up, handshake, first batch
            else:                                               # or once the archive has grown a little
                target = held + rng.randint(1, 200)
                deadline = time.time() + 20
                while proc.poll() is None and committed(db, vt.device_id) < target and time.time() < deadline:
                    time.sleep(0.002)
            killed = proc.poll() is None
            if killed:
                proc.send_signal(signal.SIGKILL)
            proc.wait(10)
            if os.path.exists(db):
                conn = archive.connect(db)
                got = archived(conn, vt.device_id)
                assert got == list(range(recs[0].seq, recs[0].seq + len(got)))   # a prefix, each once
                assert archive.integrity_ok(conn)
                conn.close()
                mid_transfer += killed and 0 < len(got) < len(recs)
        out = subprocess.run(cmd + ["--json"], cwd=ROOT, capture_output=True, text=True, timeout=60)
        assert out.returncode == 0, out.stderr
    finally:
        vt.stop()
    assert mid_transfer >= 3
    conn = archive.connect(db)
    check_same(conn, vt, recs)
    assert vt.fw.log.confirmed_seq == recs[-1].seq


def test_voids_and_sessions_from_the_button(tmp_path):
    """Gestures on the timer (device/button.py: hold 1-3 s voids the last contact, 5-8 s starts a
    session) arrive as their own records: the voided contact is kept and marked, sessions split."""
    cs = presses(6, step_s=60)
    vt = VirtualTimer(contacts=cs)
    vt.world.press(cs[2][0] + 20000000, 1500000)           # void the third contact
    vt.world.press(cs[3][0] + 20000000, 6000000)           # a new session before the fifth
    vt.run_contacts()
    recs = device_records(vt)
    kinds = [KIND_NAMES[r.kind] for r in recs]
    assert kinds.count("contact") == 6 and kinds.count("void") == 1
    conn = archive.connect(str(tmp_path / "a.sqlite3"))
    res = sync.sync(TimerClient(vt.loopback()), conn)
    assert res["new"] == len(recs)
    check_same(conn, vt, recs)
    rows = archive.contacts(conn)
    assert [r["void"] for r in rows] == [False, False, True, False, False, False]
    groups = archive.refresh_sessions(conn)
    assert [g["contacts"] for g in groups] == [3, 2]                 # contacts that count (not voided)
    assert len(archive.session_contacts(conn, groups[0])) == 3
    assert archive.session_contacts(conn, groups[0], include_voided=True)[2]["void"] is True


def test_pty_disconnect_mid_transfer_then_resync(tmp_path):
    """The timer goes away mid-transfer (its pseudo-terminal closes); back on a new port with its
    stored log, the next sync fetches exactly the rest."""
    import threading
    state = str(tmp_path / "state")
    vt = VirtualTimer(contacts=presses(600), state_dir=state)
    vt.run_contacts()
    recs = device_records(vt)
    port = vt.start()
    db = str(tmp_path / "a.sqlite3")
    errors = []

    def pull():
        try:
            sync.sync_port(port, db, progress=False, timeout=0.2, retries=2, batch=4)
        except OSError as exc:
            errors.append(exc)
    th = threading.Thread(target=pull)
    th.start()
    deadline = time.time() + 20
    while time.time() < deadline:         # pull the plug once a hundred records are in
        if os.path.exists(db):
            watch = archive.connect(db)
            got = archive.last_seq(watch, vt.device_id) if archive.devices(watch) else -1
            watch.close()
            if got >= 100:
                break
        time.sleep(0.01)
    vt.stop()
    th.join(20)
    assert len(errors) == 1 and isinstance(errors[0], TimerError), errors     # went away / cannot write
    conn = archive.connect(db)
    part = archive.last_seq(conn, vt.device_id)
    assert 100 <= part < recs[-1].seq
    back = VirtualTimer(contacts=[], state_dir=state, start_us=vt.now_us())
    # acknowledged <= committed: at most the batch in flight was committed but not yet acknowledged
    assert part - 4 <= back.fw.log.confirmed_seq <= part
    port = back.start()
    try:
        res = sync.sync_port(port, db, progress=False, timeout=0.2)
    finally:
        back.stop()
    assert res["new"] == recs[-1].seq - part and res["duplicates"] == 0
    check_same(conn, vt, recs)


def test_second_archive_is_told_what_the_timer_no_longer_has(tmp_path):
    """Two archives (two laptops): the second sync finds the records confirmed to the first
    reclaimed on the timer, says how many, and takes only what came after."""
    vt = VirtualTimer(contacts=presses(30, step_s=60))
    a = archive.connect(str(tmp_path / "a.sqlite3"))
    b = archive.connect(str(tmp_path / "b.sqlite3"))
    vt.advance_to(T0 + 15 * 60 * 1000000)               # half the presses done
    first = sync.sync(TimerClient(vt.loopback()), a)
    vt.run_contacts()
    second = sync.sync(TimerClient(vt.loopback()), b)
    assert first["new"] > 0 and second["not_on_timer"] == first["last_seq"]
    assert second["new"] + first["new"] == len(archived(a, vt.device_id)) + len(archived(b, vt.device_id))
    assert archived(b, vt.device_id)[0] == first["last_seq"] + 1
