"""Timer figures: link efficiency, sync time for 10,000 contacts over a pty, stamping error in holdover,
flash wear per contact and per sync, the heap at boot and at a whole-log ACK of a full log.

Wear: bytes and write operations the timer's storage sees (``simhw.FaultyStore`` counts them) for a
contact and for a whole sync of a full log (1985 records: 65 READ_LOG batches, each acknowledged).
Heap: the smallest contiguous free heap (``tests/mpu.py``, MicroPython's 64-bit unix port with a fixed
heap, code loaded first as a board freezes it) in which the timer boots with a full log, and boots, reads
it all, proves and acknowledges it; a 32-bit board needs about half (``bench onboard``).
"""
import os
import sys
import tempfile
import time

from device import clock as clk, frame, log as L, protocol as P
from device.nmea import Label
from device.sim import VirtualTimer
from device.simhw import Oscillator
from engine.timescale import parse_utc
from host.timer_client import TimerClient

T0 = parse_utc("2029-08-03T06:00:00Z")


def wire_per_record():
    body = P.LOG_BATCH_MAX
    req = len(frame.encode(P.READ_LOG, 1, b"\x00" * 6))
    resp = len(frame.encode(P.READ_LOG | P.RESPONSE, 1, b"\x00" * (P.LOG_HEAD + body * L.RECORD_LEN)))
    return body, (req + resp) / body


def sync(n, faults):
    vt = VirtualTimer(contacts=[], capacity=L.HEADER_LEN + (n + 10) * L.RECORD_LEN, link_faults=faults, seed=3,
                      start_us=T0)
    for i in range(n):
        vt.fw.log.append(L.CONTACT, T0 + i * 1000, 1, 30, i & 1, 0, 1)
    port = vt.start()
    try:
        c = TimerClient(port, timeout=0.2, retries=30)
        t = time.perf_counter()
        info = c.handshake()
        recs = [r.pack() for r in c.read_log(0)]
        c.ack(info["log_id"], 1, n, P.proof(recs))
        got = len(recs)
        dt = time.perf_counter() - t
        c.close()
    finally:
        vt.stop()
    return got, dt, c.requests, c.retried


def holdover(profile, drift_ppm, wander_ppm, lock_s=1800):
    osc = Oscillator(T0, drift_ppm, wander_ppm=wander_ppm, wander_period_s=6 * 3600.0,
                     aging_ppm_per_day=profile.aging_ppm_per_day / 2)
    c = clk.Clock(profile)
    for k in range(lock_s):
        t = T0 + k * 1000000
        c.on_pps(osc.elapsed_ticks(t))
        c.on_label(Label(t, True, "ZDA"), osc.elapsed_ticks(t + 150000))
    last = T0 + (lock_s - 1) * 1000000
    rows = []
    press = last - 300000
    utc, st, unc = c.stamp(osc.elapsed_ticks(press), osc.elapsed_ticks(last + 1))
    rows.append(("locked", utc - press, unc))
    for h in (1, 6, 24):
        p = last + h * 3600 * 1000000 + 250000
        utc, st, unc = c.stamp(osc.elapsed_ticks(p), osc.elapsed_ticks(p))
        rows.append(("%d h holdover" % h, utc - p, unc))
    return rows


def wear():
    """(bytes, ops) per contact; (bytes, ops, acks) for a sync of a full log; bytes the old compaction wrote."""
    from host import archive, sync as hsync
    cs = [(T0 + 120 * 1000000 + k * 5000000, "sun", "lower") for k in range(100)]
    vt = VirtualTimer(contacts=cs, start_us=T0)
    vt.advance_to(cs[0][0] - 2000000)
    w0, o0 = vt.flash.written, vt.flash.ops
    vt.advance_to(cs[-1][0] + 2000000)
    per = ((vt.flash.written - w0) / 100.0, (vt.flash.ops - o0) / 100.0)
    full = VirtualTimer(contacts=[], start_us=T0)
    n = 0
    while True:
        try:
            full.fw.log.append(L.CONTACT, T0 + n * 1000, 1, 30, n & 1, 0, 1)
        except L.LogFull:
            break
        n += 1
    w0, o0 = full.flash.written, full.flash.ops
    d = tempfile.mkdtemp()
    conn = archive.connect(os.path.join(d, "a.sqlite3"))
    res = hsync.sync(TimerClient(full.loopback(faults=0.0)), conn, progress=False)
    batches = res["batches"]
    old = 0
    left = n
    while left > 0:                         # the former ack: the remaining log copied under a new header
        left -= min(P.LOG_BATCH_MAX, left)
        old += 24 + left * L.RECORD_LEN
    return per, (full.flash.written - w0, full.flash.ops - o0, batches, n, res["new"]), old


