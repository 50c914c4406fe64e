"""Sync from the virtual timer into the archive: through a real pseudo-terminal with link
faults, across a pulled cable, with the sync process killed at random moments, after a log
restart, into a damaged archive, and over links damaging 2 % and 5 % of the bytes.

The outside reference here is the timer's own log (``device.log``, read straight from
its store before any sync): the archive must end holding exactly those records, each
once, with the timer's stamps to the microsecond, and SQLite's ``PRAGMA integrity_check``
/ ``foreign_key_check`` must pass (sqlite.org/pragma.html).  Ordering "commit, read back,
then acknowledge with proof" is the contract under test (host/sync.py docstring).
"""
import json
import os
import random
import signal
import subprocess
import sys

import pytest

from device.log import KIND_NAMES
from device.sim import VirtualTimer
from engine import timescale
from host import archive, sync
from host.timer_client import NoAnswer, TimerClient, TimerError, VersionMismatch
from waiting import HANG_GUARD_S

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


def archived(conn, device_id, log_id=None):
    q = " WHERE device_id=?" + (" AND log_id=?" if log_id is not None else "")
    args = (device_id,) if log_id is None else (device_id, log_id)
    rows = conn.execute("SELECT seq FROM contacts%s UNION ALL SELECT seq FROM voids%s UNION ALL SELECT seq FROM events%s"
                        % (q, q, q), args * 3).fetchall()
    return sorted(r[0] for r in rows)


def check_same(conn, vt, recs, log_id=None):
    """The archive holds exactly ``recs`` (the timer's records of its log) for the timer: each once,
    contacts with the timer's stamp, body, limb and uncertainty, and the 33 bytes as the timer holds them."""
    dev = vt.device_id
    log_id = vt.fw.log.log_id if log_id is None else log_id
    assert archived(conn, dev, log_id) == [r.seq for r in recs]           # each once, none missing
    by_seq = dict((c["seq"], c) for c in archive.contacts(conn, dev) if c["log_id"] == log_id)
    for r in recs:
        if KIND_NAMES[r.kind] == "contact":
            c = by_seq[r.seq]
            assert (c["utc_us"], c["body"], c["limb"], c["uncertainty_us"]) == \
                (r.utc_us, ("sun", "moon")[r.body], ("lower", "upper")[r.limb], r.uncertainty_us)
    raw = dict(conn.execute("SELECT seq, raw FROM log_records WHERE device_id=? AND log_id=?", (dev, log_id)).fetchall())
    assert [raw[r.seq] for r in recs] == [r.pack() for r in recs]
    assert archive.integrity_ok(conn)


@pytest.mark.parametrize("rate", [0.001, 0.02])
def test_sync_over_pty_with_link_faults(tmp_path, rate):
    """Through pyserial and a real pseudo-terminal (the timer in its own thread): the timeouts here
    are generous and never what is checked."""
    vt = VirtualTimer(contacts=presses(60, moon_every=7), link_faults=rate, seed=3)
    vt.run_contacts()
    recs = device_records(vt)
    assert len(recs) >= 60
    port = vt.start()
    try:
        db = str(tmp_path / "a.sqlite3")
        first = sync.sync_port(port, db, progress=False, timeout=1.0)
        again = sync.sync_port(port, db, progress=False, timeout=1.0)
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
    lid = vt.fw.log.log_id
    part = archive.last_seq(conn, vt.device_id, lid)
    assert 0 < part < recs[-1].seq
    assert archived(conn, vt.device_id) == [r.seq for r in recs if r.seq <= part]   # whole batches only
    confirmed = vt.fw.log.confirmed_seq
    assert confirmed <= part                       # never acknowledged beyond what is committed
    # a noisy reconnection that also loses bursts mid-frame (the loopback's own cable fault)
    lb = vt.loopback(faults=0.002)
    lb.disconnect_after = 2000
    res = sync.sync(TimerClient(lb, timeout=0.2, retries=12), conn, progress=False)
    # reading starts at the timer's first held record: what was committed but not yet
    # acknowledged comes back as duplicates (compared, not stored twice)
    assert res["new"] == recs[-1].seq - part and res["duplicates"] == part - confirmed
    check_same(conn, vt, recs)
    assert vt.fw.log.confirmed_seq == recs[-1].seq


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


