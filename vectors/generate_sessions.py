"""Reference sight sessions: timed contacts computed outside the engine, with the truth.

Writes ``vectors/sessions/*.json`` (``limbclock-session/1`` plus the extra keys
``provenance`` and ``truth``), read by ``tests/test_fix_reference.py`` and
``bench/bench_fix.py``.  Regenerate with
``.venv/bin/python -m vectors.generate_sessions``.

The contacts never touch the engine's almanac or forward model.  The contact
of an image of deviation D with a limb is the instant when the reference
sextant altitude Hs(t) of that limb, seen from the true (moving) ship, equals
D.  Hs comes from ``vectors.generate_schedule.sextant_altitude`` (the one
reference implementation, shared with the schedule vectors):

* body place: ``vectors.reference.topocentric_alt_az`` (JPL DE421 through
  jplephem, ERFA apparent place, exact topocentric vector geometry on the
  WGS 84 ellipsoid, geodetic vertical, topocentric semi-diameter);
* limb = centre -/+ topocentric SD; refraction: Bennett (1982) refined, times
  the Nautical Almanac weather factor 0.28 P/(T + 273), inverted in numpy;
  dip: Nautical Almanac 1.76' sqrt(h m);
* ship: exact spherical rhumb line (``vectors.generate_schedule.rhumb``).

Roots are bracketed on a 60 s grid and bisected to 1 ms (an error below
0.0003' of altitude).  The session's ``track`` is the truth displaced by a
dead-reckoning error of 20-60 nmi (same course and speed); ``truth`` holds the
true track and the true position at the last contact (the fix's default
epoch).  Every scenario (ships, waters, dates, plate angles) is invented.
"""
import json
import math
import os
import sys
import time

import numpy as np

from engine.timescale import format_utc, parse_utc
from vectors import reference
from vectors.generate_schedule import rhumb, sextant_altitude

HERE = os.path.dirname(os.path.abspath(__file__))
OUT_DIR = os.path.join(HERE, "sessions")
GRID_S = 60
PLATES_DEG = (2.2, 3.55)          # invented three-plate instrument: X = 2.2 deg, Y = 3.55 deg


def instrument_images():
    """Images 2(mX + nY) for 1 <= m + n <= 4, ids in order of deviation."""
    devs = []
    for m in range(5):
        for n in range(5):
            if 1 <= m + n <= 4:
                devs.append(round(2.0 * (m * PLATES_DEG[0] + n * PLATES_DEG[1]), 4))
    devs = sorted(set(devs))
    return [{"id": "i%02d" % (k + 1), "deviation_deg": d} for k, d in enumerate(devs)]


# name, description, truth track, observer, window, (body, limb) pairs, DR error (north, east nmi)
SCENARIOS = [
    {"name": "station_sun", "what": "stationary research ship on station, Sun only, morning to noon",
     "truth": {"utc": "2028-03-09T16:00:00Z", "lat_deg": -41.95, "lon_deg": -174.6, "course_deg": 0.0,
               "speed_kn": 0.0},
     "observer": {"eye_height_m": 3.2, "temperature_c": 16.0, "pressure_hpa": 1016.0},
     "from": "2028-03-09T17:00:00Z", "to": "2028-03-09T23:59:00Z",
     "pairs": [("sun", "lower"), ("sun", "upper")], "dr_error_nm": (22.0, -31.0)},
    {"name": "morning_run", "what": "ketch running at 6.3 kn, Sun only, one morning",
     "truth": {"utc": "2030-10-20T18:00:00Z", "lat_deg": -15.8, "lon_deg": 152.4, "course_deg": 118.0,
               "speed_kn": 6.3},
     "observer": {"eye_height_m": 2.1, "temperature_c": 26.0, "pressure_hpa": 1012.0},
     "from": "2030-10-20T19:00:00Z", "to": "2030-10-21T01:30:00Z",
     "pairs": [("sun", "lower"), ("sun", "upper")], "dr_error_nm": (-35.0, 18.0)},
    {"name": "sun_moon", "what": "sloop at 5 kn, rising Sun and last-quarter Moon, one morning",
     "truth": {"utc": "2032-06-01T04:00:00Z", "lat_deg": 47.1, "lon_deg": -18.4, "course_deg": 250.0,
               "speed_kn": 5.0},
     "observer": {"eye_height_m": 2.6, "temperature_c": 14.0, "pressure_hpa": 1021.0},
     "from": "2032-06-01T05:00:00Z", "to": "2032-06-01T14:00:00Z",
     "pairs": [("sun", "lower"), ("moon", "lower"), ("moon", "upper")], "dr_error_nm": (15.0, 40.0)},
    {"name": "both_sides", "what": "schooner at 5.8 kn, the same images rising and setting (offset estimable)",
     "truth": {"utc": "2034-07-02T08:00:00Z", "lat_deg": 33.6, "lon_deg": -52.3, "course_deg": 275.0,
               "speed_kn": 5.8},
     "observer": {"eye_height_m": 2.4, "temperature_c": 24.0, "pressure_hpa": 1019.0},
     "from": "2034-07-02T08:30:00Z", "to": "2034-07-02T23:30:00Z",
     "pairs": [("sun", "lower")], "dr_error_nm": (-40.0, -25.0)},
    {"name": "long_day", "what": "motor-sailer at 4 kn, a long day: Sun and waxing Moon, both limbs, rising and "
                                 "setting (over a hundred contacts, for the on-board heap)",
     "truth": {"utc": "2029-04-20T07:00:00Z", "lat_deg": 20.3, "lon_deg": -40.2, "course_deg": 300.0,
               "speed_kn": 4.0},
     "observer": {"eye_height_m": 2.8, "temperature_c": 23.0, "pressure_hpa": 1017.0},
     "from": "2029-04-20T08:00:00Z", "to": "2029-04-21T04:00:00Z",
     "pairs": [("sun", "lower"), ("sun", "upper"), ("moon", "lower"), ("moon", "upper")],
     "dr_error_nm": (28.0, -21.0)},
]
MISLABEL = {"name": "mislabelled", "base": "morning_run", "index": 6,
            "what": "the morning run with contact 6 written down as the next image up"}


