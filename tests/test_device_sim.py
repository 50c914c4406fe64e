"""The virtual timer: restarts with a state directory, power cut at a moment, the `limbclock sim` command."""
import json
import os
import signal
import subprocess
import sys

import pytest

from device import log as L
from device.sim import VirtualTimer, SimError, read_contacts
from engine.timescale import parse_utc
from host.timer_client import TimerClient
from waiting import HANG_GUARD_S, wait_for

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
T = parse_utc("2029-08-03T06:41:12.250Z")


def session(n, step_s=4):
    return {"format": "limbclock-session/1",
            "contacts": [{"utc": "2029-08-03T06:%02d:%06.3fZ" % (41 + (12 + k * step_s) // 60, (12.25 + k * step_s) % 60),
                          "body": "sun", "limb": "lower", "image": None} for k in range(n)]}


def test_state_survives_restart_without_pressing_again(tmp_path):
    doc = session(5)
    vt = VirtualTimer(session=doc, state_dir=str(tmp_path))
    vt.run_contacts()
    first = vt.fw.log.records()
    assert len(first) == 5
    vt.fw.log.ack(2)                                   # the host synced two of them
    vt2 = VirtualTimer(session=doc, state_dir=str(tmp_path))
    assert vt2.already_pressed == 5 and vt2.contacts == []
    vt2.run_contacts()
    assert vt2.fw.log.records() == first[2:] and vt2.fw.log.confirmed_seq == 2
    # a longer session file: only the new contacts are pressed, numbering goes on
    vt3 = VirtualTimer(session=session(7), state_dir=str(tmp_path))
    vt3.run_contacts()
    assert [r.seq for r in vt3.fw.log.records()] == [3, 4, 5, 6, 7]


def test_power_cut_at_a_moment_loses_the_press_the_timer_never_beeped_for():
    contacts = [(T + k * 4000000, "sun", "lower") for k in range(4)]
    # power fails 0.5 s after the second press, before its stamp (next PPS edge) was written
    vt = VirtualTimer(contacts=contacts, power_cut_at_us=contacts[1][0] + 500000, restart_after_us=1000000)
    vt.run_contacts()
    recs = vt.fw.log.records()
    assert vt.power_cuts == 1
    got = [r.utc_us for r in recs]
    assert len(got) == 3 and abs(got[0] - contacts[0][0]) <= 1000
    # after the restart the clock relocks within a few seconds and the later presses are stamped
    assert abs(got[2] - contacts[3][0]) <= 1000


def test_session_contacts_errors():
    with pytest.raises(SimError):
        read_contacts({"contacts": [{"body": "sun"}]})
    with pytest.raises(SimError):
        read_contacts({"contacts": [{"utc": "2029-08-03T06:41:12Z", "body": "mars"}]})
    with pytest.raises(ValueError):
        read_contacts({"contacts": [{"utc": "2029-08-03 noon"}]})
    assert read_contacts(json.dumps(session(2)))[1][0] == T + 4000000


def test_sim_command_prints_port_first_and_stops_on_sigterm(tmp_path):
    sess = tmp_path / "s.json"
    sess.write_text(json.dumps(session(3)))
    disp = tmp_path / "display.txt"
    proc = subprocess.Popen([sys.executable, "-m", "host", "sim", "--session", str(sess), "--state",
                             str(tmp_path / "st"), "--display-file", str(disp), "--json"],
                            cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        port = proc.stdout.readline().strip()
        assert port.startswith("/dev/")
        with TimerClient(port, timeout=1.0, retries=10) as c:
            assert c.handshake()["protocol"] == 2
            wait_for(lambda: c.status()["log"]["last_seq"] == 3, "the virtual timer to press its 3 contacts")
            recs = list(c.read_log(1))
        assert [r.kind for r in recs] == [L.CONTACT] * 3
        assert abs(recs[2].utc_us - (T + 8000000)) <= 1000
        assert "LOCKED" in disp.read_text()
    finally:
        proc.send_signal(signal.SIGTERM)
        out, err = proc.communicate(timeout=HANG_GUARD_S)
    assert proc.returncode == 0, err
    summary = json.loads(out.strip().splitlines()[-1])
    assert summary["last_seq"] == 3 and summary["power_cuts"] == 0


def test_sim_command_bad_options(tmp_path):
    sess = tmp_path / "s.json"
    sess.write_text(json.dumps(session(1)))
    p = subprocess.run([sys.executable, "-m", "host", "sim", "--session", str(sess), "--link-faults", "0.9"],
                       cwd=ROOT, capture_output=True, text=True, timeout=HANG_GUARD_S)
    assert p.returncode == 2 and "--link-faults" in p.stderr and len(p.stderr.strip().splitlines()) == 1
    p = subprocess.run([sys.executable, "-m", "host", "sim", "--session", str(tmp_path / "none.json")],
                       cwd=ROOT, capture_output=True, text=True, timeout=HANG_GUARD_S)
    assert p.returncode == 2 and "none.json" in p.stderr


def test_sim_command_names_a_bad_state_directory(tmp_path):
    sess = tmp_path / "s.json"
    sess.write_text(json.dumps(session(1)))
    blocker = tmp_path / "state"
    blocker.write_text("a file where the state directory should be")
    p = subprocess.run([sys.executable, "-m", "host", "sim", "--session", str(sess), "--state", str(blocker)],
                       cwd=ROOT, capture_output=True, text=True, timeout=HANG_GUARD_S)
    assert p.returncode == 2 and len(p.stderr.strip().splitlines()) == 1
    assert "state directory" in p.stderr and str(blocker) in p.stderr and "session file" not in p.stderr


def test_sim_command_with_a_full_flash_holds_the_presses_and_says_so(tmp_path):
    sess = tmp_path / "s.json"
    sess.write_text(json.dumps(session(3)))
    proc = subprocess.Popen([sys.executable, "-m", "host", "sim", "--session", str(sess), "--flash-bytes", "160",
                             "--state", str(tmp_path / "st")],
                            cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        port = proc.stdout.readline().strip()
        with TimerClient(port, timeout=1.0, retries=10) as c:
            wait_for(lambda: c.status()["storage"]["held"] > 0, "the virtual timer to fill its flash")
            st = c.status()
        assert st["storage"]["error"] == "flash full" and st["display"][3].startswith("FLASH FULL: SYNC!")
    finally:
        proc.send_signal(signal.SIGTERM)
        out, err = proc.communicate(timeout=HANG_GUARD_S)
    assert proc.returncode == 0 and "Traceback" not in err, err
    assert "press(es) held in its memory" in out
