"""The power-safe contact log: segments, torn writes, damaged records, acks without copies, write errors.

The CRC is the IEEE 802.3 CRC-32 (``binascii.crc32``); its published check
value for the nine ASCII digits "123456789" is 0xCBF43926 (the catalogue of
CRC parameters, "CRC-32/ISO-HDLC" [from memory]).  The checks here are
exactness (every intact record comes back byte for byte, in order, and no
sequence number is ever given twice) and recovery after a cut at every byte.
"""
import binascii
import os
import random
import struct

import pytest
from hypothesis import given, settings, strategies as st

from device import log as L
from device.firmware import Firmware
from device.hal import FileStore
from device.protocol import held_proof
from device.simhw import MemStore, CuttingStore, FaultyStore, PowerCut
from device.sim import VirtualTimer
from engine.timescale import parse_utc

records = st.lists(st.tuples(st.sampled_from([L.CONTACT, L.VOID, L.SESSION, L.SETTINGS]),
                             st.integers(0, 4102444800 * 1000000), st.integers(0, 3), st.integers(0, 0xFFFFFFFF),
                             st.integers(0, 1), st.integers(0, 1), st.integers(0, 0xFFFF), st.integers(-1, 40)),
                   min_size=1, max_size=6)


def fill(log, items):
    out = []
    for kind, utc, state, unc, body, limb, session, image in items:
        out.append(log.append(kind, utc, state, unc, body, limb, session, image, 3 if kind == L.VOID else 0))
    return out


def contacts(log, n, t0=10 ** 15):
    return [log.append(L.CONTACT, t0 + 1000 * i, 1, 30, i & 1, 0, 1) for i in range(n)]


def test_crc32_check_value():
    assert binascii.crc32(b"123456789") == 0xCBF43926


def test_record_layout_documented():
    log = L.Log(MemStore())
    r = log.append(L.CONTACT, 1880433672250000, 1, 30, 1, 0, 7, 2)
    raw = r.pack()
    assert len(raw) == L.RECORD_LEN == 33 and raw[0] == 0xA5 and raw[1] == 27
    assert struct.unpack("<IBqBIBBHbI", raw[2:29]) == (1, 1, 1880433672250000, 1, 30, 1, 0, 7, 2, 0)
    assert struct.unpack("<I", raw[29:])[0] == binascii.crc32(raw[:29])
    assert r.to_dict()["body"] == "moon" and r.to_dict()["time_state"] == "locked"
    # the files: two 28-byte heads and a segment named by its first seq holding the record
    st_ = log.store
    head = st_.read("log.bin")
    assert sorted(st_.files) == ["log.bin", "log.bin.00000001", "log.bin.b"] and st_.read("log.bin.b") == head
    assert len(head) == L.HEADER_LEN == 28 and head[:5] == b"LCLG\x03"
    assert struct.unpack("<IIII", head[8:24]) == (1, log.log_id, 1, 1)
    assert struct.unpack("<I", head[24:])[0] == binascii.crc32(head[:24])
    assert st_.read("log.bin.00000001") == raw


def test_segments_roll_and_records_stream_back_in_order():
    log = L.Log(MemStore())
    kept = contacts(log, 3 * L.SEG_RECORDS + 5)
    names = sorted(n for n in log.store.files if n[-8:].isalnum() and len(n) == 16)
    assert names == ["log.bin.%08x" % s for s in (1, 65, 129, 193)]
    assert all(log.store.size(n) == L.SEG_RECORDS * 33 for n in names[:3])
    again = L.Log(log.store)
    assert again.records() == kept and again.next_seq == len(kept) + 1 and again.damaged == 0
    assert L.unpack_records(again.read_raw(60, 10)) == kept[59:69]          # across a segment boundary
    assert again.get(130) == kept[129] and again.get(0) is None and again.get(len(kept) + 1) is None


@settings(max_examples=25, deadline=None)
@given(records, records.map(lambda x: x[0]))
def test_power_cut_at_every_byte_of_an_append(before, new):
    for k in range(L.RECORD_LEN + 1):
        base = MemStore()
        log = L.Log(base)
        kept = fill(log, before)
        cut = CuttingStore(base, budget=k)
        log.store = cut
        if k < L.RECORD_LEN:
            with pytest.raises(PowerCut):
                fill(log, [new])
        else:
            fill(log, [new])
        again = L.Log(base)                      # power back: recovery
        got = again.records()
        if k < L.RECORD_LEN:
            # the torn record never returned (no beep, never read by the host): its bytes are cut off
            assert got == kept and again.recovered_bytes == k and again.damaged == 0
        else:
            assert got[:-1] == kept and len(got) == len(kept) + 1 and again.recovered_bytes == 0
        assert again.next_seq == len(got) + 1
        # the log works on after recovery, with the next sequence number
        r = again.append(L.CONTACT, 5, 1, 30, 0, 0, 1)
        assert r.seq == len(got) + 1 and L.Log(base).records()[-1] == r


