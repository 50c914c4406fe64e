"""Image identification on sessions built from the reference pipeline's contact times
(``vectors/schedule_contacts.json``: DE421 + ERFA, Bennett refraction, NA dip; see
``vectors/generate_schedule.py``), with the DR moved off the true track."""
import json
import math
import os

import pytest
from hypothesis import given, settings, strategies as st

import engine
from engine import almanac, identify
from engine.session import parse_session
from engine.sphere import distance_nm, move_nm
from engine.timescale import parse_utc

VECTORS = os.path.join(os.path.dirname(os.path.dirname(os.path.abspath(__file__))), "vectors",
                       "schedule_contacts.json")
with open(VECTORS) as _f:
    DOC = json.load(_f)
ALM = almanac.load()


def session_text(scn, contacts, north_nm=0.0, east_nm=0.0, labelled=(), images=None, extra=None):
    tr = dict(scn["track"], known=False)
    tr["lat_deg"], tr["lon_deg"] = move_nm(tr["lat_deg"], tr["lon_deg"], north_nm, east_nm)
    cs = [{"utc": c["utc"], "body": c["body"], "limb": c["limb"], "image": c["image"] if k in labelled else None}
          for k, c in enumerate(contacts)]
    d = {"format": "limbclock-session/1", "observer": scn["observer"],
         "instrument": {"images": images or DOC["images"]}, "track": tr, "contacts": cs}
    if extra:
        d.update(extra)
    return json.dumps(d)


