"""Reference contact times for the identification trials: many invented days at sea.

Writes ``vectors/identify_scenarios.json``, read by ``tests/test_identify_calibration.py``
(the seeded 300-session test: no confidently wrong label with DR errors of 0-600 nmi)
and ``bench/bench_identify.py`` (success by session size, reliability table, doubt rate).
Regenerate with ``.venv/bin/python -m vectors.generate_identify`` (about a minute).

Independent of the engine's almanac and forward model: the contact of an image of
deviation D with a limb is the instant when the reference sextant altitude of that limb
from the true (moving) ship equals D, with ``vectors.generate_schedule.sextant_altitude``
(DE421 + ERFA exact topocentric place on WGS 84, topocentric semi-diameter, Bennett's
refined refraction times the Nautical Almanac weather factor, NA dip 1.76' sqrt(h), ship on
an exact spherical rhumb line).  Roots are bracketed on a 60 s grid and bisected to 1 ms.
Noise-free: the tests add the errors they simulate (with a fixed seed).  Each contact also
carries the reference rate dHs/dt (arcmin/s, central difference over 2 s) and azimuth, so
that a test can turn an altitude error into a timing error.

Contacts are kept where an observer can time them: the Sun's any time; the Moon's when
the Sun is above -6 deg (a visible horizon) and the Moon is more than 15 deg from the
Sun.  The scenarios (ships, waters, dates, instruments) are invented by a seeded random
draw (``SEED``): latitude 55 S to 60 N, any longitude, 2026-2040, course and speed 0-9
kn, height of eye 1.5-4 m, a 12-hour window of daylight.  Two invented instruments:
plates 2.2/3.55 deg (14 images 2(mX + nY), 1 <= m + n <= 4) and 2.7/4.05 deg (8 images).
"""
import json
import math
import os
import random
import sys
import time

import numpy as np

from engine.timescale import format_utc, parse_utc
from vectors import reference
from vectors.generate_schedule import sextant_altitude

HERE = os.path.dirname(os.path.abspath(__file__))
OUT = os.path.join(HERE, "identify_scenarios.json")
SEED = 20240611
N_SCENARIOS = 24
GRID_S = 60
WINDOW_H = 12


def _images(plates, max_order):
    devs = []
    for m in range(max_order + 1):
        for n in range(max_order + 1):
            if 1 <= m + n <= max_order:
                devs.append(round(2.0 * (m * plates[0] + n * plates[1]), 4))
    devs = sorted(set(devs))
    return [{"id": "i%02d" % (k + 1), "deviation_deg": d} for k, d in enumerate(devs)]


INSTRUMENTS = {"a": {"plate_angles_deg": [2.2, 3.55], "images": _images((2.2, 3.55), 4)},
               "b": {"plate_angles_deg": [2.7, 4.05], "images": _images((2.7, 4.05), 2)}}


def _scenario(rnd, k):
    """An invented day at sea: track, observer, window (the 12 h around local noon)."""
    lat = rnd.uniform(-55.0, 60.0)
    lon = rnd.uniform(-180.0, 180.0)
    day = parse_utc("2026-01-01T00:00:00Z") + rnd.randrange(0, 15 * 365) * 86400 * 1000000
    noon = day + int((12.0 - lon / 15.0) * 3600e6)                 # about local noon, UTC
    t0 = noon - WINDOW_H * 1800 * 1000000
    speed = rnd.choice([0.0, rnd.uniform(2.0, 9.0)])
    return {"name": "day%02d" % k, "instrument": "a" if k % 3 else "b",
            "track": {"utc": format_utc(t0, 0), "lat_deg": round(lat, 4), "lon_deg": round(lon, 4),
                      "course_deg": round(rnd.uniform(0.0, 360.0), 1), "speed_kn": round(speed, 1)},
            "observer": {"eye_height_m": round(rnd.uniform(1.5, 4.0), 1),
                         "temperature_c": round(rnd.uniform(2.0, 30.0), 0),
                         "pressure_hpa": round(rnd.uniform(995.0, 1030.0), 0)},
            "from": format_utc(t0, 0), "to": format_utc(t0 + WINDOW_H * 3600 * 1000000, 0)}