@settings(max_examples=15, deadline=None)
@given(st.integers(1, 150), st.data())
def test_power_cut_at_every_byte_of_an_ack(n, data):
    ack_to = data.draw(st.integers(1, n))
    written = FaultyStore(MemStore())
    probe = L.Log(written)
    contacts(probe, n)
    before = written.written
    probe.ack(ack_to)
    total = written.written - before              # the bytes one ack writes: two heads, nothing else
    assert total == 2 * L.HEADER_LEN
    for k in range(0, total + 1, 3):
        base = MemStore()
        log = L.Log(base, id_source=lambda: 99)
        kept = contacts(log, n)
        log.store = CuttingStore(base, budget=k)
        try:
            log.ack(ack_to)
        except PowerCut:
            pass
        again = L.Log(base)
        # either before or after the ack, never a mix; nothing unacknowledged lost, numbering kept
        assert again.confirmed_seq in (0, ack_to)
        assert again.records() == kept[again.confirmed_seq:]
        assert again.next_seq == n + 1 and again.log_id == 99 and again.damaged == 0


def test_ack_removes_whole_segments_without_copying_a_record():
    store = FaultyStore(MemStore())
    log = L.Log(store)
    kept = contacts(log, 1500)
    w0, ops0 = store.written, store.ops
    # what a sync does: acknowledge every 31-record batch as it is committed
    for last in range(31, 1500, 31):
        log.ack(last)
    log.ack(1500)
    acks = len(range(31, 1500, 31)) + 1
    assert store.written - w0 == acks * 2 * L.HEADER_LEN          # 56 bytes per ACK, no record rewritten
    assert store.ops - ops0 <= acks * 4 + 1500 // L.SEG_RECORDS + 1  # 2 replaces (write + rename) + removals
    assert sorted(store.inner.files) == ["log.bin", "log.bin.b"] and log.records() == []
    assert L.Log(store).next_seq == 1501 and kept[-1].seq == 1500   # the numbering survives an empty log


def test_full_log_refuses_and_reclaims_only_after_ack():
    cap = L.HEADER_LEN + 3 * L.RECORD_LEN
    log = L.Log(MemStore(), capacity=cap)
    for i in range(3):
        log.append(L.CONTACT, i, 1, 30, 0, 0, 1)
    with pytest.raises(L.LogFull):
        log.append(L.CONTACT, 99, 1, 30, 0, 0, 1)
    assert [r.seq for r in log.records()] == [1, 2, 3]     # nothing overwritten
    with pytest.raises(L.LogError):
        log.ack(7)                                         # beyond the last record
    log.ack(2)
    # the acknowledged records 1, 2 share a segment with 3: that one segment is compacted for room
    r = log.append(L.CONTACT, 100, 1, 30, 0, 0, 1)
    assert r.seq == 4 and [x.seq for x in log.records()] == [3, 4] and log.confirmed_seq == 2
    assert sorted(log.store.files) == ["log.bin", "log.bin.00000003", "log.bin.b"]
    assert L.Log(log.store, capacity=cap).records() == log.records()
    log.ack(4)
    assert log.records() == [] and log.first_seq is None and log.confirmed_seq == 4
    assert L.Log(log.store, capacity=cap).next_seq == 5      # the sequence survives an empty log


