"""Identification trials: sessions made from the reference contact times of
``vectors/identify_scenarios.json`` (DE421 + ERFA, outside the engine; see
``vectors/generate_identify.py``) with simulated errors, for
``tests/test_identify_calibration.py`` and ``bench/bench_identify.py``.

Errors (a seeded ``random.Random``), the same kinds as the Monte Carlo of ``bench/bench_fix.py``:
per image a deviation error N(0, 1'), per session a dip anomaly N(0, 1'), per contact an
altitude scatter N(0, 0.3') (judging the touch in a seaway) and a timing scatter N(0, 0.25 s);
an altitude error e moves the contact by e / rate (the reference rate dHs/dt of the contact).
The DR is the true track moved ``dr_error_nm`` in a random direction, with its course and
speed off by N(0, 0.3 kn) per component.  Contacts too near a culmination (|rate| below
0.03'/s, 1.8' a minute) are not timed.  All contacts are unlabelled.
"""
import json
import math
import os

from engine.sphere import move_nm
from engine.timescale import format_utc, parse_utc

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
VECTORS = os.path.join(ROOT, "vectors", "identify_scenarios.json")
SIZES = (4, 5, 6, 8, 10, 12, 16)
MIN_RATE = 0.03


def load():
    with open(VECTORS) as f:
        return json.load(f)


def true_position(scn, t_us):
    """The true ship's position at ``t_us`` (the reference track: a rhumb line)."""
    from engine.model import Track
    tr = scn["track"]
    return Track(parse_utc(tr["utc"]), tr["lat_deg"], tr["lon_deg"], tr["course_deg"], tr["speed_kn"]).position_at(t_us)


def make(doc, rnd, n=None, dr_error_nm=None, scenario=None, span_h=None, labelled=0, strict_span=False):
    """One trial: (session dict, truth {"images", "lat_deg", "lon_deg", "utc", "scenario",
    "dr_error_nm"}).  The contacts are drawn from a window of ``span_h`` hours (random 1-8 h), or
    from the whole day when the window has fewer than ``n`` (with ``strict_span``: fewer contacts,
    at least 4, from the window)."""
    scn = doc["scenarios"][scenario] if scenario is not None else rnd.choice(doc["scenarios"])
    n = n if n is not None else rnd.choice(SIZES)
    dr_error_nm = dr_error_nm if dr_error_nm is not None else rnd.uniform(0.0, 600.0)
    pool = [c for c in scn["contacts"] if abs(c["rate_arcmin_per_s"]) >= MIN_RATE]
    span_h = span_h if span_h is not None else rnd.uniform(1.0, 8.0)
    start = parse_utc(rnd.choice(pool)["utc"]) - int(rnd.uniform(0.0, span_h) * 3.6e9)
    window = [c for c in pool if start <= parse_utc(c["utc"]) <= start + int(span_h * 3.6e9)]
    while strict_span and len(window) < 4:
        start = parse_utc(rnd.choice(pool)["utc"]) - int(rnd.uniform(0.0, span_h) * 3.6e9)
        window = [c for c in pool if start <= parse_utc(c["utc"]) <= start + int(span_h * 3.6e9)]
    if len(window) < n and not strict_span:
        window = pool
    picks = sorted(rnd.sample(window, min(n, len(window))), key=lambda c: c["utc"])
    images = doc["instruments"][scn["instrument"]]["images"]
    img_err = dict((im["id"], rnd.gauss(0.0, 1.0)) for im in images)
    dip_err = rnd.gauss(0.0, 1.0)
    contacts = []
    for k, c in enumerate(picks):
        e = img_err[c["image"]] + dip_err + rnd.gauss(0.0, 0.3)
        dt_s = e / c["rate_arcmin_per_s"] + rnd.gauss(0.0, 0.25)
        contacts.append({"utc": format_utc(parse_utc(c["utc"]) + int(round(dt_s * 1e6)), 3), "body": c["body"],
                         "limb": c["limb"], "image": c["image"] if k < labelled else None})
    tr = scn["track"]
    b = rnd.uniform(0.0, 2.0 * math.pi)
    lat, lon = move_nm(tr["lat_deg"], tr["lon_deg"], dr_error_nm * math.cos(b), dr_error_nm * math.sin(b))
    vn = tr["speed_kn"] * math.cos(math.radians(tr["course_deg"])) + rnd.gauss(0.0, 0.3)
    ve = tr["speed_kn"] * math.sin(math.radians(tr["course_deg"])) + rnd.gauss(0.0, 0.3)
    course = math.degrees(math.atan2(ve, vn)) % 360.0
    track = {"utc": tr["utc"], "lat_deg": round(lat, 5), "lon_deg": round(lon, 5), "course_deg": round(course, 2),
             "speed_kn": round(math.hypot(vn, ve), 2), "known": False}
    session = {"format": "limbclock-session/1", "observer": scn["observer"], "instrument": {"images": images},
               "track": track, "contacts": contacts}
    last = max(parse_utc(c["utc"]) for c in picks)
    tlat, tlon = true_position(scn, last)
    truth = {"images": [c["image"] for c in picks], "lat_deg": tlat, "lon_deg": tlon, "utc": format_utc(last, 3),
             "scenario": scn["name"], "dr_error_nm": dr_error_nm}
    return session, truth


def score(result, truth):
    """(correct, ambiguous, confidently wrong) label counts of an ``identify`` result."""
    ok = amb = wrong = 0
    for c, want in zip(result["contacts"], truth["images"]):
        if c["image"] is None:
            amb += 1
        elif c["image"] == want:
            ok += 1
        else:
            wrong += 1
    return ok, amb, wrong
