"""The timer survives: receiver conventions, time without GPS, power cycles, loop stalls, faults.

Truth is the simulated world's own UTC (``device.simhw``: oscillator, GPS receiver, RTC, button);
the checks are physical: a LOCKED stamp within 1 ms of the true press, any other stamp within its
stated uncertainty, and never a LOCKED stamp that is wrong.  Receiver conventions (which edge a
sentence names, how late it comes) follow common practice: most receivers end the sentences of a
second after its edge, some send the label of the coming second before its edge.
"""
import pytest

from device import clock as clk, log as L
from device.firmware import Firmware, device_id_from
from device.hal import Hardware, TickExtender
from device.sim import VirtualTimer
from device.simhw import MemStore
from engine.timescale import parse_utc

T = parse_utc("2029-08-03T06:41:12.250Z")
P22 = 1 << 22                  # a 4.19 s tick period: wraps come quickly


def presses(n, t0=T, step_us=7000000):
    return [(t0 + k * step_us + k * 1111, "sun", "lower") for k in range(n)]


def contacts_of(vt):
    return [r for r in vt.fw.log.records() if r.kind == L.CONTACT]


# -- receivers --------------------------------------------------------------------------------------

@pytest.mark.parametrize("names_next, delays, receiver", [
    (False, (120000, 180000), clk.PRECEDING),
    (False, (520000, 560000), clk.PRECEDING),          # a late receiver: sentences end 520 ms after
    (False, (880000, 900000), clk.PRECEDING),
    (True, (300000, 360000), clk.NEXT),                # the label of the coming second, before its edge
    (True, (700000, 740000), clk.NEXT),
])
def test_receiver_conventions_give_exact_locked_stamps(names_next, delays, receiver):
    cs = presses(4)
    vt = VirtualTimer(contacts=cs, names_next=names_next, label_delays_us=delays, receiver=receiver,
                      label_jitter_us=20000, ticks_period=P22)
    vt.run_contacts()
    recs = contacts_of(vt)
    assert len(recs) == 4
    for r, (t, _, _) in zip(recs, cs):
        assert r.time_state == clk.LOCKED and abs(r.utc_us - t) <= 1000
    st = vt.fw.clock.status(vt.fw.now())
    assert st["receiver"] == receiver.name and st["counts"]["unsteady"] == 0
    # the sentence-to-pulse delay the clock measured (first label; for "next", label before the edge)
    d = st["label_delay_ms"]
    want = (1000000 - delays[0]) / 1000.0 if names_next else delays[0] / 1000.0
    assert abs(d - want) <= 25.0


def test_a_receiver_straddling_the_second_is_refused():
    # sentences that end about 1 s after their edge, +/-60 ms: some before the next edge, some after
    # it (those would pair with the wrong edge, 1 s off): the delays disagree, the clock never locks
    cs = presses(4, T + 30000000)
    vt = VirtualTimer(contacts=cs, label_delays_us=(990000, 1000000), label_jitter_us=60000, start_us=T)
    vt.run_contacts()
    recs = contacts_of(vt)
    st = vt.fw.clock.status(vt.fw.now())
    assert st["counts"]["unsteady"] > 10 and st["state"] == "none"
    assert [r.time_state for r in recs] == [clk.NONE] * 4        # kept with their ticks, never a wrong time
    assert vt.fw.lines[0] == "NO TIME - wait GPS"


@pytest.mark.parametrize("names_next, delays, receiver", [
    # sentences naming the COMING edge, ending 25-30 ms before it, read as "preceding": 970 ms after
    # the edge before, past the window's 950 ms end
    (True, (970000, 975000), clk.PRECEDING),
    # sentences naming the edge BEFORE, ending 10-15 ms before the next one, read as "next": closer to
    # that edge than the window's 20 ms start
    (False, (985000, 990000), clk.NEXT),
])
def test_a_label_next_to_an_edge_is_never_paired(names_next, delays, receiver):
    # Either label could belong to the edge on its other side (a millisecond of jitter or a slow
    # loop pass moves it across): the receiver profile's delay window (20-950 ms, common practice)
    # refuses to pair it.  Paired, each would stamp every contact exactly 1 s wrong while LOCKED.
    cs = presses(4)
    vt = VirtualTimer(contacts=cs, names_next=names_next, label_delays_us=delays, receiver=receiver,
                      ticks_period=P22)
    vt.run_contacts()
    recs = contacts_of(vt)
    st = vt.fw.clock.status(vt.fw.now())
    assert st["counts"]["pairs"] == 0 and st["counts"]["ambiguous"] > 50 and st["state"] == "none"
    assert len(recs) == 4 and [r.time_state for r in recs] == [clk.NONE] * 4    # kept with their ticks