def _contacts(scn, images):
    t0, t1 = parse_utc(scn["from"]), parse_utc(scn["to"])
    grid = np.arange(t0, t1 + 1, GRID_S * 1000000, dtype=np.int64)
    obs, track = scn["observer"], scn["truth"]
    out = []
    for body, limb in scn["pairs"]:
        hs, _ = sextant_altitude(body, limb, grid, track, obs)
        for im in images:
            f = hs - im["deviation_deg"]
            for k in np.nonzero((f[:-1] < 0) != (f[1:] < 0))[0]:
                a, b, fa = int(grid[k]), int(grid[k + 1]), f[k]
                while b - a > 1000:
                    m = (a + b) // 2
                    fm = sextant_altitude(body, limb, np.array([m], dtype=np.int64), track, obs)[0][0] \
                        - im["deviation_deg"]
                    if (fm < 0) == (fa < 0):
                        a, fa = m, fm
                    else:
                        b = m
                out.append({"utc": format_utc((a + b) // 2, 3), "body": body, "limb": limb, "image": im["id"]})
    out.sort(key=lambda c: (c["utc"], c["body"], c["limb"], c["image"]))
    return out


def _dr_track(truth, north_nm, east_nm):
    lat = truth["lat_deg"] + north_nm / 60.0
    lon = truth["lon_deg"] + east_nm / (60.0 * math.cos(math.radians(0.5 * (lat + truth["lat_deg"]))))
    return {"utc": truth["utc"], "lat_deg": round(lat, 6), "lon_deg": round(lon, 6),
            "course_deg": truth["course_deg"], "speed_kn": truth["speed_kn"], "known": False}


def build(scn, provenance):
    images = instrument_images()
    contacts = _contacts(scn, images)
    last = max(parse_utc(c["utc"]) for c in contacts)
    lat, lon = rhumb(scn["truth"], np.array([last], dtype=np.int64))
    return {"format": "limbclock-session/1", "observer": scn["observer"],
            "instrument": {"plate_angles_deg": list(PLATES_DEG), "images": images},
            "track": _dr_track(scn["truth"], *scn["dr_error_nm"]), "contacts": contacts,
            "provenance": dict(provenance, scenario=scn["what"]),
            "truth": {"track": scn["truth"], "utc": format_utc(last, 3), "lat_deg": round(float(lat[0]), 8),
                      "lon_deg": round(float(lon[0]), 8)}}


def mislabel(doc):
    """A copy of a session with one contact relabelled as the next image up."""
    out = json.loads(json.dumps(doc))
    c = out["contacts"][MISLABEL["index"]]
    ids = [im["id"] for im in out["instrument"]["images"]]
    true_id = c["image"]
    c["image"] = ids[ids.index(true_id) + 1]
    out["provenance"]["scenario"] = MISLABEL["what"]
    out["truth"]["mislabelled"] = {"index": MISLABEL["index"], "true_image": true_id, "written_as": c["image"]}
    return out


def main():
    os.makedirs(OUT_DIR, exist_ok=True)
    provenance = {"generator": "vectors/generate_sessions.py",
                  "generated_utc": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
                  "libraries": reference.library_versions(),
                  "method": "contact = instant the reference sextant altitude of the limb equals the image's "
                            "deviation: DE421 + ERFA exact topocentric place on WGS 84 "
                            "(vectors.reference.topocentric_alt_az), topocentric SD, Bennett refined refraction x "
                            "NA weather factor, NA dip 1.76' sqrt(h), true ship on an exact rhumb line; 60 s grid, "
                            "bisection to 1 ms; noise-free",
                  "note": "invented scenario; 'track' is the DR (truth displaced by dr_error_nm), 'truth' the "
                          "true track and the true position at the last contact"}
    docs = {}
    for scn in SCENARIOS:
        doc = build(scn, provenance)
        doc["truth"]["dr_error_nm"] = list(scn["dr_error_nm"])
        docs[scn["name"]] = doc
    docs[MISLABEL["name"]] = mislabel(docs[MISLABEL["base"]])
    for name, doc in docs.items():
        path = os.path.join(OUT_DIR, name + ".json")
        with open(path, "w") as f:
            json.dump(doc, f, indent=1)
            f.write("\n")
        print("%s: %d contacts -> %s" % (name, len(doc["contacts"]), path))
    return 0


if __name__ == "__main__":
    sys.exit(main())
