"""Reference contact times: when each image of the Sun or Moon touches the horizon.

Writes ``vectors/schedule_contacts.json``, used by ``tests/test_plan.py``
(schedule within 0.1 s), ``tests/test_calibrate.py`` (noise-free contacts at the
true deviations) and ``tests/test_identify.py`` (sessions with unlabelled
contacts).  Regenerate with ``.venv/bin/python -m vectors.generate_schedule``.

Independent of the engine's forward model and almanac:

* Body place: ``vectors.reference.topocentric_alt_az`` (JPL DE421 + ERFA,
  exact topocentric vector geometry on the WGS 84 ellipsoid, geodetic vertical,
  topocentric semi-diameter, no refraction).
* Limb: true altitude of the limb = centre altitude -/+ topocentric SD.
* Refraction: Bennett (1982), J. Navigation 35, 255, refined form
  R = cot(Ha + 7.31/(Ha + 4.4)) - 0.06 sin(14.7 R + 13 deg) (apparent altitude Ha),
  times the Nautical Almanac weather factor 0.28 P/(T + 273); the apparent
  altitude of the limb solves Ha - R(Ha) = h_limb by fixed-point iteration in
  numpy.
* Dip: Nautical Almanac D = 1.76' sqrt(h m).
* Ship: exact rhumb line on the sphere (Mercator latitude; Bowditch,
  "rhumb-line sailing"), written out here in numpy.
* Contact: Hs(t) = Ha + dip equals the image's deviation D; roots bracketed on
  a 60 s grid and bisected to 1 ms.

The scenarios (own ship, waters, dates and plate angles) are invented.
"""
import json
import os
import sys
import time

import numpy as np

from engine.timescale import format_utc, parse_utc
from vectors import reference

HERE = os.path.dirname(os.path.abspath(__file__))
OUT = os.path.join(HERE, "schedule_contacts.json")
PLATES_DEG = [2.7, 4.05]      # invented instrument: three plates, X = 2.7 deg, Y = 4.05 deg
GRID_S = 60

SCENARIOS = [
    {"name": "azores-summer", "track": {"utc": "2026-08-03T00:00:00Z", "lat_deg": 38.52, "lon_deg": -27.11,
                                        "course_deg": 212.0, "speed_kn": 5.5},
     "observer": {"eye_height_m": 2.4, "temperature_c": 22.0, "pressure_hpa": 1018.0},
     "from": "2026-08-03T04:00:00Z", "to": "2026-08-03T22:00:00Z"},
    {"name": "tasman-winter", "track": {"utc": "2027-06-14T18:00:00Z", "lat_deg": -36.8, "lon_deg": 160.4,
                                        "course_deg": 95.0, "speed_kn": 7.0},
     "observer": {"eye_height_m": 3.1, "temperature_c": 12.0, "pressure_hpa": 1003.0},
     "from": "2027-06-14T18:00:00Z", "to": "2027-06-15T10:00:00Z"},
    {"name": "doldrums-moon", "track": {"utc": "2025-11-26T06:00:00Z", "lat_deg": 4.3, "lon_deg": -29.7,
                                        "course_deg": 180.0, "speed_kn": 4.0},
     "observer": {"eye_height_m": 2.0, "temperature_c": 28.0, "pressure_hpa": 1011.0},
     "from": "2025-11-26T06:00:00Z", "to": "2025-11-27T06:00:00Z"},
]
IMAGES = [("i01", 5.4), ("i02", 8.1), ("i03", 10.8), ("i04", 13.5), ("i05", 16.2), ("i06", 18.9),
          ("i07", 21.6), ("i08", 27.0)]    # 2(mX + nY) for the plates above, orders 1-2


def rhumb(track, t_us):
    """Exact spherical rhumb line: (lat_deg, lon_deg) arrays at instants t_us."""
    t0 = parse_utc(track["utc"])
    d_nm = track["speed_kn"] * (np.asarray(t_us, dtype=np.int64) - t0) / 3.6e9
    c = np.radians(track["course_deg"])
    lat0 = np.radians(track["lat_deg"])
    lat = lat0 + np.radians(d_nm * np.cos(c) / 60.0)
    psi0 = np.log(np.tan(np.pi / 4 + lat0 / 2))
    psi = np.log(np.tan(np.pi / 4 + lat / 2))
    dlat = lat - lat0
    with np.errstate(invalid="ignore", divide="ignore"):
        q = np.where(np.abs(dlat) > 1e-12, dlat / np.where(psi == psi0, 1.0, psi - psi0), np.cos(lat0))
    dlon = np.radians(d_nm * np.sin(c) / 60.0) / q
    lon = (np.degrees(np.radians(track["lon_deg"]) + dlon) + 180.0) % 360.0 - 180.0
    return np.degrees(lat), lon