def test_receiver_profile_settings_are_checked():
    with pytest.raises(clk.ClockError):
        clk.ReceiverProfile("x", "after")
    with pytest.raises(clk.ClockError):
        clk.ReceiverProfile("x", "preceding", 500000, 400000)


# -- time without GPS --------------------------------------------------------------------------------

def test_a_press_before_gps_time_is_kept_then_stamped_when_the_clock_locks():
    t0 = T
    cs = [(t0 + 10000000, "sun", "lower"), (t0 + 20500000, "sun", "lower"), (t0 + 90000000, "sun", "lower")]
    vt = VirtualTimer(contacts=cs, start_us=t0, first_fix_us=t0 + 60000000, drift_ppm=-7.5)
    vt.run_contacts()
    recs = vt.fw.log.records()
    kinds = [(r.kind, r.time_state) for r in recs]
    assert kinds == [(L.CONTACT, clk.NONE), (L.CONTACT, clk.NONE), (L.STAMP, clk.HOLDOVER),
                     (L.STAMP, clk.HOLDOVER), (L.CONTACT, clk.LOCKED)]
    a, b, sa, sb, c = recs
    # logged at once: the extended tick and the boot count, the interval kept to the oscillator's rate
    assert a.ref_seq == b.ref_seq == vt.fw.boots == 1 and a.uncertainty_us == clk.UNC_MAX_US
    assert abs((b.utc_us - a.utc_us) - 10500000 * (1 - 7.5e-6)) <= 2
    # the late stamps name them and give their UTC within the stated bound (60-70 s back from lock)
    assert (sa.ref_seq, sb.ref_seq) == (a.seq, b.seq)
    for s, (t, _, _) in zip((sa, sb), cs):
        assert abs(s.utc_us - t) <= s.uncertainty_us < 2000
    assert abs(c.utc_us - cs[2][0]) <= 1000
    assert vt.fw.status()["untimed"] == {"waiting": 0, "not_kept": 0}


def test_presses_before_gps_keep_their_relative_timing_across_a_power_cycle():
    t0 = T
    cs = [(t0 + 10000000, "sun", "lower"), (t0 + 14250000, "sun", "lower")]
    vt = VirtualTimer(contacts=cs, start_us=t0, first_fix_us=t0 + 60000000, power_cut_at_us=t0 + 30000000,
                      restart_after_us=2000000)
    vt.advance_to(t0 + 90000000)
    recs = vt.fw.log.records()
    a, b = recs[:2]
    assert vt.power_cuts == 1 and (a.ref_seq, b.ref_seq) == (1, 1) and vt.fw.boots == 2
    assert [r.kind for r in recs] == [L.CONTACT, L.CONTACT]      # no late stamp across a power cycle
    assert abs((b.utc_us - a.utc_us) - 4250000) <= 20            # their interval is still known
    assert a.to_dict()["tick_us"] == a.utc_us and a.to_dict()["boot"] == 1


def test_a_power_glitch_during_a_gps_outage_keeps_holdover():
    # an uncompensated crystal (the default profile), a 30-min outage; the power fails 10 min in
    # and comes back 3 s later: the RTC ran through it, the saved time and drift carry on
    t0 = T
    cs = [(t0 + 15 * 60000000, "sun", "lower"), (t0 + 25 * 60000000, "sun", "lower")]
    vt = VirtualTimer(contacts=cs, start_us=t0, drift_ppm=9.0, outages=[(t0 + 60000000, t0 + 1800000000)],
                      power_cut_at_us=t0 + 600000000, restart_after_us=3000000)
    vt.run_contacts()
    recs = contacts_of(vt)
    assert vt.power_cuts == 1 and len(recs) == 2
    for r, (t, _, _) in zip(recs, cs):
        assert r.time_state == clk.HOLDOVER and abs(r.utc_us - t) <= r.uncertainty_us < 100000
    assert vt.fw.clock.have_drift and abs(vt.fw.clock.drift_ppm - 9.0) < 0.5


