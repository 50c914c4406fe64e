"""Calibration at a known position, against contact times from the reference pipeline
(``vectors/schedule_contacts.json``: DE421 + ERFA, Bennett refraction, NA dip; see
``vectors/generate_schedule.py``).  The contacts are generated at the TRUE deviations;
the instrument given to calibration carries perturbed nominal values."""
import json
import math
import os
import random

import pytest

from engine import almanac, calibrate, instrument
from engine.timescale import format_utc, parse_utc

VECTORS = os.path.join(os.path.dirname(os.path.dirname(os.path.abspath(__file__))), "vectors",
                       "schedule_contacts.json")
with open(VECTORS) as _f:
    DOC = json.load(_f)
ALM = almanac.load()
TRUE = dict((i["id"], i["deviation_deg"]) for i in DOC["images"])
LADDER = instrument.ladder(DOC["plate_angles_deg"], 2)


def session_text(scn, contacts, images, delay_s=0.0, known=True, plate_angles=None):
    cs = [{"utc": format_utc(parse_utc(c["utc"]) + int(round(delay_s * 1e6)), 3), "body": c["body"],
           "limb": c["limb"], "image": c.get("image")} for c in contacts]
    inst = {"images": images}
    if plate_angles:
        inst["plate_angles_deg"] = plate_angles
    return json.dumps({"format": "limbclock-session/1", "observer": scn["observer"], "instrument": inst,
                       "track": dict(scn["track"], known=known), "contacts": cs})


def perturbed_images(seed, max_arcmin=3.0):
    rnd = random.Random(seed)
    return [{"id": im.id, "deviation_deg": round(im.deviation_deg + rnd.uniform(-max_arcmin, max_arcmin) / 60.0, 6),
             "coef": im.coef, "source": "nominal"} for im in LADDER.images]


@pytest.mark.parametrize("scn_k,seed,delay_s", [(0, 1, 0.3), (1, 2, 0.0), (2, 3, 0.18), (0, 4, -0.1)])
def test_recovers_deviations_and_delay_rising_and_setting(scn_k, seed, delay_s):
    scn = DOC["scenarios"][scn_k]
    text = session_text(scn, scn["contacts"], perturbed_images(seed), delay_s)
    r = calibrate.calibrate_session(text, ALM)
    assert r["reaction_delay_estimated"]
    assert abs(r["reaction_delay_s"] - delay_s) < 0.05
    timed = set(c["image"] for c in scn["contacts"])
    assert set(im["id"] for im in r["images"]) == timed
    for im in r["images"]:
        assert abs(im["deviation_deg"] - TRUE[im["id"]]) * 60.0 < 0.2, im
        assert 0.0 < im["sigma_arcmin"] < 0.5
    assert r["rejected"] == [] and r["warnings"] == []
    # plate angles of the invented instrument (2.7, 4.05 deg) from the calibrated deviations
    assert all(abs(a - b) * 60.0 < 0.2 for a, b in zip(r["plate_angles_deg"], DOC["plate_angles_deg"]))
    assert r["plate_fit_rms_arcmin"] < 0.2


def test_all_rising_holds_delay_and_warns():
    scn = DOC["scenarios"][0]
    rising = [c for c in scn["contacts"] if c["direction"] == "rising"]
    r = calibrate.calibrate_session(session_text(scn, rising, perturbed_images(5)), ALM)
    assert not r["reaction_delay_estimated"] and r["reaction_delay_s"] == 0.0
    assert r["reaction_delay_sigma_s"] is None
    assert any("rising and setting" in w for w in r["warnings"])
    for im in r["images"]:
        assert abs(im["deviation_deg"] - TRUE[im["id"]]) * 60.0 < 0.2
    # a delay that cannot be separated goes into the offsets: 0.3 s x rate (~0.2'/s) per image
    r2 = calibrate.calibrate_session(session_text(scn, rising, perturbed_images(5), 0.3), ALM)
    # expected: the altitude rate 0.25' cos(lat) sin(Zn) per second (derived: the time derivative of the
    # altitude formula at 15 deg/h of LHA; checked against ERFA in tests/test_sphere.py) times 0.3 s,
    # averaged over the image's contacts (Zn from the reference)
    lat = math.radians(scn["track"]["lat_deg"])
    for im in r2["images"]:
        zns = [c["zn_deg"] for c in rising if c["image"] == im["id"]]
        want = sum(0.25 * math.cos(lat) * abs(math.sin(math.radians(z))) * 0.3 for z in zns) / len(zns)
        assert abs((im["deviation_deg"] - TRUE[im["id"]]) * 60.0 - want) < 0.01


def test_blunder_rejected_and_unlabelled_identified():
    scn = DOC["scenarios"][0]
    cs = [dict(c) for c in scn["contacts"]]
    cs[5]["utc"] = format_utc(parse_utc(cs[5]["utc"]) + 40 * 1000000, 3)     # a contact stamped 40 s late
    cs[9]["image"] = None
    cs[20]["image"] = None
    r = calibrate.calibrate_session(session_text(scn, cs, perturbed_images(6)), ALM)
    assert r["rejected"] == [5]
    assert any("identified" in w for w in r["warnings"])
    for im in r["images"]:
        assert abs(im["deviation_deg"] - TRUE[im["id"]]) * 60.0 < 0.2


def test_track_must_be_known():
    scn = DOC["scenarios"][0]
    with pytest.raises(calibrate.CalibrationError, match="track.known"):
        calibrate.calibrate_session(session_text(scn, scn["contacts"], perturbed_images(1), known=False), ALM)


def test_cli_calibrate_json_and_write(tmp_path, capsys):
    from host.cli import main
    scn = DOC["scenarios"][1]
    path = tmp_path / "cal.json"
    path.write_text(session_text(scn, scn["contacts"], perturbed_images(9), 0.2))
    out = tmp_path / "inst.json"
    assert main(["calibrate", str(path), "--json", "--write", str(out)]) == 0
    d = json.loads(capsys.readouterr().out)
    for key in ("images", "reaction_delay_s", "reaction_delay_sigma_s", "plate_angles_deg", "plate_fit_rms_arcmin",
                "warnings"):
        assert key in d
    for im in d["images"]:
        assert set(["id", "deviation_deg", "sigma_arcmin", "contacts"]) <= set(im)
    inst = instrument.parse_instrument(out.read_text())
    cal = [im for im in inst.images if im.source == "calibrated"]
    assert cal and all(im.calibrated_utc for im in cal)
    assert abs(inst.reaction_delay_s - 0.2) < 0.05
    assert main(["calibrate", str(path)]) == 0
    text = capsys.readouterr().out
    assert "reaction delay" in text and "shade glass" in text
    assert main(["calibrate", str(path), "--delay", "soon"]) == 2
    assert "--delay" in capsys.readouterr().err
