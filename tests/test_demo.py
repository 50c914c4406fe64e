"""The end-to-end demo (``limbclock demo``) and the archive commands on its output.

The demo's data are invented (host/demo.py), so its truth is the scenario itself: the fix
must land nearer the true position than the dead reckoning does.  The files it writes
are checked against their standards: PNG signature (ISO/IEC 15948:2004 section 5.2),
SVG namespace (W3C SVG 1.1), GPX 1.1 namespace and structure (topografix.com/GPX/1/1),
GeoJSON coordinate order lon, lat (RFC 7946 section 3.1.1), CSV (RFC 4180) with one row
per contact; the session file is read back by the engine's own reader (the ``limbclock-session/1``
contract in DEVELOPERS.md).
"""
import csv
import json
import os
import subprocess
import sys
import xml.etree.ElementTree as ET

import pytest

from engine.session import parse_session
from host import archive
from waiting import HANG_GUARD_S

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
GPX = "{http://www.topografix.com/GPX/1/1}"


def limbclock(*args, timeout=HANG_GUARD_S):     # hang guard only (the demo's time: make bench, bench_host)
    p = subprocess.run([sys.executable, "-m", "host"] + list(args), cwd=ROOT, capture_output=True, text=True,
                       timeout=timeout)
    assert p.returncode == 0, p.stderr
    return p.stdout


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    out = str(tmp_path_factory.mktemp("demo") / "out")
    p = subprocess.run([sys.executable, "-m", "host", "demo", "--out", out, "--json"], cwd=ROOT,
                       capture_output=True, text=True, timeout=HANG_GUARD_S)            # hang guard only
    assert p.returncode == 0, p.stderr
    return out, p.stderr, json.loads(p.stdout)


def test_demo_runs_the_whole_chain(demo):
    out, human, s = demo
    assert s["sync"]["via"] == "virtual timer" and s["sync"]["new"] >= s["contacts"] >= 10
    assert s["sync"]["again"] == {"new": 0, "duplicates": 0}
    # the fix beats the dead reckoning against the scenario's truth
    assert s["error_nm"] < s["dr_error_nm"] and s["error_nm"] < 4.0
    # identification gave the unlabelled contacts their images; the mislabelled one was read as the
    # image it fits
    assert s["labels_correct"] == s["contacts"]
    assert "fix error" in human and "shade glass" in human.splitlines()[-3]


