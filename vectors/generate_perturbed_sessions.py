"""Reference sessions with known perturbations, computed outside the engine: a common deviation
offset on rising-and-setting sessions (the equal-altitude case), a reaction delay, a yawed
instrument, and a calibration alongside.

Writes ``vectors/perturbed/*.json`` (``limbclock-session/1`` plus ``provenance`` and ``truth``),
read by ``tests/test_fix_perturbed.py`` and ``bench/bench_fix.py``.  Regenerate with
``.venv/bin/python -m vectors.generate_perturbed_sessions`` (or ``make vectors``).

The reference altitude is that of ``vectors/generate_sessions.py``: Hs(t) of the limb from the true,
moving ship, from ``vectors.generate_schedule.sextant_altitude`` (JPL DE421 through jplephem, ERFA
apparent place, exact topocentric geometry on WGS 84, Bennett's refined refraction times the
Nautical Almanac weather factor, NA dip 1.76' sqrt(h m), the ship on an exact rhumb line).  The
engine's almanac and forward model are never used.  A contact of an image of NOMINAL deviation D
(the value the session lists) happens when Hs(t) equals the altitude at which that image really
touches the horizon:

* common deviation offset c (arcmin): every image really deviates by D + c;
* yaw psi: the instrument held turned by psi about the vertical, away from the plane of the body,
  touches at Hs = atan(cos psi tan D).  Derivation: x toward the body's azimuth, y horizontal, z up;
  the body is b = (cos H, 0, sin H); the plates deviate a ray by rotating it through D about their
  hinge, which is horizontal and, yawed, points along a = (sin psi, cos psi, 0).  Rodrigues'
  rotation formula v' = v cos D + (a x v) sin D + a (a . v)(1 - cos D) gives the image's height
  z' = sin H cos D - cos psi cos H sin D (a has no z component); the image sits on the horizon when
  z' = 0, tan H = cos psi tan D.  (The visible horizon is depressed by the dip delta; solving
  z' = -sin delta instead changes Hs by delta (1 - 1/(cos H cos D + cos psi sin H sin D)), below
  0.0001' for psi <= 5 deg.)  The same law as ``engine.instrument.yaw_contact_deg``, written here
  from the geometry so the sessions do not depend on it.  Each contact's yaw is +psi or -psi in
  turn, so the mean of psi^2 is exactly psi^2 (a normal yaw of sigma psi has that mean);
* altitude scatter eps_i ~ N(0, sigma_alt) per contact, when the scenario has noise (judging the
  touch in a seaway).

The press (the stamp) then follows the contact by the reaction delay tau, plus a timing scatter
N(0, sigma_t) when the scenario has noise, rounded to 1 ms.  Roots: bracketed on a 60 s grid
around the unperturbed crossing, bisected to 1 ms, all contacts of a (body, limb) at once.

``truth`` holds the true track, the true position at the last contact, the perturbations
(``offset_arcmin``, ``reaction_delay_s``, ``yaw_deg``, ``noise``) and the DR error.  Every scenario
(ships, waters, dates) is invented; the instrument is the reference sessions' (X = 2.2 deg,
Y = 3.55 deg).
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
from vectors.generate_schedule import rhumb, sextant_altitude
from vectors.generate_sessions import PLATES_DEG, instrument_images, _dr_track

HERE = os.path.dirname(os.path.abspath(__file__))
OUT_DIR = os.path.join(HERE, "perturbed")
GRID_S = 60


def _noon(day, lon_deg):
    """Approximate UTC of local apparent noon (text), enough to centre a window."""
    t = parse_utc(day + "T12:00:00Z") - int(lon_deg / 15.0 * 3.6e9)
    return t


def _window(day, lon_deg, before_h, after_h):
    noon = _noon(day, lon_deg)
    return format_utc(noon - int(before_h * 3.6e9)), format_utc(noon + int(after_h * 3.6e9))


def _eqalt(name, what, day, lat, lon, course, speed, offset, dr, seed, noise=True, eye=2.5, temp=18.0,
           press=1015.0):
    t_from, t_to = _window(day, lon, 7.5, 7.5)
    return {"name": name, "what": what,
            "truth": {"utc": format_utc(parse_utc(t_from) - 3600 * 1000000), "lat_deg": lat, "lon_deg": lon,
                      "course_deg": course, "speed_kn": speed},
            "observer": {"eye_height_m": eye, "temperature_c": temp, "pressure_hpa": press},
            "from": t_from, "to": t_to, "pairs": [("sun", "lower")], "offset_arcmin": offset,
            "delay_s": 0.0, "yaw_deg": 0.0, "noise": {"sigma_alt_arcmin": 0.3, "sigma_t_s": 0.2} if noise else None,
            "pick": 8, "dr_error_nm": dr, "seed": seed, "known": False}


# Rising-and-setting sessions with a common deviation offset (the equal-altitude case): 8 images picked at
# random (seeded) among those the Sun's lower limb crosses both rising and setting, each timed both ways.
SCENARIOS = [
    _eqalt("eqalt_clean_p2", "ketch at 6 kn, Sun rising and setting, every image off by +2.0', noise-free",
           "2028-02-11", 20.5, -65.0, 150.0, 6.0, 2.0, (25.0, -30.0), 1, noise=False),
    _eqalt("eqalt_tropic_p2", "cutter at 6 kn in the tropics, Sun rising and setting, common offset +2.0'",
           "2029-09-14", -12.4, -38.2, 200.0, 6.0, 2.0, (-30.0, 22.0), 2),
    _eqalt("eqalt_midlat_m3", "yawl at 5 kn, spring, Sun rising and setting, common offset -3.0'",
           "2031-05-03", 41.2, -29.5, 80.0, 5.0, -3.0, (35.0, 20.0), 3, temp=15.0, press=1022.0),
    _eqalt("eqalt_winter_p1", "sloop at 4.5 kn, southern winter, Sun rising and setting, common offset +1.0'",
           "2033-07-20", -36.1, 158.0, 300.0, 4.5, 1.0, (-20.0, -40.0), 4, temp=12.0, press=1008.0),
    _eqalt("eqalt_station_m1", "ship hove to, Sun rising and setting, common offset -1.5'",
           "2027-12-02", 24.5, -160.3, 0.0, 0.0, -1.5, (28.0, 30.0), 5, temp=24.0),
    _eqalt("eqalt_high_p3", "schooner at 5.5 kn in high latitudes, midsummer, common offset +3.0'",
           "2030-06-18", 55.3, -12.0, 40.0, 5.5, 3.0, (-45.0, 15.0), 6, temp=11.0, press=1011.0),
    _eqalt("eqalt_indian_m2", "ketch at 6.5 kn, Indian Ocean, Sun rising and setting, common offset -2.0'",
           "2035-03-30", -8.2, 72.4, 135.0, 6.5, -2.0, (18.0, -50.0), 7, temp=28.0, press=1010.0),
]
_C1_FROM, _C1_TO = _window("2030-04-21", -16.25, 7.5, 7.5)
_D1_FROM, _D1_TO = _window("2030-04-22", -17.5, 6.0, -0.7)
_Y1_FROM, _Y1_TO = _window("2032-11-05", -170.2, 6.0, -0.7)
SCENARIOS += [
    # calibration alongside (a GPS-known berth), the observer pressing 0.4 s late, rising and setting
    {"name": "delay_calibration", "what": "alongside at a known berth, Sun rising and setting, every press 0.40 s "
                                          "late (the observer's reaction delay), for calibration",
     "truth": {"utc": "2030-04-21T00:00:00Z", "lat_deg": 28.47, "lon_deg": -16.25, "course_deg": 0.0,
               "speed_kn": 0.0},
     "observer": {"eye_height_m": 4.0, "temperature_c": 19.0, "pressure_hpa": 1017.0},
     "from": _C1_FROM, "to": _C1_TO, "pairs": [("sun", "lower")], "offset_arcmin": 0.0, "delay_s": 0.4,
     "yaw_deg": 0.0, "noise": None, "pick": None, "dr_error_nm": (0.0, 0.0), "seed": 0, "known": True},
    # the next morning at sea, the same observer: the delay is in every stamp
    {"name": "delay_morning", "what": "the next morning at sea at 6 kn, Sun only (rising), every press 0.40 s late",
     "truth": {"utc": "2030-04-22T00:00:00Z", "lat_deg": 27.9, "lon_deg": -17.5, "course_deg": 225.0,
               "speed_kn": 6.0},
     "observer": {"eye_height_m": 2.3, "temperature_c": 19.0, "pressure_hpa": 1016.0},
     "from": _D1_FROM, "to": _D1_TO, "pairs": [("sun", "lower"), ("sun", "upper")], "offset_arcmin": 0.0,
     "delay_s": 0.4, "yaw_deg": 0.0, "noise": None, "pick": None, "dr_error_nm": (-24.0, 33.0), "seed": 0,
     "known": False},
    # an observer who holds the instrument 3 deg off the body's vertical, in turn each way
    {"name": "yaw_morning", "what": "sloop at 7 kn, Sun only (rising), the instrument yawed 3 deg each way in turn",
     "truth": {"utc": "2032-11-05T00:00:00Z", "lat_deg": -45.5, "lon_deg": -170.2, "course_deg": 90.0,
               "speed_kn": 7.0},
     "observer": {"eye_height_m": 2.0, "temperature_c": 13.0, "pressure_hpa": 1009.0},
     "from": _Y1_FROM, "to": _Y1_TO, "pairs": [("sun", "lower"), ("sun", "upper")], "offset_arcmin": 0.0,
     "delay_s": 0.0, "yaw_deg": 3.0, "noise": None, "pick": None, "dr_error_nm": (30.0, -26.0), "seed": 0,
     "known": False},
]


def _yaw_altitude_deg(dev_deg, psi_deg):
    """The altitude at which an image of deviation D touches when yawed by psi (module docstring)."""
    return math.degrees(math.atan(math.cos(math.radians(psi_deg)) * math.tan(math.radians(dev_deg))))


def _crossings(scn, images):
    """Unperturbed crossings (body, limb, image id, D, grid instant before, direction) on a 60 s grid."""
    t0, t1 = parse_utc(scn["from"]), parse_utc(scn["to"])
    grid = np.arange(t0, t1 + 1, GRID_S * 1000000, dtype=np.int64)
    out = []
    for body, limb in scn["pairs"]:
        hs, _ = sextant_altitude(body, limb, grid, scn["truth"], scn["observer"])
        for im in images:
            f = hs - im["deviation_deg"]
            for k in np.nonzero((f[:-1] < 0) != (f[1:] < 0))[0]:
                out.append((body, limb, im["id"], im["deviation_deg"], int(grid[k]),
                            "rising" if f[k + 1] > f[k] else "setting"))
    out.sort(key=lambda c: (c[4], c[0], c[1], c[2]))
    return out


def _roots(scn, body, limb, targets_deg, near_us, rising):
    """Instants (int us, array) where the reference Hs of the limb equals each target (deg), the root
    searched within 20 min of each unperturbed crossing, bisected to 1 ms (vectorised)."""
    targets = np.asarray(targets_deg)
    sign = np.where(np.asarray(rising), 1.0, -1.0)
    a = np.asarray(near_us, dtype=np.int64) - 1200 * 1000000
    b = np.asarray(near_us, dtype=np.int64) + 1260 * 1000000
    fa = (sextant_altitude(body, limb, a, scn["truth"], scn["observer"])[0] - targets) * sign
    fb = (sextant_altitude(body, limb, b, scn["truth"], scn["observer"])[0] - targets) * sign
    if not (np.all(fa < 0) and np.all(fb > 0)):
        raise AssertionError("%s: a perturbed contact is not bracketed" % scn["name"])
    while np.any(b - a > 1000):
        m = (a + b) // 2
        fm = (sextant_altitude(body, limb, m, scn["truth"], scn["observer"])[0] - targets) * sign
        below = fm < 0
        a = np.where(below, m, a)
        b = np.where(below, b, m)
    return (a + b) // 2


def build(scn, provenance):
    images = instrument_images()
    rnd = random.Random(scn["seed"])
    cross = _crossings(scn, images)
    if scn["pick"]:
        # equal altitudes: the same images timed rising and setting
        both = sorted(set(c[2] for c in cross if c[5] == "rising") & set(c[2] for c in cross if c[5] == "setting"))
        ids = rnd.sample(both, min(scn["pick"], len(both)))
        cross = [c for c in cross if c[2] in ids]
    noise = scn["noise"]
    targets, contacts = [], []
    for k, (body, limb, iid, dev, t_near, direction) in enumerate(cross):
        psi = scn["yaw_deg"] if k % 2 == 0 else -scn["yaw_deg"]
        h = _yaw_altitude_deg(dev, psi) if psi else dev
        h += scn["offset_arcmin"] / 60.0
        if noise:
            h += rnd.gauss(0.0, noise["sigma_alt_arcmin"]) / 60.0
        targets.append(h)
    stamps = [0] * len(cross)
    for body, limb in scn["pairs"]:
        idx = [k for k, c in enumerate(cross) if (c[0], c[1]) == (body, limb)]
        if not idx:
            continue
        t = _roots(scn, body, limb, [targets[k] for k in idx], [cross[k][4] for k in idx],
                   [cross[k][5] == "rising" for k in idx])
        for k, tk in zip(idx, t):
            stamps[k] = int(tk)
    for k, (body, limb, iid, dev, t_near, direction) in enumerate(cross):
        t = stamps[k] + int(round(scn["delay_s"] * 1e6))
        if noise:
            t += int(round(rnd.gauss(0.0, noise["sigma_t_s"]) * 1e6))
        t = int(round(t / 1000.0)) * 1000
        contacts.append({"utc": format_utc(t, 3), "body": body, "limb": limb, "image": iid})
    contacts.sort(key=lambda c: (c["utc"], c["body"], c["limb"], c["image"]))
    last = max(parse_utc(c["utc"]) for c in contacts)
    lat, lon = rhumb(scn["truth"], np.array([last], dtype=np.int64))
    track = _dr_track(scn["truth"], *scn["dr_error_nm"])
    track["known"] = scn["known"]
    doc = {"format": "limbclock-session/1", "observer": dict(scn["observer"]),
           "instrument": {"plate_angles_deg": list(PLATES_DEG), "images": images},
           "track": track, "contacts": contacts,
           "provenance": dict(provenance, scenario=scn["what"]),
           "truth": {"track": scn["truth"], "utc": format_utc(last, 3), "lat_deg": round(float(lat[0]), 8),
                     "lon_deg": round(float(lon[0]), 8), "offset_arcmin": scn["offset_arcmin"],
                     "reaction_delay_s": scn["delay_s"], "yaw_deg": scn["yaw_deg"], "noise": noise,
                     "dr_error_nm": list(scn["dr_error_nm"]), "seed": scn["seed"],
                     "directions": {d: sum(1 for c in cross if c[5] == d) for d in ("rising", "setting")}}}
    if scn["yaw_deg"]:
        doc["observer"]["yaw_sigma_deg"] = scn["yaw_deg"]           # the observer states how far he yaws
    if scn["delay_s"] and not scn["known"]:
        doc["instrument"]["reaction_delay_s"] = scn["delay_s"]      # as calibrated (test_fix_perturbed)
        doc["instrument"]["reaction_delay_sigma_s"] = 0.03
    return doc


def main():
    os.makedirs(OUT_DIR, exist_ok=True)
    provenance = {"generator": "vectors/generate_perturbed_sessions.py",
                  "generated_utc": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
                  "libraries": reference.library_versions(),
                  "method": "contact = instant the reference sextant altitude of the limb equals the altitude at "
                            "which the image really touches (nominal deviation + common offset, yaw law atan(cos "
                            "psi tan D), altitude scatter): DE421 + ERFA exact topocentric place on WGS 84 "
                            "(vectors.reference.topocentric_alt_az), topocentric SD, Bennett refined refraction x "
                            "NA weather factor, NA dip 1.76' sqrt(h), true ship on an exact rhumb line; bisection "
                            "to 1 ms; stamp = contact + reaction delay (+ timing scatter), to 1 ms",
                  "note": "invented scenario; 'track' is the DR (truth displaced by dr_error_nm) or, when known, the "
                          "truth; 'truth' holds the true track, the true position at the last contact and the "
                          "perturbations"}
    for scn in SCENARIOS:
        doc = build(scn, provenance)
        path = os.path.join(OUT_DIR, scn["name"] + ".json")
        with open(path, "w") as f:
            json.dump(doc, f, indent=1)
            f.write("\n")
        print("%s: %d contacts -> %s" % (scn["name"], len(doc["contacts"]), path))
    return 0


if __name__ == "__main__":
    sys.exit(main())
