"""``limbclock push --track``: a session's (or a ``limbclock-track/1`` file's) DR track goes to the
timer WITH the observer, as one ``limbclock-track/1`` file (device/PROTOCOL.md), and the timer
then plans the next contact from it.

Outside references: the reference session ``vectors/sessions/morning_run.json`` (contacts from
DE421 + ERFA topocentric places, Bennett refraction, dip 1.76' sqrt(h); vectors/generate_sessions.py)
times the first lower-limb contact of image i01 at 19:41:07.155 UTC on the true track; pushed the
true track and the session's observer, the timer must announce that contact within 1 s (the Sun
rises here at about 0.2'/s, so 1 s is 0.2' of altitude, a wide margin over the forward model's
0.002' against the same DE421 + ERFA geometry, DEVELOPERS.md; measured: 3 ms).  File bytes are checked with CRC-32 (ITU-T V.42 / IEEE 802.3,
``binascii.crc32``) and the JSON read back by RFC 8259 rules (``json``).
"""
import binascii
import json
import os
import subprocess
import sys

import pytest

from device.onboard import TRACK_FORMAT, parse_track, track_file
from device.sim import VirtualTimer
from engine.timescale import parse_utc
from host import sync
from host.timer_client import TimerClient
from waiting import HANG_GUARD_S

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
REF_LOWER_I01 = parse_utc("2030-10-20T19:41:07.155Z")    # morning_run.json contacts[1] (DE421 + ERFA)


def reference_session():
    with open(os.path.join(ROOT, "vectors", "sessions", "morning_run.json")) as f:
        doc = json.load(f)
    assert doc["contacts"][1]["utc"] == "2030-10-20T19:41:07.155Z" and doc["contacts"][1]["limb"] == "lower"
    # the navigator knows where she is (true track, known): the timer's plan is the reference's
    doc["track"] = dict(doc["truth"]["track"], known=True)
    return doc


def instrument_bytes(doc):
    return json.dumps(dict(doc["instrument"], format="limbclock-instrument/1")).encode()


def timer_before_first_contact():
    """A virtual timer holding no files, 4 min before the reference contact, its clock locked to GPS."""
    vt = VirtualTimer(contacts=[], start_us=REF_LOWER_I01 - 5 * 60 * 1000000)
    vt.advance_to(REF_LOWER_I01 - 4 * 60 * 1000000)
    assert vt.fw.status()["clock"]["state"] == "locked"
    return vt


def test_push_a_sessions_track_with_its_observer():
    doc = reference_session()
    vt = timer_before_first_contact()
    client = TimerClient(vt.loopback(faults=0.0))
    res = sync.push(client, "instrument", instrument_bytes(doc))
    assert res["next_contact"] is None and res["plan_problem"] == "no track: push it"
    res = sync.push(client, "track", json.dumps(doc).encode())
    # the bytes on the timer are the limbclock-track/1 file of the session's track and observer
    held = vt.base_store.read("slot_track")
    assert held == track_file(doc["track"], doc["observer"])
    assert res["size"] == len(held) and res["crc32"] == "%08x" % binascii.crc32(held)
    back = json.loads(held.decode())
    assert back["format"] == TRACK_FORMAT and back["observer"] == doc["observer"]
    assert parse_track(held) == (doc["track"], doc["observer"])
    # the timer plans the reference's next lower-limb contact (i01, rising) from it
    c = res["next_contact"]
    assert res["plan_problem"] is None and (c["image"], c["body"], c["limb"], c["direction"]) == \
        ("i01", "sun", "lower", "rising")
    assert abs(c["t_us"] - REF_LOWER_I01) < 1000000, (c["utc"], c["t_us"] - REF_LOWER_I01)
    st = client.status()
    assert st["display"][4] == "NEXT i01 SUN LL rise" and st["display"][5].startswith("in 0")


def test_push_a_track_file_is_sent_as_it_is_and_reread():
    doc = reference_session()
    vt = timer_before_first_contact()
    client = TimerClient(vt.loopback(faults=0.005, seed=4))     # a noisy link: retries, same bytes
    sync.push(client, "instrument", instrument_bytes(doc))
    tf = track_file(doc["track"], doc["observer"])
    res = sync.push(client, "track", tf)
    assert vt.base_store.read("slot_track") == tf and res["verified"] and client.retried > 0
    assert res["next_contact"]["image"] == "i01"


def test_push_before_the_timer_has_time_says_so():
    """Just switched on, no GPS time yet: the file is stored; the plan waits for the clock."""
    from host.cmd_sync import plan_text
    doc = reference_session()
    vt = VirtualTimer(contacts=[], start_us=REF_LOWER_I01 - 5 * 60 * 1000000)
    client = TimerClient(vt.loopback(faults=0.0))
    sync.push(client, "instrument", instrument_bytes(doc))
    res = sync.push(client, "track", json.dumps(doc).encode())
    assert res["clock_state"] == "none" and res["next_contact"] is None and res["plan_problem"] is None
    assert plan_text(res) == "the timer has no time yet (no GPS): it shows the next contact once it has"
    vt.advance_to(REF_LOWER_I01 - 4 * 60 * 1000000)           # the clock locks: the plan appears
    st = client.status()
    assert st["clock"]["state"] == "locked" and st["next_contact"]["image"] == "i01"