def bennett_refined_arcmin(ha_deg):
    h = np.maximum(ha_deg, -1.0)
    r = 1.0 / np.tan(np.radians(h + 7.31 / (h + 4.4)))
    return r - 0.06 * np.sin(np.radians(14.7 * r + 13.0))


def sextant_altitude(body, limb, t_us, track, obs):
    """Reference Hs (deg) of a limb at instants t_us (array)."""
    lat, lon = rhumb(track, t_us)
    topo = reference.topocentric_alt_az(body, np.asarray(t_us, dtype=np.int64), lat, lon, 0.0)
    sign = 1.0 if limb == "lower" else -1.0
    h_limb = topo["alt_deg"] - sign * topo["sd_arcmin"] / 60.0
    f = 0.28 * obs["pressure_hpa"] / (obs["temperature_c"] + 273.0)
    ha = h_limb.copy()
    for _ in range(40):
        ha = h_limb + f * bennett_refined_arcmin(ha) / 60.0
    return ha + 1.76 * np.sqrt(obs["eye_height_m"]) / 60.0, topo["az_deg"]


def contacts_of(scn):
    t0, t1 = parse_utc(scn["from"]), parse_utc(scn["to"])
    grid = np.arange(t0, t1 + 1, GRID_S * 1000000, dtype=np.int64)
    out = []
    for body in ("sun", "moon"):
        for limb in ("lower", "upper"):
            hs, _ = sextant_altitude(body, limb, grid, scn["track"], scn["observer"])
            for image, dev in IMAGES:
                f = hs - dev
                idx = np.nonzero((f[:-1] < 0) != (f[1:] < 0))[0]
                for k in idx:
                    a, b = int(grid[k]), int(grid[k + 1])
                    fa = f[k]
                    while b - a > 1000:
                        m = (a + b) // 2
                        fm = sextant_altitude(body, limb, np.array([m]), scn["track"], scn["observer"])[0][0] - dev
                        if (fm < 0) == (fa < 0):
                            a, fa = m, fm
                        else:
                            b = m
                    t = (a + b) // 2
                    _, az = sextant_altitude(body, limb, np.array([t]), scn["track"], scn["observer"])
                    out.append({"utc": format_utc(t, 3), "body": body, "limb": limb, "image": image,
                                "deviation_deg": dev, "direction": "rising" if f[k + 1] > f[k] else "setting",
                                "zn_deg": round(float(az[0]), 2)})
    out.sort(key=lambda c: (c["utc"], c["body"], c["limb"], c["image"]))
    return out


def main():
    started = time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime())
    doc = {"format": "limbclock-vectors/schedule-1",
           "provenance": {"generator": "vectors/generate_schedule.py", "generated_utc": started,
                          "libraries": reference.library_versions(),
                          "method": "DE421 + ERFA topocentric (vectors.reference.topocentric_alt_az), "
                                    "Bennett refined refraction x NA weather factor, NA dip 1.76' sqrt(h), "
                                    "exact spherical rhumb line; roots on a 60 s grid bisected to 1 ms",
                          "note": "invented scenarios; every Sun and Moon contact of each image in the window, "
                                  "Moon contacts kept whatever the elongation (the test applies the engine's "
                                  "visibility rules by filtering)"},
           "plate_angles_deg": PLATES_DEG,
           "images": [{"id": i, "deviation_deg": d} for i, d in IMAGES],
           "scenarios": []}
    for scn in SCENARIOS:
        s = dict(scn)
        s["contacts"] = contacts_of(scn)
        doc["scenarios"].append(s)
        print("%s: %d contacts" % (scn["name"], len(s["contacts"])))
    with open(OUT, "w") as f:
        json.dump(doc, f, indent=1)
        f.write("\n")
    print("wrote %s" % OUT)
    return 0


if __name__ == "__main__":
    sys.exit(main())
