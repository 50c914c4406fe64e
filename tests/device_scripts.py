"""Scripts that run the timer's firmware core on MicroPython's unix port with a full log (``tests/mpu.py``).

Used by ``tests/test_device_micropython.py`` (the heap budget) and ``bench/bench_device.py`` (the
figures).  The setup is what a board holds before it boots: the code (frozen into flash on a board, so
loaded before the heap is measured) and a log filled to the shipped capacity (65536 bytes: 1985
records), copied fresh from a template for every run (the ACK removes its segments).
"""
import binascii

FULL_SETUP = r'''
import gc, json, os
from device import hal, log, clock, button, nmea, protocol, onboard, frame
from device.firmware import Firmware
import engine.timescale
TPL = %(tpl)r
ROOT = %(root)r
try:
    os.mkdir(ROOT)
except OSError:
    pass
for n in os.listdir(ROOT):
    os.remove(ROOT + "/" + n)
for n in os.listdir(TPL):
    with open(TPL + "/" + n, "rb") as f:
        data = f.read()
    with open(ROOT + "/" + n, "wb") as f:
        f.write(data)
    data = None
st = hal.FileStore(ROOT)
class HW(hal.Hardware):
    store = st
    t = 0
    def ticks_us(self):
        self.t = (self.t + 1000) %% hal.TICKS_PERIOD
        return self.t
    def ticks_ms(self):
        return self.t // 1000
hw = HW()
N = %(n)d
'''

# boot (recover and scan the whole log), then what a sync does: read it all in 31-record batches,
# the CRC proof of the whole range, and the ACK of every record
FULL_CALL = r'''
fw = Firmware(hw)
assert fw.log.next_seq == N + 1 and fw.log.free_records == 0 and fw.log.damaged == 0
crc = protocol.held_proof(fw.log, 1, N)
s = 1
got = 0
while s <= N:
    data = fw.log.read_raw(s, 31)
    got += len(data) // 33
    s = log.unpack_record(data, len(data) - 33).seq + 1
    data = None
fw.log.ack(N)
assert got == N and fw.log.records() == [] and fw.log.free_records > 1900
print(json.dumps({"crc": crc, "got": got}))
'''


def full_setup(tpl, root, n):
    """The setup script: the code loaded, the full log of ``tpl`` copied fresh into ``root``."""
    return FULL_SETUP % {"tpl": str(tpl), "root": str(root), "n": n}


def full_log(path):
    """A log filled to the shipped capacity (65536 bytes: 1985 records) in directory ``path``."""
    from device import log as L
    from device.hal import FileStore
    lg = L.Log(FileStore(str(path)), capacity=65536)
    n = 0
    while True:
        try:
            lg.append(L.CONTACT, 1880000000000000 + n * 7000000, 1, 30, n & 1, 0, 1 + n // 100)
        except L.LogFull:
            return n, binascii.crc32(b"".join(r.pack()[:-4] for r in lg.records()))
        n += 1


BOOT_CALL = r'''
fw = Firmware(hw)
assert fw.log.next_seq == N + 1 and fw.log.free_records == 0 and fw.log.damaged == 0
print(json.dumps({"next": fw.log.next_seq}))
'''