@pytest.mark.parametrize("text, message", [
    (b"not json", "track file: not valid JSON"),
    (b"[" * 5000 + b"]" * 5000, "track file: nested deeper than 32 levels"),
    (b'{"format": "limbclock-track/1", "lat_deg": 1e999}', "lat_deg: must be a finite number"),
    (b"[1, 2]", "track file: expected a JSON object"),
    (b'{"format": "limbclock-instrument/1"}', "format 'limbclock-instrument/1', expected"),
    (b'{"utc": "2030-10-20T18:00:00Z", "lat_deg": 1, "lon_deg": 2}', "track file: no 'format'"),
    (b'{"format": "limbclock-session/1", "track": {"utc": "2030-10-20T18:00:00Z", "lat_deg": 1, "lon_deg": 2}}',
     "session file: no 'observer' (eye_height_m)"),
    (b'{"format": "limbclock-session/1", "track": [1], "observer": {"eye_height_m": 2}}',
     "session file: 'track' must be an object"),
    (b'{"format": "limbclock-track/1", "utc": "2030-10-20T18:00:00Z", "lat_deg": 1, "lon_deg": 2}',
     "track file: no 'observer'"),
    (b'{"format": "limbclock-track/1", "utc": "2030-10-20T18:00:00Z", "lat_deg": 1, "lon_deg": 2, '
     b'"observer": {"eye_height_m": -1}}', "observer.eye_height_m"),
    (b'{"format": "limbclock-track/1", "utc": "2030-13-20T18:00:00Z", "lat_deg": 1, "lon_deg": 2, '
     b'"observer": {"eye_height_m": 2}}', "utc"),
])
def test_bad_track_files_are_refused_before_sending(text, message):
    with pytest.raises(ValueError) as e:
        sync.check_file("track", text)
    assert message in str(e.value)


def limbclock(*args):
    return subprocess.run([sys.executable, "-m", "host"] + list(args), cwd=ROOT, capture_output=True, text=True,
                          timeout=HANG_GUARD_S)


def test_cli_push_track_over_a_pseudo_terminal(tmp_path):
    doc = reference_session()
    session = tmp_path / "session.json"
    session.write_text(json.dumps(doc))
    inst = tmp_path / "instrument.json"
    inst.write_bytes(instrument_bytes(doc))
    vt = timer_before_first_contact()
    port = vt.start()
    try:
        p = limbclock("push", "--port", port, "--instrument", str(inst))
        assert p.returncode == 0, p.stderr
        assert "the timer shows no next contact: no track: push it" in p.stdout
        p = limbclock("push", "--port", port, "--track", str(session), "--json")
        assert p.returncode == 0, p.stderr
        res = json.loads(p.stdout)
        p = limbclock("push", "--port", port, "--track", str(session))
        assert p.returncode == 0, p.stderr
        q = limbclock("sync", "--port", port, "--db", str(tmp_path / "a.sqlite3"))
        assert q.returncode == 0, q.stderr
    finally:
        vt.stop()
    held = vt.base_store.read("slot_track")
    assert held == track_file(doc["track"], doc["observer"]) and res["crc32"] == "%08x" % binascii.crc32(held)
    assert res["next_contact"]["image"] == "i01" and abs(res["next_contact"]["t_us"] - REF_LOWER_I01) < 1000000
    assert "sent track (%d bytes)" % len(held) in p.stdout
    assert "the timer now shows the next contact: i01 sun lower limb, rising, at 2030-10-20T19:41:0" in p.stdout
    from host.cautions import CAUTION_TEXT
    assert p.stdout.rstrip("\n").endswith(CAUTION_TEXT)
    lines = q.stdout.splitlines()
    assert lines[0] == "created a new archive at %s" % (tmp_path / "a.sqlite3")
    assert lines[1].startswith("timer %s log %08x: 0 new record(s)" % (vt.device_id, vt.fw.log.log_id))
    assert q.stdout.rstrip("\n").endswith(CAUTION_TEXT)


def test_cli_refuses_a_track_without_observer_before_opening_the_port(tmp_path):
    bad = tmp_path / "track.json"
    bad.write_text(json.dumps({"format": "limbclock-session/1",
                               "track": {"utc": "2030-10-20T18:00:00Z", "lat_deg": 1.0, "lon_deg": 2.0}}))
    p = limbclock("push", "--port", "/dev/no-such-timer", "--track", str(bad))
    assert p.returncode == 2 and p.stdout == ""
    lines = p.stderr.strip().splitlines()
    assert len(lines) == 1 and "no 'observer'" in lines[0] and "no-such-timer" not in lines[0]