def heap_figures():
    """Smallest free heap (bytes, 64-bit unix port) to boot with a full log, and to boot + sync + ACK it."""
    tests = os.path.join(os.path.dirname(os.path.dirname(os.path.abspath(__file__))), "tests")
    if tests not in sys.path:
        sys.path.insert(0, tests)
    import mpu
    import device_scripts as D
    if not mpu.available():
        return None
    d = tempfile.mkdtemp()
    n, _ = D.full_log(os.path.join(d, "tpl"))
    setup = D.full_setup(os.path.join(d, "tpl"), os.path.join(d, "lc"), n)
    boot = mpu.min_arena(setup, D.BOOT_CALL, lo=2048, hi=131072, step=1024)
    whole = mpu.min_arena(setup, D.FULL_CALL, lo=2048, hi=131072, step=1024)
    return n, boot, whole


def loop_cost():
    """CPython cost of one firmware pass, and how fast the virtual timer runs through GPS seconds."""
    vt = VirtualTimer(contacts=[(T0 + 120 * 1000000 + k * 5000000, "sun", "lower") for k in range(200)])
    t = time.perf_counter()
    vt.run_contacts()
    sim_s = (vt.world.t_us - vt.start_us) / 1e6
    wall = time.perf_counter() - t
    fw = vt.fw
    n = 20000
    t = time.perf_counter()
    for _ in range(n):
        fw.poll()
    per_us = (time.perf_counter() - t) / n * 1e6
    return sim_s, wall, per_us


def run():
    sim_s, wall, per_us = loop_cost()
    print("virtual timer: %.0f simulated s (200 contacts) in %.2f s: %.0fx real time; "
          "one idle firmware pass %.1f us on CPython" % (sim_s, wall, sim_s / wall, per_us))
    batch, per = wire_per_record()
    print("link: a record is %d bytes; READ_LOG of %d records costs %.1f bytes/record on the wire "
          "(%.2fx), request included" % (L.RECORD_LEN, batch, per, per / L.RECORD_LEN))
    for faults in (0.0, 0.001, 0.005):
        got, dt, req, retried = sync(10000, faults)
        print("sync 10,000 contacts over a pty, link faults %.3f: %d records in %.2f s (%d requests, %d retries)"
              % (faults, got, dt, req, retried))
    per, sy, old = wear()
    print("wear: a contact writes %.1f bytes in %.2f write operations (its 33-byte record; a segment file "
          "every 64)" % per)
    print("wear: a sync of a full log (%d records, %d batches, %d new in the archive) writes %d bytes in %d "
          "operations (two 28-byte heads per ACK, segments removed); the former whole-log compaction wrote "
          "%d bytes (%.0fx)" % (sy[3], sy[2], sy[4], sy[0], sy[1], old, old / float(max(1, sy[0]))))
    h = heap_figures()
    if h is None:
        print("heap: MicroPython unix port not installed: skipped")
    else:
        print("heap with a full log (%d records, 64 KB), smallest free heap on the 64-bit unix port (a 32-bit "
              "board about half): boot %d KB, boot + read all + CRC proof + ACK of every record %d KB "
              "(target: 64 KB board = 128 KB here)" % (h[0], h[1] // 1024, h[2] // 1024))
    cases = [("TCXO 1.5 ppm, 0.2 ppm wander", clk.TCXO, 1.5, 0.1),
             ("TCXO 1.5 ppm, at its wander bound", clk.TCXO, 1.5, 0.25),
             ("crystal 23 ppm, 2 ppm wander", clk.XO, 23.0, 1.0),
             ("crystal 23 ppm, 5 ppm wander", clk.XO, 23.0, 2.5),
             ("crystal 23 ppm, at its wander bound", clk.XO, 23.0, 5.0)]
    print("stamping error vs simulated truth (learned drift over 30 min of lock; wander = sinusoid, 6 h period;"
          " the default profile is the crystal's, clock.XO):")
    print("  %-38s %-16s %14s %14s %8s" % ("oscillator", "when", "error", "stated bound", "ratio"))
    for name, prof, d, w in cases:
        for when, err, unc in holdover(prof, d, w):
            print("  %-38s %-16s %11.3f ms %11.3f ms %8.2f" % (name, when, err / 1000.0, unc / 1000.0,
                                                               abs(err) / unc))