def windows(scn, size, count):
    cs = scn["contacts"]
    step = max(1, (len(cs) - size) // max(1, count - 1))
    return [cs[k:k + size] for k in range(0, len(cs) - size + 1, step)][:count]


@pytest.mark.parametrize("scn_k", [0, 1, 2])
def test_never_a_wrong_label_and_the_most_probable_is_right_with_dr_errors_up_to_30_nm(scn_k):
    # Five consecutive contacts (one azimuth, 20-40 minutes): the assignment shifted by one image
    # spacing (about 160 nmi toward or away from the body) fits as well, so only the DR tells them
    # apart.  The most probable assignment is the truth every time; a label is either the truth or
    # withheld (confidence below 0.99 because the DR may be hundreds of miles off), never wrong.
    scn = DOC["scenarios"][scn_k]
    runs = decided = 0
    for pick in windows(scn, 5, 4):
        truth = [c["image"] for c in pick]
        withheld = 0
        for err in (0.0, 10.0, 20.0, 30.0):
            for bearing in (0.0, 135.0, 250.0):
                north, east = err * math.cos(math.radians(bearing)), err * math.sin(math.radians(bearing))
                s = parse_session(session_text(scn, pick, north, east))
                r = identify.identify(s, ALM)
                assert r["hypotheses"][0]["images"] == truth, (err, bearing, r["hypotheses"][:2])
                assert r["hypotheses"][0]["probability"] > 0.8
                for c, want in zip(r["contacts"], truth):
                    assert c["image"] in (None, want) and c["confidence"] > 0.8
                    assert c["ambiguous"] == (c["image"] is None)
                withheld += sum(1 for c in r["contacts"] if c["image"] is None)
                runs += 1
        decided += withheld == 0
    assert runs == 48
    # windows whose contacts decide on their own (the Sun climbing faster, azimuths spread more)
    assert decided == (2, 2, 0)[scn_k]


def test_a_window_that_rests_on_the_dr_is_fixed_at_the_truth_with_a_doubt():
    scn = DOC["scenarios"][2]
    pick = windows(scn, 5, 4)[1]
    text = session_text(scn, pick, 20.0, -15.0)
    r = identify.identify(parse_session(text), ALM)
    assert all(c["ambiguous"] for c in r["contacts"])
    assert len(r["candidates"]) >= 2 and r["candidates"][0]["probability"] > 0.8
    res = engine.reduce_session(text, ALM)
    assert res["images"] == [c["image"] for c in pick]
    codes = [d["code"] for d in res["doubts"]]
    assert "identification_ambiguous" in codes and "candidates" in codes
    assert res["identification"]["fallback"] is True
    t = parse_utc(res["utc"])
    lat, lon = parse_session(session_text(scn, pick)).track.position_at(t)
    assert distance_nm(res["lat_deg"], res["lon_deg"], lat, lon) < 0.5


@settings(max_examples=15, deadline=None)
@given(perm=st.permutations(list(range(8))), start=st.integers(0, 40), err=st.floats(0.0, 30.0),
       bearing=st.floats(0.0, 360.0))
def test_relabelling_the_instrument_relabels_the_result(perm, start, err, bearing):
    scn = DOC["scenarios"][0]
    pick = scn["contacts"][start:start + 5]
    north, east = err * math.cos(math.radians(bearing)), err * math.sin(math.radians(bearing))
    ids = [im["id"] for im in DOC["images"]]
    rename = dict((ids[k], "img-%s" % ids[perm[k]][1:]) for k in range(8))
    images = [{"id": rename[im["id"]], "deviation_deg": im["deviation_deg"]} for im in DOC["images"]]
    images = [images[perm[k]] for k in range(8)]                       # and shuffle their order
    base = identify.identify(parse_session(session_text(scn, pick, north, east)), ALM)
    moved = identify.identify(parse_session(session_text(scn, pick, north, east, images=images)), ALM)
    assert [rename.get(c["image"]) for c in base["contacts"]] == [c["image"] for c in moved["contacts"]]
    assert [c["ambiguous"] for c in base["contacts"]] == [c["ambiguous"] for c in moved["contacts"]]


def test_ambiguous_when_the_pattern_cannot_tell():
    # Three rising Sun contacts on one azimuth and a DR said to be good to only 500 nmi: shifting the
    # position one image spacing toward the Sun explains them as well -> no guess, alternatives listed.
    scn = DOC["scenarios"][0]
    pick = [c for c in scn["contacts"] if c["body"] == "sun" and c["limb"] == "lower"][2:5]
    s = parse_session(session_text(scn, pick, extra={"dr_sigma_nm": 500.0}))
    r = identify.identify(s, ALM, radius_nm=400.0)
    assert all(c["ambiguous"] and c["image"] is None and c["alternatives"] for c in r["contacts"])
    assert len(r["hypotheses"]) >= 2 and r["hypotheses"][1]["probability"] > 0.01
    truth = [c["image"] for c in pick]
    assert truth in [h["images"] for h in r["hypotheses"]]


def test_mislabelled_contact_is_reported():
    scn = DOC["scenarios"][1]
    pick = scn["contacts"][10:16]
    text = json.loads(session_text(scn, pick, 12.0, -9.0, labelled=range(6)))
    text["contacts"][2]["image"] = "i08" if pick[2]["image"] != "i08" else "i01"
    r = identify.identify(parse_session(json.dumps(text)), ALM)
    assert [m["index"] for m in r["misfit_labels"]] == [2]
    assert r["misfit_labels"][0]["fits"] == pick[2]["image"]


def test_reduce_session_identifies_before_the_fix():
    scn = DOC["scenarios"][0]
    pick = [c for c in scn["contacts"] if "2026-08-03T08" <= c["utc"] < "2026-08-03T10:05"]
    text = session_text(scn, pick, 20.0, -15.0, labelled=(0,))
    res = engine.reduce_session(text, ALM)
    assert res["images"] == [c["image"] for c in pick]
    assert any(w.startswith("contacts identified (lowest confidence 0.99") and " as %s" % pick[1]["image"] in w
               for w in res["warnings"])
    # the fix lands on the true track position at the fix epoch (reference contacts, no noise)
    t = parse_utc(res["utc"])
    s = parse_session(session_text(scn, pick))
    lat, lon = s.track.position_at(t)
    assert distance_nm(res["lat_deg"], res["lon_deg"], lat, lon) < 0.5


def test_cold_start_finds_the_ship():
    # DR on the other side of the world; Sun rising in the east and Moon setting in the west
    scn = DOC["scenarios"][0]
    pick = [c for c in scn["contacts"] if c["limb"] == "lower" and "2026-08-03T08" <= c["utc"] < "2026-08-03T10:10"]
    s = parse_session(session_text(scn, pick))
    truth = s.track.position_at(max(c.t_us for c in s.contacts))
    far = json.loads(session_text(scn, pick))
    far["track"]["lat_deg"], far["track"]["lon_deg"] = -20.0, 100.0
    cands = identify.cold_start(parse_session(json.dumps(far)), ALM, top=3)
    best = cands[0]
    # the far DR moves along the same course and speed, so the answer is the true track's position
    assert distance_nm(best["lat_deg"], best["lon_deg"], truth[0], truth[1]) < 2.0
    assert best["images"] == [c["image"] for c in pick] and best["rms_arcmin"] < 0.5
    assert all(c["rms_arcmin"] > 5.0 for c in cands[1:])


def test_identify_and_calibrate_under_micropython():
    from engine import calibrate
    from mpy import run_micropython
    scn = DOC["scenarios"][0]
    pick = scn["contacts"][10:15]
    sess = session_text(scn, pick, 15.0, 10.0)
    cal = json.loads(session_text(scn, scn["contacts"][:24], labelled=range(24)))
    cal["track"]["known"] = True
    cal = json.dumps(cal)
    code = ("import json\nfrom engine import almanac, identify, calibrate\nfrom engine.session import parse_session\n"
            "alm = almanac.load()\n"
            "r = identify.identify(parse_session(%r), alm)\n"
            "print(json.dumps([c['image'] for c in r['contacts']]))\n"
            "c = calibrate.calibrate_session(%r, alm)\n"
            "print(json.dumps([[i['id'], i['deviation_deg']] for i in c['images']] + [c['reaction_delay_s']]))\n"
            % (sess, cal))
    out = run_micropython(code).strip().splitlines()
    assert json.loads(out[-2]) == [c["image"] for c in pick]
    got = json.loads(out[-1])
    ref = calibrate.calibrate_session(cal, ALM)
    for (iid, dev), im in zip(got[:-1], ref["images"]):
        assert iid == im["id"] and abs(dev - im["deviation_deg"]) * 60 < 0.01
    assert abs(got[-1] - ref["reaction_delay_s"]) < 0.01


def test_cli_identify(tmp_path, capsys):
    from host.cli import main
    scn = DOC["scenarios"][2]
    pick = scn["contacts"][20:26]
    path = tmp_path / "s.json"
    path.write_text(session_text(scn, pick, -18.0, 11.0, labelled=(0,)))
    assert main(["identify", str(path), "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert [c["image"] for c in d["contacts"]] == [c["image"] for c in pick]
    assert d["contacts"][0]["given"] and not d["contacts"][1]["given"]
    assert main(["identify", str(path)]) == 0
    out = capsys.readouterr().out
    assert pick[3]["image"] in out and "shade glass" in out
    assert main(["identify", str(path), "--dr-sigma", "0"]) == 2
    assert "--dr-sigma" in capsys.readouterr().err
