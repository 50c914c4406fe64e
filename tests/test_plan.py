"""Contact schedule against the reference pipeline's contact times.

Reference: ``vectors/schedule_contacts.json`` written by ``vectors/generate_schedule.py``
(JPL DE421 + ERFA exact topocentric geometry, Bennett's refined refraction, the
Nautical Almanac dip, an exact rhumb line; all independent of the engine)."""
import json
import os

import numpy as np
import pytest

from engine import almanac, plan
from engine.model import Observer, Track
from engine.timescale import format_utc, parse_utc
from mpy import run_micropython
from vectors import generate_schedule as gen

VECTORS = os.path.join(os.path.dirname(os.path.dirname(os.path.abspath(__file__))), "vectors",
                       "schedule_contacts.json")
with open(VECTORS) as _f:
    DOC = json.load(_f)
ALM = almanac.load()
IMAGES = [(i["id"], i["deviation_deg"]) for i in DOC["images"]]


def scenario(s):
    t = s["track"]
    o = s["observer"]
    tr = Track(parse_utc(t["utc"]), t["lat_deg"], t["lon_deg"], t["course_deg"], t["speed_kn"])
    return tr, Observer(o["eye_height_m"], o["temperature_c"], o["pressure_hpa"])


@pytest.mark.parametrize("s", DOC["scenarios"], ids=[s["name"] for s in DOC["scenarios"]])
def test_schedule_matches_reference_within_one_second(s):
    tr, ob = scenario(s)
    got = plan.schedule(ALM, IMAGES, tr, ob, parse_utc(s["from"]), parse_utc(s["to"]), moon_min_elongation_deg=0.0)
    ref = s["contacts"]
    assert len(got) == len(ref)
    for r, c in zip(ref, got):
        assert (c.body, c.limb, c.image, c.direction) == (r["body"], r["limb"], r["image"], r["direction"])
        assert abs(c.t_us - parse_utc(r["utc"])) < 1000000, (r, c.to_dict())
        assert abs((c.zn_deg - r["zn_deg"] + 180) % 360 - 180) < 0.1
    # with the default visibility rules the schedule is a subset of the reference
    default = plan.schedule(ALM, IMAGES, tr, ob, parse_utc(s["from"]), parse_utc(s["to"]))
    keys = set((c["utc"][:19], c["body"], c["limb"], c["image"]) for c in ref)
    assert len(default) <= len(got)
    for c in default:
        assert any(k[1:] == (c.body, c.limb, c.image) and abs(parse_utc(k[0] + "Z") - c.t_us) < 2000000
                   for k in keys)


def test_two_contacts_either_side_of_the_meridian_passage():
    # An image 0.25 deg below the Sun's culmination: the two contacts lie ~10 min apart, inside one
    # 300 s scan interval or two; the reference roots come from the generator's independent model.
    s = DOC["scenarios"][0]
    tr, ob = scenario(s)
    t0 = parse_utc("2026-08-03T12:30:00Z")
    grid = np.arange(t0, t0 + 3 * 3600 * 1000000, 5 * 1000000, dtype=np.int64)
    hs, _ = gen.sextant_altitude("sun", "lower", grid, s["track"], s["observer"])
    dev = float(hs.max()) - 0.25
    f = hs - dev
    ref = [int(grid[k]) for k in np.nonzero((f[:-1] < 0) != (f[1:] < 0))[0]]
    assert len(ref) == 2
    got = plan.schedule(ALM, [("top", dev)], tr, ob, int(grid[0]), int(grid[-1]), bodies=("sun",), limbs=("lower",))
    assert [c.direction for c in got] == ["rising", "setting"]
    for r, c in zip(ref, got):
        assert abs(c.t_us - r) < 6000000      # the reference grid is 5 s
    # an image 0.05 deg above the culmination is never reached
    assert plan.schedule(ALM, [("x", float(hs.max()) + 0.05)], tr, ob, int(grid[0]), int(grid[-1]),
                         bodies=("sun",), limbs=("lower",)) == []


def test_next_contact_is_the_first_scheduled():
    s = DOC["scenarios"][1]
    tr, ob = scenario(s)
    t = parse_utc("2027-06-14T21:07:00Z")
    full = plan.schedule(ALM, IMAGES, tr, ob, t, t + 12 * 3600 * 1000000, limbs=("lower",))
    nxt = plan.next_contact(ALM, IMAGES, tr, ob, t, horizon_s=12 * 3600)
    assert nxt is not None and nxt.t_us == full[0].t_us and nxt.image == full[0].image
    assert plan.next_contact(ALM, [("high", 80.0)], tr, ob, t, horizon_s=3600) is None