def _root(body, limb, a, b, fa, dev, track, obs):
    while b - a > 1000:
        m = (a + b) // 2
        fm = sextant_altitude(body, limb, np.array([m], dtype=np.int64), track, obs)[0][0] - dev
        if (fm < 0) == (fa < 0):
            a, fa = m, fm
        else:
            b = m
    return (a + b) // 2


def _contacts(scn):
    t0, t1 = parse_utc(scn["from"]), parse_utc(scn["to"])
    grid = np.arange(t0, t1 + 1, GRID_S * 1000000, dtype=np.int64)
    obs, track = scn["observer"], scn["track"]
    images = INSTRUMENTS[scn["instrument"]]["images"]
    out = []
    for body in ("sun", "moon"):
        for limb in ("lower", "upper"):
            hs, _ = sextant_altitude(body, limb, grid, track, obs)
            for im in images:
                f = hs - im["deviation_deg"]
                for k in np.nonzero((f[:-1] < 0) != (f[1:] < 0))[0]:
                    t = _root(body, limb, int(grid[k]), int(grid[k + 1]), f[k], im["deviation_deg"], track, obs)
                    two = np.array([t - 1000000, t + 1000000], dtype=np.int64)
                    h2, az = sextant_altitude(body, limb, two, track, obs)
                    out.append({"utc": format_utc(t, 3), "body": body, "limb": limb, "image": im["id"],
                                "rate_arcmin_per_s": round(float(h2[1] - h2[0]) * 30.0, 5),
                                "zn_deg": round(float(az[0]), 2), "t_us": t})
    if any(c["body"] == "moon" for c in out):
        from vectors.generate_schedule import rhumb
        ts = np.array([c["t_us"] for c in out], dtype=np.int64)
        lat, lon = rhumb(track, ts)
        sun = reference.topocentric_alt_az("sun", ts, lat, lon, 0.0)
        moon = reference.apparent("moon", ts)
        sunp = reference.apparent("sun", ts)
        keep = []
        for k, c in enumerate(out):
            if c["body"] == "moon":
                cos_el = (math.sin(math.radians(moon["dec_deg"][k])) * math.sin(math.radians(sunp["dec_deg"][k]))
                          + math.cos(math.radians(moon["dec_deg"][k])) * math.cos(math.radians(sunp["dec_deg"][k]))
                          * math.cos(math.radians(moon["gha_deg"][k] - sunp["gha_deg"][k])))
                if sun["alt_deg"][k] < -6.0 or cos_el > math.cos(math.radians(15.0)):
                    continue
            keep.append(c)
        out = keep
    for c in out:
        del c["t_us"]
    out.sort(key=lambda c: (c["utc"], c["body"], c["limb"], c["image"]))
    return out


def main():
    started = time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime())
    rnd = random.Random(SEED)
    doc = {"format": "limbclock-vectors/identify-1",
           "provenance": {"generator": "vectors/generate_identify.py", "generated_utc": started,
                          "libraries": reference.library_versions(),
                          "method": "contact = instant the reference sextant altitude of the limb equals the image's "
                                    "deviation: DE421 + ERFA exact topocentric place on WGS 84 "
                                    "(vectors.reference.topocentric_alt_az), topocentric SD, Bennett refined "
                                    "refraction x NA weather factor, NA dip 1.76' sqrt(h), true ship on an exact "
                                    "rhumb line; 60 s grid, bisection to 1 ms; rate dHs/dt by a central difference "
                                    "over 2 s; noise-free",
                          "note": "invented scenarios (seeded draw, seed %d); Moon contacts kept when the Sun is above "
                                  "-6 deg and the elongation exceeds 15 deg" % SEED},
           "instruments": INSTRUMENTS, "scenarios": []}
    for k in range(N_SCENARIOS):
        scn = _scenario(rnd, k)
        scn["contacts"] = _contacts(scn)
        doc["scenarios"].append(scn)
        print("%s: %d contacts (%s)" % (scn["name"], len(scn["contacts"]),
                                        ", ".join(sorted(set(c["body"] for c in scn["contacts"])))), flush=True)
    with open(OUT, "w") as f:
        json.dump(doc, f, indent=0, separators=(",", ":"))
        f.write("\n")
    print("wrote %s" % OUT)
    return 0


if __name__ == "__main__":
    sys.exit(main())