def press_more(vt, n, step_s=4):
    """Press the button ``n`` more times from a minute after now; run until they are logged."""
    t0 = vt.now_us() + 60 * 1000000
    for k in range(n):
        vt.world.press(t0 + k * step_s * 1000000, vt.press_us)
    vt.advance_to(t0 + n * step_s * 1000000 + 5000000)


def recreate_log(vt):
    """The timer's log file is created again (a reflash, or a damaged header): a new log whose
    sequence numbers start again at 1."""
    for name in vt.base_store.names("log.bin"):      # both heads and every segment: a wiped flash
        vt.base_store.remove(name)
    vt._boot()
    assert vt.fw.log.next_seq == 1


def test_log_restart_with_overlapping_seqs_loses_nothing(tmp_path):
    """Sync 30 contacts; the timer's log is created again; 30 more contacts take seq 1..30 again;
    sync: all 60 are in the archive (two log identities), none was reclaimed on the timer unsynced."""
    conn = archive.connect(str(tmp_path / "a.sqlite3"))
    vt = VirtualTimer(contacts=presses(30))
    vt.run_contacts()
    first_recs = device_records(vt)
    first_log = vt.fw.log.log_id
    res = sync.sync(TimerClient(vt.loopback()), conn, progress=False)
    assert res["new"] == len(first_recs) and res["log_id"] == first_log
    recreate_log(vt)
    press_more(vt, 30)
    second_recs = device_records(vt)
    second_log = vt.fw.log.log_id
    assert second_log != first_log
    assert [r.seq for r in second_recs if r.kind == 1][:3] == [1, 2, 3] or second_recs[0].seq == 1
    overlap = set(r.seq for r in first_recs) & set(r.seq for r in second_recs)
    assert len(overlap) >= 30                                  # the same seqs, other contacts
    res = sync.sync(TimerClient(vt.loopback()), conn, progress=False)
    assert res["new"] == len(second_recs) and res["duplicates"] == 0 and res["log_id"] == second_log
    check_same(conn, vt, first_recs, first_log)
    check_same(conn, vt, second_recs, second_log)
    stamps = sorted(c["utc_us"] for c in archive.contacts(conn))
    assert len(stamps) == 60 == len(set(stamps))
    assert vt.fw.log.confirmed_seq == second_recs[-1].seq        # reclaimed only once archived and proven
    again = sync.sync(TimerClient(vt.loopback()), conn, progress=False)
    assert (again["new"], again["duplicates"]) == (0, 0)
    # two sessions numbered alike in the two logs are two sessions, not one
    groups = archive.refresh_sessions(conn)
    assert sorted(g["contacts"] for g in groups) == [30, 30]


def test_acknowledgement_needs_the_archive_to_hold_the_records(tmp_path, monkeypatch):
    """Between COMMIT and ACK the stored copy of a record changes: a damaged stored record is
    caught by the read-back (nothing acknowledged); a different but well-formed record is caught
    by the timer (proof mismatch): either way the timer keeps every record."""
    from device import log as dlog
    vt = VirtualTimer(contacts=presses(20))
    vt.run_contacts()
    recs = device_records(vt)
    db = str(tmp_path / "a.sqlite3")
    real = archive.store_records

    def tamper(how):
        def store(conn, device_id, records, log_id=0):
            out = real(conn, device_id, records, log_id)
            seq = records[2]["seq"]
            raw = bytearray(records[2]["raw"])
            if how == "flip":
                raw[9] ^= 0x40                                    # a bit of the stamp: its CRC-32 fails
            else:                                                 # a well-formed record, another stamp
                r = dlog.unpack_record(bytes(raw))
                r.utc_us += 1
                raw = bytearray(r.pack())
            conn.execute("UPDATE log_records SET raw=? WHERE device_id=? AND log_id=? AND seq=?",
                         (bytes(raw), device_id, log_id, seq))
            return out
        return store

    monkeypatch.setattr(archive, "store_records", tamper("flip"))
    conn = archive.connect(db)
    with pytest.raises(archive.ArchiveDamaged, match="table log_records, device LC-[0-9A-F]+ log [0-9a-f]{8} seq 3: "
                                                     "field raw"):
        sync.sync(TimerClient(vt.loopback()), conn, progress=False)
    assert vt.fw.log.confirmed_seq == 0 and device_records(vt) == recs
    conn.close()
    db2 = str(tmp_path / "b.sqlite3")
    monkeypatch.setattr(archive, "store_records", tamper("restamp"))
    conn = archive.connect(db2)
    with pytest.raises(sync.SyncError, match="refused the acknowledgement.*the timer keeps them"):
        sync.sync(TimerClient(vt.loopback()), conn, progress=False)
    assert vt.fw.log.confirmed_seq == 0 and device_records(vt) == recs