def test_low_images_and_bad_requests():
    s = DOC["scenarios"][0]
    tr, ob = scenario(s)
    t0, t1 = parse_utc(s["from"]), parse_utc(s["to"])
    assert plan.schedule(ALM, [("i00", 2.0)], tr, ob, t0, t1) == []
    low = plan.schedule(ALM, [("i01", 5.4)], tr, ob, t0, t1, bodies=("sun",))
    assert low and all(c.low for c in low)
    for kwargs, msg in [({"bodies": ("mars",)}, "body"), ({"limbs": ("left",)}, "limb"), ({"step_s": 1}, "step_s")]:
        with pytest.raises(plan.PlanError, match=msg):
            plan.schedule(ALM, IMAGES, tr, ob, t0, t1, **kwargs)
    with pytest.raises(plan.PlanError, match="to"):
        plan.schedule(ALM, IMAGES, tr, ob, t1, t0)


def test_cli_plan_with_session_and_without(tmp_path, capsys):
    from host.cli import main
    s = DOC["scenarios"][0]
    sess = {"format": "limbclock-session/1", "observer": s["observer"],
            "instrument": {"images": DOC["images"]}, "track": dict(s["track"], known=False),
            "contacts": [dict((k, s["contacts"][0][k]) for k in ("utc", "body", "limb", "image"))]}
    path = tmp_path / "s.json"
    path.write_text(json.dumps(sess))
    assert main(["plan", str(path), "--from", s["from"], "--to", s["to"], "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    ref = {(c["body"], c["limb"], c["image"], c["direction"]): parse_utc(c["utc"]) for c in s["contacts"]}
    assert d["contacts"]
    for c in d["contacts"]:
        assert set(["utc", "body", "limb", "image", "direction"]) <= set(c)
        assert abs(parse_utc(c["utc"]) - ref[(c["body"], c["limb"], c["image"], c["direction"])]) < 1000000
    inst = tmp_path / "inst.json"
    assert main(["ladder", "--plates", "2.7", "4.05", "--write", str(inst)]) == 0
    capsys.readouterr()
    card = tmp_path / "card.txt"
    assert main(["plan", "--lat", "38.52", "--lon", "-27.11", "--course", "212", "--speed", "5.5",
                 "--at", s["track"]["utc"], "--instrument", str(inst), "--eye-height", "2.4",
                 "--temperature", "22", "--pressure", "1018", "--from", s["from"], "--to", s["to"],
                 "--body", "sun", "--limb", "lower", "--zone", "-01", "--card", str(card)]) == 0
    text = capsys.readouterr().out
    first = [c for c in s["contacts"] if c["body"] == "sun" and c["limb"] == "lower"][0]
    utc = format_utc(parse_utc(first["utc"]) + 500000, 0)[11:19]     # rounded to the second
    local = format_utc(parse_utc(first["utc"]) + 500000 - 3600 * 1000000, 0)[11:19]
    assert ("%s  %s  %s" % (local, utc, first["image"])) in text
    assert "shade glass" in text and "UTC-01:00" in text
    assert "shade glass" in card.read_text()
    png = tmp_path / "card.png"
    assert main(["plan", str(path), "--from", s["from"], "--to", s["to"], "--card", str(png)]) == 0
    assert png.read_bytes()[:4] == b"\x89PNG"
    capsys.readouterr()
    assert main(["plan", "--lat", "38", "--from", s["from"]]) == 2
    assert "--lat, --lon and --instrument" in capsys.readouterr().err
    assert main(["plan", str(path), "--from", s["from"], "--zone", "+99"]) == 2
    assert "--zone" in capsys.readouterr().err


def test_schedule_under_micropython():
    s = DOC["scenarios"][0]
    code = ("import json\nfrom engine import almanac, plan\nfrom engine.model import Track, Observer\n"
            "from engine.timescale import parse_utc\n"
            "tr = Track(parse_utc(%r), %r, %r, %r, %r)\n" % (s["track"]["utc"], s["track"]["lat_deg"],
                                                            s["track"]["lon_deg"], s["track"]["course_deg"],
                                                            s["track"]["speed_kn"]) +
            "ob = Observer(%r, %r, %r)\n" % (s["observer"]["eye_height_m"], s["observer"]["temperature_c"],
                                             s["observer"]["pressure_hpa"]) +
            "cs = plan.schedule(almanac.load(), %r, tr, ob, parse_utc('2026-08-03T07:00:00Z'), "
            "parse_utc('2026-08-03T09:00:00Z'), ('sun',), ('lower',))\n" % (IMAGES,) +
            "print(json.dumps([[c.t_us, c.image, c.direction] for c in cs]))\n")
    got = json.loads(run_micropython(code).strip().splitlines()[-1])
    ref = [c for c in s["contacts"] if c["body"] == "sun" and c["limb"] == "lower"
           and "2026-08-03T07" <= c["utc"] < "2026-08-03T09"]
    assert len(got) == len(ref) > 3
    for g, r in zip(got, ref):
        assert g[1] == r["image"] and g[2] == r["direction"] and abs(g[0] - parse_utc(r["utc"])) < 1000000