def test_demo_shows_the_timers_own_display_and_fix(demo):
    """The instrument and the DR track + observer reach the timer over the link (verified by CRC-32,
    ITU-T V.42 / IEEE 802.3); the timer shows the countdown to its next contact and, after the fix
    gesture, its own fix, which the host's engine reproduces from the very session the timer reduced.
    Against the host's fix of the archived session the one difference is the instrument's reaction
    delay, which the archive's session file does not carry: 0.2 s at the Sun's hour-angle rate of
    15 deg/h (common practice) = 0.05' of longitude = 0.035 nmi at 45 N."""
    import re
    from engine import timescale
    from host import demo as scenario
    out, human, s = demo
    timer, ob = s["timer"], s["onboard"]
    assert [p["slot"] for p in timer["pushed"]] == ["instrument", "track"]
    with open(os.path.join(out, "instrument.json"), "rb") as f:
        assert timer["pushed"][0]["size"] == len(f.read())
    assert "pushed track (timer-presses.json" in human
    # the timer's storage holds the instrument as sent and the DR track WITH the observer
    from device.onboard import parse_track, track_file
    flash = os.path.join(out, "timer-state", "flash")
    with open(os.path.join(flash, "slot_instrument"), "rb") as f, open(os.path.join(out, "instrument.json"), "rb") as g:
        assert f.read() == g.read()
    with open(os.path.join(flash, "slot_track"), "rb") as f:
        held = f.read()
    assert held == track_file(scenario.DR_TRACK, scenario.OBSERVER)
    assert parse_track(held) == (scenario.DR_TRACK, scenario.OBSERVER)
    assert timer["pushed"][1]["size"] == len(held)
    # the countdown before the first contact announces it (DR 4 nmi off: within 90 s of the press)
    first = timer["display"][0]
    assert first["when"] == "before the first contact"
    m = re.match(r"in (\d\d):(\d\d) Zn (\d\d\d)$", first["lines"][5])
    assert first["lines"][4] == "NEXT i01 SUN LL rise" and m, first["lines"]
    announced = timescale.parse_utc(first["utc"]) + (int(m.group(1)) * 60 + int(m.group(2))) * 1000000
    from engine import almanac
    timed = scenario.contact_times(almanac.load(), scenario.build_instrument()[1])
    assert timed[0]["image"] == "i01" and abs(announced - timed[0]["utc_us"]) < 90000000
    assert abs(int(m.group(3)) - timed[0]["zn_deg"]) < 2
    assert "[timer a minute after a contact]" in human and "NEXT" in timer["display"][1]["lines"][4]
    # the fix gesture: the display and the status carry the timer's own fix
    shown = timer["display"][2]["lines"]
    f = ob["fix"]
    # the scenario's run of 7.8 h on an assumed course and speed: the timer's fix says its doubt too
    assert f["doubts"] == ["long_run"]
    assert shown[3] == "FIX %d used %d rej DOUBT long_run" % (f["contacts_used"], f["rejected"])
    from device.onboard import fmt_position
    assert shown[4] == fmt_position(f["lat_deg"], f["lon_deg"]) and shown[5].startswith("95% ")
    assert f["contacts_used"] + f["rejected"] == s["contacts"] and f["utc"] == s["fix"]["utc"]
    assert "the timer's own fix:" in human
    assert ob["same_content_nm"] < 1e-3
    assert ob["reaction_delay_s"] == scenario.REACTION_S
    # the archive's session carries the calibrated instrument's reaction delay as the timer's does, so the
    # two reductions (notes on the host, identification alone on the timer) agree
    with open(os.path.join(out, "session.json")) as fh:
        assert json.load(fh)["instrument"]["reaction_delay_s"] == scenario.REACTION_S
    assert ob["distance_nm"] < 0.005, ob["distance_nm"]
    # both fixes beat the DR against the scenario's truth
    assert ob["error_nm"] < s["dr_error_nm"]


def test_demo_files(demo):
    out, _, s = demo
    fix = s["fix"]
    for name in ("plotting-sheet.png", "contact-timeline.png"):
        with open(os.path.join(out, name), "rb") as f:
            assert f.read(8) == b"\x89PNG\r\n\x1a\n"
        assert os.path.getsize(os.path.join(out, name)) > 30000
    assert ET.parse(os.path.join(out, "plotting-sheet.svg")).getroot().tag == "{http://www.w3.org/2000/svg}svg"
    gpx = ET.parse(os.path.join(out, "fixes.gpx")).getroot()
    assert gpx.tag == GPX + "gpx" and gpx.get("version") == "1.1"
    wpt = gpx.find(GPX + "wpt")
    assert float(wpt.get("lat")) == pytest.approx(fix["lat_deg"], abs=1e-7)
    assert float(wpt.get("lon")) == pytest.approx(fix["lon_deg"], abs=1e-7)
    assert len(gpx.findall(GPX + "trk/" + GPX + "trkseg/" + GPX + "trkpt")) > 50
    with open(os.path.join(out, "fixes.geojson")) as f:
        gj = json.load(f)
    point = [ft for ft in gj["features"] if ft["geometry"]["type"] == "Point"][0]
    assert point["geometry"]["coordinates"] == pytest.approx([fix["lon_deg"], fix["lat_deg"]], abs=1e-7)
    lops = [ft for ft in gj["features"] if ft["properties"]["kind"] == "lop"]
    assert len(lops) == sum(1 for c in fix["contacts"] if c.get("residual_nm") is not None)
    with open(os.path.join(out, "contacts.csv"), newline="") as f:
        rows = list(csv.DictReader(f))
    assert len(rows) == s["contacts"] and all(r["device"] == "LC-DEMO-07" for r in rows)
    with open(os.path.join(out, "session.json"), "rb") as f:
        session = parse_session(f.read())
    assert len(session.contacts) == s["contacts"] and session.track.known is False


