"""The firmware core (nmea, clock, log, frame, protocol, firmware) under MicroPython gives CPython's results.

The same script runs under the MicroPython WebAssembly port (``tests/mpy.py``)
and under CPython; the clock and log results must be identical, and the
stamps must meet the same physical checks as on CPython (1 ms locked).  A full
log (the shipped 64 KB capacity) boots and is read, proven and acknowledged
whole within a board's heap on MicroPython's unix port with a fixed heap
(``tests/mpu.py``).
"""
import json

import pytest

import device_scripts as D
from mpy import run_micropython
from mpu import arena_script, run_unix
from mpu import fits as mpu_fits

SCRIPT = r'''
import json
from device import nmea, clock, log, frame, hal, protocol, board
from device.firmware import Firmware
from engine.timescale import parse_utc

ROOT = %(root)r
out = {}
T0 = parse_utc("2029-08-03T06:00:00Z")

def ticks(t):                      # a 17.5 ppm fast oscillator, integer arithmetic
    d = t - T0
    return d + d * 175 // 10000000

def zda(t):
    s = (t - T0) // 1000000
    body = "GNZDA,06%%02d%%02d.00,03,08,2029,00,00" %% (s // 60, s %% 60)
    return ("$%%s*%%02X\r\n" %% (body, nmea.checksum(body.encode()))).encode()

p = nmea.Parser()
c = clock.Clock(clock.XO)
for k in range(90):
    t = T0 + k * 1000000
    c.on_pps(ticks(t))
    for lab in p.feed(zda(t) + b"$GNRMC,060000.00,V,,,,,,,030829,,,N*00\r\n"):
        c.on_label(lab, ticks(t + 140000))
press = T0 + 85 * 1000000 + 432109
out["locked"] = list(c.stamp(ticks(press), ticks(T0 + 90 * 1000000)))
out["press"] = press
hold = T0 + 3600 * 1000000 + 7
out["holdover"] = list(c.stamp(ticks(hold), ticks(hold)))
out["hold_true"] = hold
out["drift_ppt"] = c.drift_ppt
out["nmea"] = [p.good, p.bad_checksum]

st = hal.FileStore(ROOT)
lg = log.Log(st, capacity=8000, id_source=lambda: 77)
for i in range(70):
    lg.append(log.CONTACT, T0 + i, 1, 30, i & 1, 0, 3, i %% 40)
st.append("log.bin.00000041", lg.get(2).pack()[:17])          # a torn write
seg = st.read("log.bin.00000001")
st.replace("log.bin.00000001", seg[:33 * 9 + 4] + bytes((seg[33 * 9 + 4] ^ 8,)) + seg[33 * 9 + 5:])   # seq 10 hit
lg2 = log.Log(st, capacity=8000)
out["recovered"] = lg2.recovered_bytes
out["damaged"] = [lg2.damaged, lg2.damaged_seqs, lg2.log_id]
lg2.ack(2)
lg2.ack(66)
lg3 = log.Log(st, capacity=8000)
out["records"] = [[r.seq, r.utc_us, r.body, r.image] for r in lg3.records()]
out["confirmed"] = lg3.confirmed_seq
out["files"] = sorted(st.names("log.bin"))
w = frame.encode(3, 9, bytes(range(256)) + bytes(300))
out["frame"] = [len(w), frame.Decoder().feed(b"xx\x00" + w)[0][2] == bytes(range(256)) + bytes(300)]

class HW(hal.Hardware):
    store = st
    t = 0
    def ticks_us(self):
        self.t = (self.t + 1000) %% hal.TICKS_PERIOD
        return self.t

fw = Firmware(HW(), device_id="LC-MP")
reply = frame.Decoder().feed(fw.proto.feed(frame.encode(protocol.HELLO, 1, b"\x01")))[0]
out["hello"] = [reply[0], json.loads(reply[2])["device_id"]]
out["board"] = board.machine is None
print(json.dumps(out))
'''


def test_core_under_micropython_matches_cpython(tmp_path):
    mp = json.loads(run_micropython(SCRIPT % {"root": "/lctest"}, packages=("engine", "device")).strip().splitlines()[-1])
    ns = {}
    import io
    import contextlib
    buf = io.StringIO()
    with contextlib.redirect_stdout(buf):
        exec(compile(SCRIPT % {"root": str(tmp_path / "lc")}, "core", "exec"), ns)
    cp = json.loads(buf.getvalue().strip().splitlines()[-1])
    assert mp == cp
    utc, state, unc = mp["locked"]
    assert state == 1 and abs(utc - mp["press"]) <= 2                # 1 ms goal, with margin to spare
    utc, state, unc = mp["holdover"]
    assert state == 2 and abs(utc - mp["hold_true"]) <= unc
    assert abs(mp["drift_ppt"] - 17500000) < 20000                   # 17.5 ppm learned to 0.02 ppm
    assert mp["nmea"] == [90, 90]                                     # the void RMC has a bad checksum here
    assert mp["recovered"] == 17 and mp["confirmed"] == 66 and mp["damaged"] == [1, [10], 77]
    assert [r[0] for r in mp["records"]] == [67, 68, 69, 70]
    assert mp["files"] == ["log.bin", "log.bin.00000041", "log.bin.b"]
    assert mp["frame"][1] and mp["hello"] == [0x81, "LC-MP"] and mp["board"]


# -- a full log on a board's heap (MicroPython's unix port with a fixed heap, tests/mpu.py) ------------

@pytest.mark.parametrize("free, fits", [(128 * 1024, True), (6 * 1024, False)])
def test_boot_and_whole_log_ack_of_a_full_log_fit_a_board_heap(tmp_path, free, fits):
    # a board's 64 KB of heap is 128 KB on this 64-bit port (tests/mpu.py); the code is loaded before
    # the arena is measured (a board freezes it into flash). Measured need: boot 10 KB, all of it 13 KB (bench device).
    n, crc = D.full_log(tmp_path / "tpl")
    assert n == 1985
    setup = D.full_setup(tmp_path / "tpl", tmp_path / "lc", n)
    if fits:
        ok, out = mpu_fits(setup, D.FULL_CALL, free)
        assert ok, out[-1500:]
        got = json.loads([x for x in out.splitlines() if x.startswith("{")][-1])
        assert got == {"crc": crc, "got": n}
    else:
        ok, out = run_unix(arena_script(setup, D.FULL_CALL, free), heap_bytes=free + (1 << 20))
        assert not ok and "MemoryError" in out                    # the harness can fail