def test_without_an_rtc_a_power_cycle_keeps_the_drift_only():
    t0 = T
    vt = VirtualTimer(contacts=[(t0 + 300000000, "sun", "lower")], start_us=t0, drift_ppm=4.0,
                      outages=[(t0 + 60000000, t0 + 1800000000)], power_cut_at_us=t0 + 120000000)
    vt.world.rtc_us = lambda: None                             # a board without a running RTC
    vt.run_contacts()
    r = contacts_of(vt)[0]
    assert r.time_state == clk.NONE and vt.fw.clock.have_drift and abs(vt.fw.clock.drift_ppm - 4.0) < 0.5


# -- stalls and tick wraps ---------------------------------------------------------------------------

def test_tick_extender_counts_lost_wraps_with_the_slower_counter():
    p = 1 << 30
    ext = TickExtender(100, p, 0, p)
    # 2.5 periods later (a stall of 44.7 min): the microsecond counter alone sees half a period
    true_us = 2 * p + p // 2
    now = ext.update((100 + true_us) % p, true_us // 1000)
    assert now == true_us and ext.lost_wraps == 2
    # an edge captured 10 min into the stall is ambiguous (three candidates in the interval)
    assert ext.extend_checked((100 + 600000000) % p)[1] is False
    ext2 = TickExtender(100, p, 0, p)
    ext2.update((100 + 700000000) % p, 700000)                # 11.7 min: longer than half a period
    v, ok = ext2.extend_checked((100 + 50000000) % p)          # an edge 50 s in, drained 650 s later
    assert ok and v == 50000000
    ext3 = TickExtender(100, p)                               # no slower counter
    ext3.update((100 + 700000000) % p)
    assert ext3.unverified


@pytest.mark.parametrize("stall_s, ms_counter", [(3.5, True), (3.5, False), (9.0, True)])
def test_a_loop_stall_across_a_tick_wrap_never_gives_a_wrong_locked_stamp(stall_s, ms_counter):
    t0 = T
    stall = (t0 + 30000000, t0 + 30000000 + int(stall_s * 1e6))
    cs = [(t0 + 20000000, "sun", "lower"), (stall[0] + 500000, "sun", "lower"), (t0 + 80000000, "sun", "lower")]
    vt = VirtualTimer(contacts=cs, start_us=t0, ticks_period=P22, stalls=[stall], ms_counter=ms_counter)
    vt.run_contacts()
    recs = contacts_of(vt)
    assert len(recs) == 3
    before, during, after = recs
    assert before.time_state == after.time_state == clk.LOCKED
    assert abs(before.utc_us - cs[0][0]) <= 1000 and abs(after.utc_us - cs[2][0]) <= 1000
    loop = vt.fw.status()["loop"]
    assert loop["stall_max_us"] >= stall_s * 1e6 * 0.99
    if stall_s < 4.19 and ms_counter:
        # one candidate in the stalled interval: placed exactly; the PPS edges in the ring give the time
        assert during.time_state == clk.LOCKED and abs(during.utc_us - cs[1][0]) <= 1000
    elif ms_counter:
        # two wraps went by: the count is exact, the press's place is not: never LOCKED, bound stated
        assert loop["lost_wraps"] == 2
        assert during.time_state == clk.HOLDOVER and abs(during.utc_us - cs[1][0]) <= during.uncertainty_us
    else:
        # no slower counter: the stall is seen (the counter ran past half a period); the time is
        # dropped and the press kept untimed until the clock locks again
        assert loop["wrap_faults"] == 1 and during.time_state == clk.NONE
        assert any(r.kind == L.FAULT and r.image == 4 for r in vt.fw.log.records())


def test_a_stall_longer_than_half_the_real_tick_period():
    # the 2**30 us period of MicroPython's ticks_us: a 10-minute stall (over 537 s) with a press in it
    t0 = T
    stall = (t0 + 30000000, t0 + 630000000)
    cs = [(t0 + 40000000, "sun", "lower"), (t0 + 700000000, "sun", "lower")]
    vt = VirtualTimer(contacts=cs, start_us=t0, stalls=[stall])
    vt.run_contacts()
    during, after = contacts_of(vt)
    assert vt.fw.status()["loop"]["ring_overflow"]["pps"] > 500        # the ring kept 64 of 600 edges
    assert during.time_state == clk.HOLDOVER and abs(during.utc_us - cs[0][0]) <= during.uncertainty_us < 1000
    assert after.time_state == clk.LOCKED and abs(after.utc_us - cs[1][0]) <= 1000


# -- the loop never dies -----------------------------------------------------------------------------

def test_a_fault_in_a_pass_is_caught_shown_logged_and_the_loop_goes_on(monkeypatch):
    from device.onboard import Onboard
    cs = presses(3)
    vt = VirtualTimer(contacts=cs, ticks_period=P22)
    vt.advance_to(cs[0][0] + 3000000)
    calls = []

    def broken(*a, **k):
        calls.append(1)
        if len(calls) % 2:
            raise MemoryError("memory allocation failed")
        raise KeyError("bad")
    monkeypatch.setattr(Onboard, "update", broken)
    feeds = vt.hw.feeds
    vt.run_contacts()
    st = vt.fw.status()
    assert len(contacts_of(vt)) == 3                           # every press still logged and stamped
    assert st["loop"]["fault_counts"]["memory"] > 5 and st["loop"]["fault_counts"]["loop"] > 5
    assert vt.hw.feeds - feeds > 100                           # the watchdog is fed pass after pass
    faults = [r for r in vt.fw.log.records() if r.kind == L.FAULT]
    assert sorted(set(r.image for r in faults)) == [1, 2] and len(faults) == 2   # rate-limited
    assert "FAULT" in vt.fw.message or vt.fw.message.startswith("#")


def test_a_failing_display_does_not_stop_the_timer():
    cs = presses(2)
    vt = VirtualTimer(contacts=cs)

    def dead(lines):
        raise OSError(5, "I2C bus error")
    vt.hw.show = dead
    vt.run_contacts()
    assert len(contacts_of(vt)) == 2 and vt.fw.status()["loop"]["fault_counts"]["loop"] > 0


def test_button_ring_overflow_is_counted_and_shown():
    t0 = T
    vt = VirtualTimer(contacts=[], start_us=t0, stalls=[(t0 + 20000000, t0 + 30000000)])
    for k in range(14):                                        # 14 bouncing presses: 84 edges in a stall
        vt.world.press(t0 + 21000000 + k * 500000, 200000)
    vt.advance_to(t0 + 31000000)
    st = vt.fw.status()
    assert st["loop"]["ring_overflow"]["button"] == 84 - 64
    assert st["loop"]["fault_counts"]["ring-overflow"] == 1
    assert st["loop"]["last_fault"] == "BUTTON: 20 edge(s) lost"


# -- identity ------------------------------------------------------------------------------------------

def test_device_id_from_the_boards_unique_id(tmp_path):
    class HW(Hardware):
        t = 0
        store = MemStore()

        def ticks_us(self):
            self.t += 1000
            return self.t

        def unique_id(self):
            return b"\xe6\x61\x38\x52\x83\x2a\x4f\x2e"
    assert Firmware(HW()).device_id == "LC-832A4F2E" == device_id_from(HW().unique_id())
    assert Firmware(HW(), device_id="LC-BOAT").device_id == "LC-BOAT"
    a = VirtualTimer(contacts=[], state_dir=str(tmp_path / "a"))
    again = VirtualTimer(contacts=[], state_dir=str(tmp_path / "a"))
    other = VirtualTimer(contacts=[], state_dir=str(tmp_path / "b"))
    assert a.device_id == again.device_id == a.fw.device_id != other.device_id
    assert a.device_id.startswith("LC-") and len(a.device_id) == 11
    assert VirtualTimer(contacts=[], state_dir=str(tmp_path / "a"), device_id="LC-SIM1").fw.device_id == "LC-SIM1"


def test_state_directory_problems_name_the_directory(tmp_path):
    from device.sim import SimError
    f = tmp_path / "file"
    f.write_text("x")
    with pytest.raises(SimError, match="state directory .*file"):
        VirtualTimer(contacts=[], state_dir=str(f))
    with pytest.raises(SimError, match="session file .*none.json not found"):
        VirtualTimer(session=str(tmp_path / "none.json"))


# -- the host understands what the timer now writes ----------------------------------------------------

def test_sync_gives_the_archives_contacts_their_late_stamps(tmp_path):
    from host import archive, sync
    from host.timer_client import TimerClient
    t0 = T
    cs = [(t0 + 10000000, "sun", "lower"), (t0 + 20500000, "sun", "lower"), (t0 + 90000000, "sun", "lower")]
    vt = VirtualTimer(contacts=cs, start_us=t0, first_fix_us=t0 + 60000000)
    vt.advance_to(t0 + 40000000)                   # synced once before the clock had time
    conn = archive.connect(str(tmp_path / "a.sqlite3"))
    sync.sync(TimerClient(vt.loopback()), conn, progress=False)
    rows = archive.contacts(conn)
    assert [r["quality"] for r in rows] == ["none", "none"]
    vt.run_contacts()
    res = sync.sync(TimerClient(vt.loopback()), conn, progress=False)
    assert res["new"] == 3                         # two stamps and the third contact
    rows = sorted(archive.contacts(conn), key=lambda r: r["seq"])
    assert [(r["seq"], r["quality"]) for r in rows] == [(1, "holdover"), (2, "holdover"), (5, "locked")]
    for r, (t, _, _) in zip(rows, cs):
        assert abs(r["utc_us"] - t) <= max(r["uncertainty_us"], 1000) and r["uncertainty_us"] < 5000
    stamps = conn.execute("SELECT seq, payload FROM events WHERE kind='stamp' ORDER BY seq").fetchall()
    assert [s[0] for s in stamps] == [3, 4] and '"stamps_seq": 1' in stamps[0][1]
    with archive.transaction(conn):
        assert archive.apply_stamps(conn, vt.device_id) == 0          # idempotent


def test_sync_takes_every_intact_record_around_a_damaged_one(tmp_path):
    from host import archive, sync
    from host.timer_client import TimerClient
    cs = presses(12, step_us=3000000)
    vt = VirtualTimer(contacts=cs, ticks_period=P22)
    vt.run_contacts()
    vt.base_store.files["log.bin.00000001"][33 * 5 + 9] ^= 0x40          # seq 6 damaged on flash
    vt.fw.log.open()                                                      # as at the next start-up
    conn = archive.connect(str(tmp_path / "a.sqlite3"))
    res = sync.sync(TimerClient(vt.loopback()), conn, progress=False)
    seqs = [r["seq"] for r in sorted(archive.contacts(conn), key=lambda r: r["seq"])]
    assert seqs == [1, 2, 3, 4, 5, 7, 8, 9, 10, 11, 12] and res["last_seq"] == 12
    assert vt.fw.log.confirmed_seq == 12 and vt.fw.log.records() == []


def test_a_file_too_big_for_the_flash_is_refused_and_the_timer_goes_on():
    from host.timer_client import TimerClient, DeviceRefused
    cs = presses(2, T + 60000000)
    vt = VirtualTimer(contacts=cs, start_us=T, storage_bytes=4000)
    vt.advance_to(T + 10000000)
    c = TimerClient(vt.loopback(faults=0.0))
    with pytest.raises(DeviceRefused) as e:
        c.push_file("almanac", bytes(range(256)) * 40)        # 10 KB into a 4 KB flash
    assert "storage: [Errno 28]" in str(e.value)
    assert vt.base_store.size("slot_almanac.part") < 0          # the partial file is gone
    vt.run_contacts()
    assert len(contacts_of(vt)) == 2 and c.status()["storage"]["error"] is None