def test_archive_commands_on_the_demo_archive(demo):
    out, _, s = demo
    db = os.path.join(out, "archive.sqlite3")
    conn = archive.connect(db)
    assert archive.integrity_ok(conn)
    conn.close()
    exp = json.loads(limbclock("export", "--db", db, "--json"))
    assert len(exp["contacts"]) == s["contacts"]
    assert set(("utc", "seq", "device", "void")) <= set(exp["contacts"][0])
    assert [c["seq"] for c in exp["contacts"]] == sorted(c["seq"] for c in exp["contacts"])
    listing = json.loads(limbclock("session", "--db", db, "--json"))
    sid = listing[0]["session_id"]
    assert listing[0]["contacts"] == s["contacts"] and listing[0]["fixes"] == 1
    again = json.loads(limbclock("archive", "fix", "--db", db, "--session", str(sid), "--json"))
    # labels identified in the first run are now in the archive; the fix is the same position
    assert again["lat_deg"] == pytest.approx(s["fix"]["lat_deg"], abs=1e-6)
    assert again["lon_deg"] == pytest.approx(s["fix"]["lon_deg"], abs=1e-6)
    assert json.loads(limbclock("session", "--db", db, "--json"))[0]["fixes"] == 2
    human = limbclock("export", "--db", db, "--csv", os.path.join(out, "again"), "--sessions",
                      os.path.join(out, "sessions"), "--plots", os.path.join(out, "plots"))
    assert sorted(os.listdir(os.path.join(out, "plots"))) == ["sheet-1.png", "sheet-2.png", "timeline-1.png",
                                                              "timeline-2.png"]
    assert "2 fix(es)" in human and "wrote" in human
    with open(os.path.join(out, "sessions", "session-%d.json" % sid), "rb") as f:
        again_session = parse_session(f.read())          # the engine's reader accepts it
    assert len(again_session.contacts) == s["contacts"]


def test_plan_and_calibrate_from_the_archive(demo, tmp_path):
    """``archive plan`` builds the same session as the file the demo wrote (same predictions as
    ``limbclock plan``); ``archive calibrate`` at the scenario's true track recovers the true
    deviations of the invented instrument within 1' (noise: 0.4' altitude, 0.3 s timing)."""
    import shutil
    from host import demo as scenario
    out, _, s = demo
    db = str(tmp_path / "cal.sqlite3")
    shutil.copy(os.path.join(out, "archive.sqlite3"), db)
    t_from, t_to = "2032-01-18T08:00:00Z", "2032-01-18T17:00:00Z"
    a = json.loads(limbclock("archive", "plan", "--db", db, "--session", "1", "--from", t_from, "--to", t_to,
                             "--json"))
    b = json.loads(limbclock("plan", os.path.join(out, "session.json"), "--from", t_from, "--to", t_to, "--json"))
    assert [(c["utc"], c["image"]) for c in a["contacts"]] == [(c["utc"], c["image"]) for c in b["contacts"]]
    assert len(a["contacts"]) >= 14
    # the navigator corrects the mislabelled note first (the fix read it as the image it fits)
    from engine import almanac
    timed = scenario.contact_times(almanac.load(), scenario.build_instrument()[1])
    wrong = [k for k, c in enumerate(timed) if c["note"] is not None and c["note"] != c["image"]]
    assert len(wrong) == 1 and wrong[0] not in s["fix"]["rejected"]
    relabelled = s["fix"]["contacts"][wrong[0]]
    assert relabelled["labelled"]["image"] == timed[wrong[0]]["note"]
    assert relabelled["image"] == timed[wrong[0]]["image"] and relabelled["used"]
    with open(os.path.join(out, "session.json")) as f:
        seq = json.load(f)["contacts"][wrong[0]]["seq"]
    t = scenario.TRUE_TRACK
    limbclock("session", "--db", db, "--session", "1", "--known",
              "--label", "%d=%s" % (seq, timed[wrong[0]]["image"]),
              "--track", "%s,%.6f,%.6f,%.1f,%.1f" % (t["utc"], t["lat_deg"], t["lon_deg"], t["course_deg"], t["speed_kn"]))
    cal = json.loads(limbclock("archive", "calibrate", "--db", db, "--session", "1", "--json"))
    truth = scenario.build_instrument()[1]
    got = dict((im["id"], im["deviation_deg"]) for im in cal["images"] if im.get("contacts"))
    assert len(got) >= 6
    for iid, dev in got.items():
        assert abs(dev - truth[iid]) * 60 < 1.0, (iid, dev, truth[iid])
    conn = archive.connect(db)
    assert len(archive.calibrations(conn, 1)) == 1
    conn.close()
