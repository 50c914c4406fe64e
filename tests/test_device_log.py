"""The power-safe contact log: torn writes, recovery, full log, reclaim only after ack.

The CRC is the IEEE 802.3 CRC-32 (``binascii.crc32``); its published check
value for the nine ASCII digits "123456789" is 0xCBF43926 (the catalogue of
CRC parameters, "CRC-32/ISO-HDLC" [from memory]).
"""
import binascii
import os
import struct

import pytest
from hypothesis import given, settings, strategies as st

from device import log as L
from device.firmware import Firmware
from device.hal import FileStore
from device.simhw import MemStore, CuttingStore, PowerCut
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
            assert got == kept and again.recovered_bytes == k
        else:
            assert got[:-1] == kept and len(got) == len(kept) + 1 and again.recovered_bytes == 0
        assert again.next_seq == len(got) + 1
        # the log works on after recovery, with the next sequence number
        r = again.append(L.CONTACT, 5, 1, 30, 0, 0, 1)
        assert r.seq == len(got) + 1 and L.Log(base).records()[-1] == r


@settings(max_examples=15, deadline=None)
@given(records, st.data())
def test_power_cut_at_every_byte_of_a_compaction(items, data):
    ack_to = data.draw(st.integers(1, len(items)))
    total = L.HEADER_LEN + (len(items) - ack_to) * L.RECORD_LEN
    for k in range(total + 1):
        base = MemStore()
        log = L.Log(base)
        kept = fill(log, items)
        log.store = CuttingStore(base, budget=k)
        try:
            log.ack(ack_to)
            done = True
        except PowerCut:
            done = False
        again = L.Log(base)
        if done:
            assert again.records() == kept[ack_to:] and again.confirmed_seq == ack_to
        else:
            assert again.records() == kept and again.confirmed_seq == 0
        assert again.next_seq == len(items) + 1


def test_cut_between_remove_and_rename_on_a_fat_like_store(tmp_path):
    st_ = FileStore(str(tmp_path))
    log = L.Log(st_)
    kept = [log.append(L.CONTACT, 10 + i, 1, 30, 0, 0, 1) for i in range(3)]
    # what FileStore.rename does on a store that cannot rename over a file, cut after the remove:
    st_.replace("log.bin.new", L.pack_header(3, log.log_id, log.origin_seq) + kept[2].pack())
    os.rename(st_.path("log.bin.new"), st_.path("log.bin.tmp"))
    os.remove(st_.path("log.bin"))
    again = L.Log(st_)
    assert again.records() == kept[2:] and again.confirmed_seq == 2
    assert not os.path.exists(st_.path("log.bin.tmp"))


def test_torn_garbage_tail_in_a_real_file(tmp_path):
    st_ = FileStore(str(tmp_path))
    log = L.Log(st_)
    kept = [log.append(L.CONTACT, 1000 * i, 1, 30, 0, 0, 1) for i in range(5)]
    with open(st_.path("log.bin"), "ab") as f:
        f.write(kept[0].pack()[:20])                     # a stale copy, torn
    again = L.Log(st_)
    assert again.records() == kept and again.recovered_bytes == 20
    assert os.path.getsize(st_.path("log.bin")) == L.HEADER_LEN + 5 * L.RECORD_LEN


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
    r = log.append(L.CONTACT, 100, 1, 30, 0, 0, 1)
    assert r.seq == 4 and [x.seq for x in log.records()] == [3, 4] and log.confirmed_seq == 2
    log.ack(4)
    assert log.records() == [] and log.first_seq is None and log.confirmed_seq == 4
    assert L.Log(log.store, capacity=cap).next_seq == 5      # the sequence survives an empty log


def test_full_log_on_the_timer_says_so_and_does_not_acknowledge():
    t = parse_utc("2029-08-03T06:41:12.250Z")
    contacts = [(t + k * 5000000, "sun", "lower") for k in range(4)]
    vt = VirtualTimer(contacts=contacts, capacity=L.HEADER_LEN + 2 * L.RECORD_LEN)
    vt.run_contacts()
    assert [r.seq for r in vt.fw.log.records()] == [1, 2]
    assert "LOG FULL" in vt.fw.lines[3] and vt.fw.fault
    assert [p for _, p in vt.hw.buzzes].count(".") == 2 and "---" in [p for _, p in vt.hw.buzzes]


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


def test_power_cut_on_the_timer_loses_only_unacknowledged(tmp_path):
    t = parse_utc("2029-08-03T06:41:12.250Z")
    contacts = [(t + k * 4000000, "sun", "lower") for k in range(6)]
    # storage bytes: the new log's header, two records, then 11 bytes into the third
    vt = VirtualTimer(contacts=contacts, state_dir=str(tmp_path),
                      power_cut_after_bytes=L.HEADER_LEN + 2 * L.RECORD_LEN + 11,
                      restart_after_us=2000000)
    vt.run_contacts()
    recs = vt.fw.log.records()
    assert vt.power_cuts == 1 and vt.fw.log.recovered_bytes == 11
    beeps = [tb for tb, p in vt.hw.buzzes if p == "."]
    # every contact the timer beeped for before or after the cut is in the log, in order
    assert [r.seq for r in recs] == list(range(1, len(recs) + 1))
    assert len(recs) >= 4 and abs(recs[0].utc_us - t) <= 1000 and abs(recs[1].utc_us - contacts[1][0]) <= 1000
    assert len(beeps) == len(recs) - 2        # the new hardware object only saw the beeps after restart


def test_log_identity_survives_compaction_and_reopen():
    st_ = MemStore()
    log = L.Log(st_, id_source=lambda: 0x5EED1234)
    kept = [log.append(L.CONTACT, 10 + i, 1, 30, 0, 0, 1) for i in range(4)]
    assert (log.log_id, log.origin_seq) == (0x5EED1234, 1)
    log.ack(2)
    again = L.Log(st_, id_source=lambda: 1)          # an existing log keeps its identity
    assert (again.log_id, again.origin_seq, again.base_seq) == (0x5EED1234, 1, 3)
    assert again.range_crc(3, 4) == binascii.crc32(kept[2].pack() + kept[3].pack())
    assert again.range_crc(2, 4) is None and again.range_crc(3, 5) is None


def test_version_1_log_is_upgraded_with_a_new_identity():
    st_ = MemStore()
    recs = [L.Record(7 + i, L.CONTACT, 1000 * i, 1, 30, 0, 0, 1) for i in range(3)]
    head = L.MAGIC + bytes((1, 0, 0, 0)) + struct.pack("<I", 7)
    st_.replace("log.bin", head + struct.pack("<I", binascii.crc32(head)) + b"".join(r.pack() for r in recs))
    log = L.Log(st_, id_source=lambda: 42)
    assert log.records() == recs and (log.log_id, log.origin_seq, log.base_seq, log.next_seq) == (42, 7, 7, 10)