def damage(path, nbytes=8192, seed=11):
    """Write ``nbytes`` random bytes into the middle of a file (a bad sector, a stray write)."""
    size = os.path.getsize(path)
    rng = random.Random(seed)
    with open(path, "r+b") as f:
        f.seek(size // 2 - nbytes // 2)
        f.write(bytes(rng.randrange(256) for _ in range(nbytes)))


def limbclock(*args, **kw):
    return subprocess.run([sys.executable, "-m", "host"] + list(args), cwd=ROOT, capture_output=True, text=True,
                          timeout=HANG_GUARD_S, **kw)


def test_damaged_archive_is_never_acknowledged(tmp_path):
    """8 KB of random bytes in the middle of a real archive: SQLite's quick_check fails, sync stops
    with one line before asking the timer anything, and the timer keeps all its records."""
    db = str(tmp_path / "a.sqlite3")
    vt = VirtualTimer(contacts=presses(400, step_s=2))
    vt.run_contacts()
    conn = archive.connect(db)
    sync.sync(TimerClient(vt.loopback()), conn, progress=False)
    conn.execute("PRAGMA wal_checkpoint(TRUNCATE)")
    conn.close()
    assert os.path.getsize(db) > 64 * 1024
    press_more(vt, 25)
    held = device_records(vt)
    confirmed = vt.fw.log.confirmed_seq
    damage(db)
    with pytest.raises(archive.ArchiveDamaged, match="is damaged .*nothing acknowledged"):
        archive.connect(db)
    port = vt.start()
    try:
        p = limbclock("sync", "--port", port, "--db", db)
    finally:
        vt.stop()
    lines = p.stderr.strip().splitlines()
    assert p.returncode == 2 and len(lines) == 1 and "is damaged (SQLite quick_check" in lines[0], p.stderr
    assert "nothing acknowledged to the timer" in lines[0] or "nothing was written" in lines[0]
    assert vt.fw.log.confirmed_seq == confirmed and device_records(vt) == held and len(held) >= 25


def first_leaf_page(path, table):
    """(page number, page size) of the first leaf page of ``table`` in the main file (SQLite's
    dbstat table, sqlite.org/dbstat.html)."""
    import sqlite3
    c = sqlite3.connect(path)
    try:
        size = c.execute("PRAGMA page_size").fetchone()[0]
        pages = [r[0] for r in c.execute("SELECT pageno FROM dbstat WHERE name=? AND pagetype='leaf' "
                                         "ORDER BY pageno", (table,))]
    finally:
        c.close()
    assert len(pages) >= 2, "the table %s needs several leaf pages for this test" % table
    return pages[0], size


def test_archive_damaged_during_the_sync_is_not_acknowledged(tmp_path, monkeypatch):
    """The file is damaged after the sync opened it, between a COMMIT and the ACK: the first leaf
    page of the contacts table, written by an earlier sync and read by nothing the sync reads back
    (the proof reads the log_records rows of the range).  Only the read-back's SQLite quick_check,
    through a fresh connection, finds it: nothing is acknowledged; the timer keeps every record."""
    db = str(tmp_path / "a.sqlite3")
    vt = VirtualTimer(contacts=presses(400, step_s=2))
    vt.run_contacts()
    conn = archive.connect(db)
    sync.sync(TimerClient(vt.loopback()), conn, progress=False)
    conn.execute("PRAGMA wal_checkpoint(TRUNCATE)")
    page, size = first_leaf_page(db, "contacts")
    press_more(vt, 40)
    held = device_records(vt)
    confirmed = vt.fw.log.confirmed_seq
    real = archive.store_records

    def store_then_damage(c, device_id, records, log_id=0):
        out = real(c, device_id, records, log_id)
        rng = random.Random(11)
        with open(db, "r+b") as f:                  # the whole page overwritten (a stray write)
            f.seek((page - 1) * size)
            f.write(bytes(rng.randrange(256) for _ in range(size)))
        return out
    monkeypatch.setattr(archive, "store_records", store_then_damage)
    with pytest.raises(archive.ArchiveDamaged, match="is damaged .*NOT acknowledged: the timer keeps them"):
        sync.sync(TimerClient(vt.loopback()), conn, progress=False)
    assert vt.fw.log.confirmed_seq == confirmed and device_records(vt) == held


def test_empty_and_foreign_files_are_refused_unless_new(tmp_path):
    import sqlite3
    vt = VirtualTimer(contacts=presses(5))
    vt.run_contacts()
    held = len(device_records(vt))
    empty = tmp_path / "empty.sqlite3"
    empty.write_bytes(b"")
    with pytest.raises(archive.ArchiveError, match="empty file \\(0 bytes\\).*--new"):
        archive.connect(str(empty))
    foreign = str(tmp_path / "other.sqlite3")
    c = sqlite3.connect(foreign)
    c.execute("CREATE TABLE recipes (name TEXT)")
    c.commit()
    c.close()
    for new in (False, True):
        with pytest.raises(archive.ArchiveError, match="another program's SQLite database"):
            archive.connect(foreign, new=new)
    assert vt.fw.log.confirmed_seq == 0
    port = vt.start()
    try:
        p = limbclock("sync", "--port", port, "--db", str(empty))
        q = limbclock("sync", "--port", port, "--db", str(empty), "--new", "--json")
    finally:
        vt.stop()
    assert p.returncode == 2 and "--new" in p.stderr and len(p.stderr.strip().splitlines()) == 1
    assert q.returncode == 0, q.stderr
    out = json.loads(q.stdout)
    assert out["new"] == held and vt.fw.log.confirmed_seq == held
    conn = archive.connect(str(empty))
    assert conn.execute("PRAGMA application_id").fetchone()[0] == archive.APPLICATION_ID
    assert len(archive.contacts(conn)) == 5 and out["log_id"] == "%08x" % vt.fw.log.log_id


@pytest.mark.parametrize("rate, seed", [(0.02, 1), (0.02, 2), (0.05, 1), (0.05, 2)])
def test_noisy_links_complete_exactly(tmp_path, rate, seed):
    """2 % and 5 % of the bytes damaged (half dropped, half changed; seeded, both directions):
    the sync completes, every contact once with the timer's stamp to the microsecond; a repeat
    sync adds nothing.  Simulated time (the loopback): no wall clock involved."""
    schedule = presses(150)
    vt = VirtualTimer(contacts=schedule)
    vt.run_contacts()
    recs = device_records(vt)
    conn = archive.connect(str(tmp_path / "a.sqlite3"))
    client = TimerClient(vt.loopback(faults=rate, seed=seed))
    res = sync.sync(client, conn, progress=False)
    assert res["new"] == len(recs) and res["duplicates"] == 0 and res["missing_on_timer"] == 0
    check_same(conn, vt, recs)
    stamped = [(c["utc_us"], c["body"]) for c in archive.contacts(conn)]        # time order
    assert len(stamped) == 150 and [b for _, b in stamped] == [b for _, b, _ in schedule]
    assert all(abs(a - t) <= 1000 for (a, _), (t, _, _) in zip(stamped, schedule))   # the press, GPS-locked: 1 ms
    fig = client.link_figures()
    assert fig["damaged"] > 50 and 0.4 * rate < fig["error_rate"] < 2.5 * rate and fig["part_len"] < 120
    assert vt.fw.log.confirmed_seq == recs[-1].seq
    again = sync.sync(TimerClient(vt.loopback(faults=rate, seed=seed + 10)), conn, progress=False)
    assert (again["new"], again["duplicates"]) == (0, 0)
    assert len(archive.contacts(conn)) == 150


def test_records_damaged_on_the_timer_are_noted_missing(tmp_path):
    """The timer skips records damaged on its flash: sync stores the others, notes the missing
    seqs in the archive, never invents them, and the proof is over what was received."""
    from linkfakes import GappyLog
    vt = VirtualTimer(contacts=presses(40))
    vt.run_contacts()
    recs = device_records(vt)
    lost = {5, 6, 7, recs[-1].seq}
    vt.fw.log = GappyLog(vt.fw.log, lost)
    conn = archive.connect(str(tmp_path / "a.sqlite3"))
    res = sync.sync(TimerClient(vt.loopback(faults=0.01, seed=4)), conn, progress=False, batch=4)
    kept = [r for r in recs if r.seq not in lost]
    assert res["new"] == len(kept) and res["missing_on_timer"] == 4 and res["missing_seqs"] == sorted(lost)
    check_same(conn, vt, kept)
    assert [g[2] for g in archive.gaps(conn, vt.device_id)] == sorted(lost)
    assert vt.fw.log.log.confirmed_seq == recs[-1].seq
    again = sync.sync(TimerClient(vt.loopback()), conn, progress=False)
    assert (again["new"], again["missing_on_timer"]) == (0, 0) and len(archive.gaps(conn)) == 4


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


# Kills at chosen points of a real ``limbclock sync`` process (the test hook of host/sync.py, read only
# when LIMBCLOCK_TEST_KILL_AFTER_RECORDS is set), with --batch 4 and an ACK every 240 records:
# (hook, records the archive holds after the kill, records the timer has reclaimed after the kill).
KILLS = [
    ("0:handshake", 0, 0),          # after the handshake, before any record: nothing stored
    ("10:store", 8, 0),             # inside the third batch's transaction: the two committed batches stay
    ("240:commit", 240, 0),         # after the COMMIT that fills the first ACK range, before its ACK
    ("300:ack", 480, 480),          # re-reads 1..240 (unacknowledged), dies right after the ACK of 1..480
    ("100:commit", 580, 480),       # from 481: dies 25 batches in, between two ACKs
    ("1:store", 580, 480),          # dies in its first transaction: nothing of it committed
]


def test_killed_sync_loses_and_duplicates_nothing(tmp_path):
    """Kill ``limbclock sync`` (SIGKILL) at each point of the sync's order of operations (before any
    record, inside a transaction, between COMMIT and ACK, right after an ACK), then sync to the end:
    every kill leaves exactly the committed batches in the archive, a prefix of the log each once, the
    timer holding everything not acknowledged, and the last sync completes the archive exactly.
    The kills come from the test hook, not from a timer: nothing here depends on the machine's speed."""
    vt = VirtualTimer(contacts=presses(700, step_s=2))
    vt.run_contacts()
    recs = device_records(vt)
    first = recs[0].seq
    port = vt.start()
    db = str(tmp_path / "a.sqlite3")
    cmd = [sys.executable, "-m", "host", "sync", "--port", port, "--db", db, "--no-progress", "--batch", "4"]
    env = dict(os.environ)
    try:
        for spec, held, reclaimed in KILLS:
            env[sync.TEST_KILL_ENV] = spec
            p = subprocess.run(cmd, cwd=ROOT, env=env, capture_output=True, text=True, timeout=HANG_GUARD_S)   # hang guard
            assert p.returncode == -signal.SIGKILL, (spec, p.returncode, p.stderr)
            conn = archive.connect(db)
            got = archived(conn, vt.device_id)
            assert got == list(range(first, first + held)), spec            # whole batches, each once
            assert archive.integrity_ok(conn)
            conn.close()
            assert vt.fw.log.confirmed_seq == first - 1 + reclaimed, spec    # only what was acknowledged
            assert device_records(vt) == recs[reclaimed:]                    # the rest still on the timer
        del env[sync.TEST_KILL_ENV]
        out = subprocess.run(cmd + ["--json"], cwd=ROOT, env=env, capture_output=True, text=True, timeout=HANG_GUARD_S)
        assert out.returncode == 0, out.stderr
    finally:
        vt.stop()
    res = json.loads(out.stdout)
    assert res["new"] == len(recs) - KILLS[-1][1] and res["duplicates"] == KILLS[-1][1] - KILLS[-1][2]
    conn = archive.connect(db)
    check_same(conn, vt, recs)
    assert vt.fw.log.confirmed_seq == recs[-1].seq


def test_kill_hook_is_checked(tmp_path, monkeypatch):
    """The test hook refuses a malformed setting instead of silently doing nothing."""
    vt = VirtualTimer(contacts=presses(3))
    vt.run_contacts()
    conn = archive.connect(str(tmp_path / "a.sqlite3"))
    for bad in ("x:commit", "5:later", "5"):
        monkeypatch.setenv(sync.TEST_KILL_ENV, bad)
        with pytest.raises(sync.SyncError, match=sync.TEST_KILL_ENV):
            sync.sync(TimerClient(vt.loopback()), conn, progress=False)
    assert vt.fw.log.confirmed_seq == 0


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


def test_pty_disconnect_mid_transfer_then_resync(tmp_path, monkeypatch):
    """The timer goes away mid-transfer (its pseudo-terminal closes) right after the batch that
    brings the archive to seq 300 is stored (one ACK, of 1..240, made before); back on a new port with its stored log, the next sync
    fetches exactly the rest.  The plug is pulled at a record count, not after a wall-clock wait."""
    state = str(tmp_path / "state")
    vt = VirtualTimer(contacts=presses(600), state_dir=state)
    vt.run_contacts()
    recs = device_records(vt)
    port = vt.start()
    db = str(tmp_path / "a.sqlite3")
    real = archive.store_records

    def store_then_unplug(conn, device_id, records, log_id=0):
        out = real(conn, device_id, records, log_id)
        if records and records[-1]["seq"] >= 300 and vt._thread is not None:
            vt.stop()                                  # the timer's port closes under the sync
        return out
    monkeypatch.setattr(archive, "store_records", store_then_unplug)
    try:
        with pytest.raises(TimerError):                # went away / cannot write
            sync.sync_port(port, db, progress=False, timeout=1.0, retries=2, batch=4)
    finally:
        vt.stop()
    monkeypatch.setattr(archive, "store_records", real)
    conn = archive.connect(db)
    lid = vt.fw.log.log_id
    part = archive.last_seq(conn, vt.device_id, lid)
    assert part == 300                                 # whole batches of 4 from seq 1: the batch ending at 300
    back = VirtualTimer(contacts=[], state_dir=state, start_us=vt.now_us())
    # acknowledged <= committed: what was committed since the last acknowledgement is re-read
    confirmed = back.fw.log.confirmed_seq
    assert sync.ACK_EVERY == 240 and confirmed == 240    # the ACK of the first full range, none after
    port = back.start()
    try:
        res = sync.sync_port(port, db, progress=False, timeout=1.0)
    finally:
        back.stop()
    assert res["new"] == recs[-1].seq - part and res["duplicates"] == part - confirmed
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
    assert first["new"] > 0 and second["not_on_timer"] == first["last_seq"] == first["confirmed_seq"]
    assert second["new"] + first["new"] == len(archived(a, vt.device_id)) + len(archived(b, vt.device_id))
    assert archived(b, vt.device_id)[0] == first["last_seq"] + 1