@settings(max_examples=10, deadline=None)
@given(st.integers(2, 140), st.data())
def test_power_cut_at_every_byte_of_a_compaction(n, data):
    ack_to = data.draw(st.integers(1, n - 1))
    cap = L.HEADER_LEN + n * L.RECORD_LEN
    base = MemStore()
    log = L.Log(base, capacity=cap)
    kept = contacts(log, n)
    log.ack(ack_to)
    snapshot = {k: bytearray(v) for k, v in base.files.items()}
    # the compaction copies the unacknowledged records of the first remaining segment
    first = max(s for s in log.segs if s <= ack_to + 1)
    lim = min([first + L.SEG_RECORDS] + [s for s in log.segs if s > first])
    total = (min(lim, n + 1) - (ack_to + 1)) * L.RECORD_LEN
    for k in list(range(0, total + 1, 7)) + [total]:
        base.files = {kk: bytearray(v) for kk, v in snapshot.items()}
        lg = L.Log(base, capacity=cap)
        lg.store = CuttingStore(base, budget=k)
        try:
            lg.append(L.CONTACT, 7, 1, 30, 0, 0, 1)
            done = True
        except PowerCut:
            done = False
        again = L.Log(base, capacity=cap)
        got = again.records()
        assert got[:n - ack_to] == kept[ack_to:] and again.damaged == 0 and again.confirmed_seq == ack_to
        assert len(got) == n - ack_to + (1 if done else 0) and again.next_seq == n + 1 + (1 if done else 0)


def test_cut_between_remove_and_rename_on_a_fat_like_store(tmp_path):
    st_ = FileStore(str(tmp_path))
    log = L.Log(st_)
    kept = contacts(log, 3)
    log.ack(1)
    # what FileStore.rename does on a store that cannot rename over a file, cut after the remove:
    # the next ack's head is complete in log.bin.tmp, log.bin is gone
    h = L.pack_header(3, log.log_id, log.origin_seq, 4)
    with open(st_.path("log.bin.tmp"), "wb") as f:
        f.write(h)
    os.remove(st_.path("log.bin"))
    again = L.Log(st_)
    assert again.records() == kept[2:] and again.confirmed_seq == 2 and again.log_id == log.log_id
    assert not os.path.exists(st_.path("log.bin.tmp")) and again.rebuilt is None


def test_torn_garbage_tail_in_a_real_file(tmp_path):
    st_ = FileStore(str(tmp_path))
    log = L.Log(st_)
    kept = contacts(log, 5)
    seg = st_.path("log.bin.00000001")
    with open(seg, "ab") as f:
        f.write(kept[0].pack()[:20])                     # a stale copy, torn
    again = L.Log(st_)
    assert again.records() == kept and again.recovered_bytes == 20 and again.damaged == 0
    assert os.path.getsize(seg) == 5 * L.RECORD_LEN
    assert again.append(L.CONTACT, 1, 1, 30, 0, 0, 1).seq == 6


def flip(store, name, byte, bit=0x10):
    store.files[name][byte] ^= bit


def test_a_flipped_bit_in_the_middle_keeps_every_later_record_and_never_reuses_its_number():
    store = MemStore()
    log = L.Log(store)
    kept = contacts(log, 150)
    flip(store, "log.bin.00000041", 33 * 10 + 17)            # seq 75's payload
    flip(store, "log.bin.00000081", 33 * 21 + 0)             # seq 150's magic: the last record
    again = L.Log(store)
    assert again.damaged == 2 and again.damaged_seqs == [75, 150]
    assert again.records() == kept[:74] + kept[75:149]       # every intact record, later ones included
    assert again.next_seq == 151                             # 75 and 150 are never given again
    assert again.append(L.CONTACT, 5, 1, 30, 0, 0, 1).seq == 151
    # the reads the host makes: in order, with a gap; the proof covers the records held
    got = L.unpack_records(again.read_raw(70, 10))
    assert [r.seq for r in got] == [70, 71, 72, 73, 74, 76, 77, 78, 79, 80]
    assert held_proof(again, 70, 80) == binascii.crc32(b"".join(r.pack()[:-4] for r in got))
    assert again.get(75) is None and again.get(76) == kept[75]
    # the firmware says so (status and display) and starts
    fw = Firmware(_hw(store))
    st = fw.status()["log"]
    assert st["damaged"] == 2 and st["damaged_seqs"] == [75, 150] and "2 damaged" in fw.message


def test_a_shifted_record_is_found_again_byte_by_byte():
    store = MemStore()
    log = L.Log(store)
    kept = contacts(log, 40)
    data = store.files["log.bin.00000001"]
    del data[33 * 7 + 5]                                     # a byte lost: everything after shifts
    again = L.Log(store)
    assert again.records() == kept[:7] + kept[8:] and again.damaged_seqs == [8]
    assert L.unpack_records(again.read_raw(20, 3)) == kept[19:22]


@settings(max_examples=30, deadline=None)
@given(st.integers(1, 200), st.lists(st.integers(0, 10 ** 9), min_size=1, max_size=12), st.integers(0, 3))
def test_random_damage_never_loses_an_intact_record_nor_reuses_a_number(n, hits, ack_frac):
    store = MemStore()
    log = L.Log(store, id_source=lambda: 5)
    kept = contacts(log, n)
    ack_to = n * ack_frac // 4
    if ack_to:
        log.ack(ack_to)
    segs = sorted(k for k in store.files if len(k) == 16)
    touched = set()
    for h in hits:
        name = segs[h % len(segs)]
        size = len(store.files[name])
        pos = (h // 7) % size
        store.files[name][pos] ^= 1 << (h % 8)
        touched.add(int(name[-8:], 16) + pos // 33)          # the seq whose bytes were hit
    again = L.Log(store, id_source=lambda: 6)
    got = again.records()
    seqs = [r.seq for r in got]
    intact = [r for r in kept[ack_to:] if r.seq not in touched]
    assert seqs == sorted(set(seqs)) and all(r in got for r in intact)
    assert all(r == kept[r.seq - 1] for r in got)            # nothing invented
    assert again.next_seq == n + 1 and again.log_id == 5      # heads untouched: identity kept
    assert again.damaged == len(kept) - ack_to - len(got)
    assert again.append(L.CONTACT, 1, 1, 30, 0, 0, 1).seq == n + 1


def test_a_damaged_head_is_rebuilt_keeping_the_identity_from_its_copy():
    store = MemStore()
    log = L.Log(store, id_source=lambda: 0x5EED1234)
    kept = contacts(log, 70)
    log.ack(10)
    flip(store, "log.bin", 9)
    again = L.Log(store, id_source=lambda: 1)
    assert (again.log_id, again.origin_seq, again.confirmed_seq, again.next_seq) == (0x5EED1234, 1, 10, 71)
    assert again.records() == kept[10:] and again.rebuilt == "head copy"
    assert store.read("log.bin") == store.read("log.bin.b")   # repaired
    # both heads damaged: rebuilt from the segments, a new identity, no number reused
    flip(store, "log.bin", 9)
    flip(store, "log.bin.b", 5)
    third = L.Log(store, id_source=lambda: 0xABCD)
    assert third.rebuilt == "new identity" and third.log_id == 0xABCD and third.next_seq == 71
    # the first segment (1..64) still holds acknowledged 1..10: served again, the host keeps them once
    assert third.origin_seq == 1 and third.records() == kept
    fw = Firmware(_hw(store))                                # and the timer starts
    assert fw.status()["log"]["rebuilt"] is None and fw.log.log_id == 0xABCD


def test_write_errors_are_raised_and_the_log_stays_whole():
    inner = MemStore()
    store = FaultyStore(inner)
    log = L.Log(store)
    kept = contacts(log, 5)
    store.quota = store.used() + 20                          # the flash fills up in the middle of a record
    with pytest.raises(L.LogWriteError):
        log.append(L.CONTACT, 1, 1, 30, 0, 0, 1)
    assert store.inner.size("log.bin.00000001") == 5 * 33 + 20
    with pytest.raises(L.LogWriteError):                    # still full: the repair itself cannot write
        log.append(L.CONTACT, 2, 1, 30, 0, 0, 1)
    store.quota = None                                       # room again
    r = log.append(L.CONTACT, 3, 1, 30, 0, 0, 1)
    assert r.seq == 6 and L.Log(inner).records() == kept + [r]
    store.fail_writes = 1                                    # an I/O error: nothing written
    with pytest.raises(L.LogWriteError):
        log.append(L.CONTACT, 4, 1, 30, 0, 0, 1)
    assert log.append(L.CONTACT, 5, 1, 30, 0, 0, 1).seq == 7 and L.Log(inner).damaged == 0


def test_log_identity_survives_acks_and_reopen():
    st_ = MemStore()
    log = L.Log(st_, id_source=lambda: 0x5EED1234)
    kept = contacts(log, 4)
    assert (log.log_id, log.origin_seq) == (0x5EED1234, 1)
    log.ack(2)
    again = L.Log(st_, id_source=lambda: 1)          # an existing log keeps its identity
    assert (again.log_id, again.origin_seq, again.base_seq) == (0x5EED1234, 1, 3)
    assert held_proof(again, 3, 4) == binascii.crc32(kept[2].pack()[:-4] + kept[3].pack()[:-4])
    assert held_proof(again, 2, 4) is None and held_proof(again, 3, 5) is None


def test_version_1_log_is_converted_with_a_new_identity():
    st_ = MemStore()
    recs = [L.Record(7 + i, L.CONTACT, 1000 * i, 1, 30, 0, 0, 1) for i in range(3)]
    head = L.MAGIC + bytes((1, 0, 0, 0)) + struct.pack("<I", 7)
    st_.replace("log.bin", head + struct.pack("<I", binascii.crc32(head)) + b"".join(r.pack() for r in recs))
    log = L.Log(st_, id_source=lambda: 42)
    assert log.records() == recs and (log.log_id, log.origin_seq, log.base_seq, log.next_seq) == (42, 7, 7, 10)


def test_version_2_log_is_converted_keeping_its_identity_and_cut_conversions_start_over():
    recs = [L.Record(3 + i, L.CONTACT, 1000 * i, 1, 30, 0, 0, 1) for i in range(150)]
    head = L.MAGIC + bytes((2, 0, 0, 0)) + struct.pack("<III", 3, 0xFEED, 1)
    v2 = head + struct.pack("<I", binascii.crc32(head)) + b"".join(r.pack() for r in recs)
    for budget in (0, 500, 4000, 4950, 4950 + 28, None):
        base = MemStore()
        base.replace("log.bin", v2)
        try:
            L.Log(CuttingStore(base, budget))
        except PowerCut:
            pass
        log = L.Log(base)
        assert log.records() == recs and (log.log_id, log.origin_seq, log.base_seq, log.next_seq) == \
            (0xFEED, 1, 3, 153) and log.damaged == 0
        assert len(base.read("log.bin")) == L.HEADER_LEN


def _hw(store):
    from device.hal import Hardware

    class HW(Hardware):
        t = 0

        def ticks_us(self):
            self.t = (self.t + 1000) % (1 << 30)
            return self.t
    h = HW()
    h.store = store
    return h


# -- the timer with its log -------------------------------------------------------------------------

def test_full_log_on_the_timer_holds_the_presses_and_writes_them_after_the_ack():
    t = parse_utc("2029-08-03T06:41:12.250Z")
    cs = [(t + k * 5000000, "sun", "lower") for k in range(5)]
    vt = VirtualTimer(contacts=cs, capacity=L.HEADER_LEN + 2 * L.RECORD_LEN)
    vt.run_contacts()
    assert [r.seq for r in vt.fw.log.records()] == [1, 2]
    st = vt.fw.status()
    assert st["storage"] == {"error": "log full", "held": 3, "held_overflow": 0}
    assert vt.fw.lines[3] == "LOG FULL: SYNC! 3 held" and st["fault"].startswith("log full")
    beeps = [p for _, p in vt.hw.buzzes]
    assert beeps.count(".") == 2 and beeps.count("---") == 3      # once per held press, not at every retry
    from host.timer_client import TimerClient
    c = TimerClient(vt.loopback(faults=0.0))
    lg = vt.fw.log

    def ack(first, last):        # what a sync sends: the log's identity, the range, its proof
        return c.ack(lg.log_id, first, last, held_proof(lg, first, last))
    assert ack(1, 2)["confirmed_seq"] == 2
    vt.advance_to(vt.now_us() + 1000000)
    recs = vt.fw.log.records()
    assert [r.seq for r in recs] == [3, 4]                   # two more fit; one still held
    assert vt.fw.status()["storage"]["held"] == 1
    ack(3, 4)
    vt.advance_to(vt.now_us() + 1000000)
    recs = vt.fw.log.records()
    assert [r.seq for r in recs] == [5] and vt.fw.status()["storage"]["error"] is None
    # every press kept its stamp from when it was made, not from when it was written
    assert abs(recs[0].utc_us - cs[4][0]) <= 1000 and recs[0].time_state == 1


def test_a_storage_write_error_is_signalled_and_no_press_is_lost():
    t = parse_utc("2029-08-03T06:41:12.250Z")
    cs = [(t + k * 4000000, "sun", "lower") for k in range(6)]
    vt = VirtualTimer(contacts=cs)
    vt.advance_to(cs[1][0] + 2000000)
    vt.flash.fail_writes = 10 ** 6                           # the flash now fails every write (EIO)
    vt.advance_to(cs[4][0] + 2000000)
    st = vt.fw.status()
    assert st["storage"]["error"] == "storage error" and st["storage"]["held"] == 3
    assert vt.fw.lines[3] == "STORAGE ERROR: 3 held" and "I/O error" in st["fault"]
    assert st["loop"]["faults"] >= 1 and st["loop"]["fault_counts"]["storage"] == 1
    vt.flash.fail_writes = 0                                 # it recovers (the retry runs every 10 s)
    vt.run_contacts()
    vt.advance_to(vt.now_us() + 11000000)
    recs = vt.fw.log.records()
    assert [r.seq for r in recs] == [1, 2, 3, 4, 5, 6]
    for r, (truth, _, _) in zip(recs, cs):
        assert r.kind == L.CONTACT and abs(r.utc_us - truth) <= 1000
    assert vt.fw.status()["storage"]["error"] is None and L.Log(vt.base_store).damaged == 0


def test_flash_too_small_for_the_log_itself():
    # a flash with no room even for the log's heads: the timer starts, holds presses, says why
    t = parse_utc("2029-08-03T06:41:12.250Z")
    vt = VirtualTimer(contacts=[(t, "sun", "lower")], storage_bytes=10)
    vt.run_contacts()
    st = vt.fw.status()
    assert st["storage"]["held"] == 1 and vt.fw.lines[3] == "FLASH FULL: SYNC! 1 held"
    assert st["storage"]["error"] == "flash full"
    assert st["pending"] == 1


def test_void_gesture_writes_a_new_record_and_erases_nothing(tmp_path):
    t = parse_utc("2029-08-03T06:41:12.250Z")
    vt = VirtualTimer(contacts=[(t, "sun", "lower")], state_dir=str(tmp_path))
    vt.world.press(t + 5000000, 1800000)             # held 1.8 s: void the last contact
    vt.world.press(t + 15000000, 6000000)            # held 6 s: new session
    vt.run_contacts()
    vt.advance_to(t + 30000000)
    recs = vt.fw.log.records()
    assert [(r.kind, r.ref_seq) for r in recs] == [(L.CONTACT, 0), (L.VOID, 1), (L.SESSION, 0)]
    assert recs[2].session == 2
    # storage survives a restart of the timer (state dir)
    fw = Firmware(vt.hw)
    assert fw.session == 2 and fw.log.records() == recs and fw.last_contact == 1 and 1 in fw.voided
    assert fw.boots == 2


def test_power_cut_on_the_timer_loses_only_unacknowledged(tmp_path):
    t = parse_utc("2029-08-03T06:41:12.250Z")
    cs = [(t + k * 4000000, "sun", "lower") for k in range(6)]
    # bytes written to the log's segments: two records, then 11 bytes into the third
    vt = VirtualTimer(contacts=cs, state_dir=str(tmp_path / "st"), power_cut_prefix="log.bin.0",
                      power_cut_after_bytes=2 * L.RECORD_LEN + 11, restart_after_us=2000000)
    vt.run_contacts()
    recs = vt.fw.log.records()
    assert vt.power_cuts == 1 and vt.fw.log.recovered_bytes == 11
    beeps = [tb for tb, p in vt.hw.buzzes if p == "."]
    # every contact the timer beeped for before or after the cut is in the log, in order
    assert [r.seq for r in recs] == list(range(1, len(recs) + 1))
    assert len(recs) >= 4 and abs(recs[0].utc_us - t) <= 1000 and abs(recs[1].utc_us - cs[1][0]) <= 1000
    assert len(beeps) == len(recs) - 2        # the new hardware object only saw the beeps after restart


def test_boot_and_whole_log_ack_stream_a_full_log_in_chunks():
    # the memory bound by design, on CPython: no read during boot, ack or a sync-sized read asks the
    # store for more than one chunk; the MicroPython heap figure is tests/test_device_micropython.py
    class Watching(MemStore):
        biggest = 0

        def read(self, name, offset=0, n=-1):
            data = MemStore.read(self, name, offset, n)
            Watching.biggest = max(Watching.biggest, len(data))
            return data
    store = Watching()
    log = L.Log(store, capacity=65536)
    rng = random.Random(3)
    n = 0
    while True:
        try:
            log.append(L.CONTACT, 10 ** 15 + rng.randrange(10 ** 9), 1, 30, 0, 0, 1)
            n += 1
        except L.LogFull:
            break
    assert n == (65536 - L.HEADER_LEN) // L.RECORD_LEN == 1985
    expected = binascii.crc32(b"".join(r.pack()[:-4] for r in L.Log(store).records()))
    Watching.biggest = 0
    fw = Firmware(_hw(store))
    assert fw.log.next_seq == n + 1 and fw.log.free_records == 0
    crc = held_proof(fw.log, 1, n)
    fw.log.ack(n)
    assert Watching.biggest <= L.CHUNK
    assert crc == expected and fw.log.records() == [] and fw.log.free_records > 1900
