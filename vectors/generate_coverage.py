"""Noise-free sight sessions for the Monte Carlo of the fix's 95 % ellipse.

Writes ``vectors/coverage_sessions.json``, read by ``tests/test_fix_coverage.py``
(200 sessions, in ``make test``) and ``bench/bench_coverage.py`` (600 sessions, in
``make bench``), which add known, seeded errors to these contact times and count how
often the truth lies inside the fix's 95 % ellipse.  Regenerate with
``.venv/bin/python -m vectors.generate_coverage`` (about 5 minutes).

The contacts never touch the engine's almanac or forward model: the contact of an
image of deviation D with a limb is the instant when the reference sextant altitude
Hs(t) of that limb, seen from the true (moving) ship, equals D, with Hs from
``vectors.generate_schedule.sextant_altitude`` (JPL DE421 + ERFA exact topocentric
place on WGS 84, topocentric semi-diameter, Bennett's refined refraction times the
Nautical Almanac weather factor, the Nautical Almanac dip 1.76' sqrt(h m), an exact
rhumb line; see that module).  Roots are bracketed on a 60 s grid and refined by the
Illinois variant of regula falsi (Dowell & Jarratt 1971), vectorised over every
bracket, until |Hs - D| < 1e-7 deg (0.000006', a few tens of microseconds).

Each contact also carries what a test needs to add errors by linearisation, all from
the same reference: ``rate_arcmin_per_s`` (dHs/dt, central difference over 1 s),
``refraction_arcmin`` (the refraction in that Hs, for a refraction-scale error) and
``zn_deg`` (the reference azimuth).

Scenarios (seeded, invented): a ship anywhere between 55 S and 55 N on a day of
2027-2035, stopped or at 2-7 kn, eye 1.5-4 m, 0-30 C, 995-1030 hPa; one of three
kinds: ``morning`` (Sun, both limbs, until half an hour before noon), ``both_sides``
(Sun, both limbs, seven hours either side of noon), ``sun_moon`` (Sun and Moon, both
limbs, at least one Moon contact).  Moon contacts are kept only with the reference
Sun above -6 deg (the horizon is seen) and the Moon more than 15 deg from the Sun.
A random 6-20 of the contacts make the session.  ``truth`` is the true track; the
fix epoch is the last contact, with the true position there.
"""
import json
import os
import random
import sys
import time

import numpy as np

from engine.timescale import format_utc, parse_utc
from vectors import reference
from vectors.generate_schedule import bennett_refined_arcmin, rhumb, sextant_altitude
from vectors.generate_sessions import PLATES_DEG, instrument_images

HERE = os.path.dirname(os.path.abspath(__file__))
OUT = os.path.join(HERE, "coverage_sessions.json")
N_SCENARIOS = 300
SEED = 20270101
GRID_S = 60
US = 1000000
HOUR_US = 3600 * US
COLUMNS = ["t_us", "body", "limb", "image", "rate_arcmin_per_s", "refraction_arcmin", "zn_deg"]


def _roots(body, limb, devs, t0, t1, track, obs):
    """[(t_us, image index)] where the reference Hs of the limb crosses each deviation in [t0, t1]."""
    grid = np.arange(t0, t1 + 1, GRID_S * US, dtype=np.int64)
    hs, _ = sextant_altitude(body, limb, grid, track, obs)
    a, b, fa, fb, dev, idx = [], [], [], [], [], []
    for k, d in enumerate(devs):
        f = hs - d
        for j in np.nonzero((f[:-1] < 0) != (f[1:] < 0))[0]:
            a.append(grid[j])
            b.append(grid[j + 1])
            fa.append(f[j])
            fb.append(f[j + 1])
            dev.append(d)
            idx.append(k)
    if not a:
        return []
    a, b = np.array(a, dtype=np.int64), np.array(b, dtype=np.int64)
    fa, fb, dev = np.array(fa), np.array(fb), np.array(dev)
    side = np.zeros(a.size, dtype=int)
    for _ in range(40):                                  # Illinois regula falsi, every bracket at once
        m = a + np.round((b - a) * (fa / (fa - fb))).astype(np.int64)
        m = np.clip(m, a + 1, b - 1)
        fm = sextant_altitude(body, limb, m, track, obs)[0] - dev
        if np.max(np.abs(fm)) < 1e-7:
            a = m
            break
        left = (fm < 0) == (fa < 0)
        fb = np.where(left & (side == -1), fb * 0.5, fb)
        fa = np.where(~left & (side == 1), fa * 0.5, fa)
        a, fa = np.where(left, m, a), np.where(left, fm, fa)
        b, fb = np.where(left, b, m), np.where(left, fb, fm)
        side = np.where(left, -1, 1)
    else:
        raise RuntimeError("roots did not converge")
    return [(int(t), k) for t, k in zip(a, idx)]


def _scenario(rnd, images):
    kind = rnd.choice(("morning", "both_sides", "sun_moon"))
    day = parse_utc("2027-01-01T00:00:00Z") // (86400 * US) + rnd.randrange(0, 9 * 365)
    lat, lon = rnd.uniform(-55.0, 55.0), rnd.uniform(-180.0, 180.0)
    noon = day * 86400 * US + int((12.0 - lon / 15.0) * HOUR_US)
    t0, t1 = noon - 7 * HOUR_US, noon + 7 * HOUR_US
    if kind == "morning":
        t1 = noon - HOUR_US // 2
    speed = 0.0 if rnd.random() < 0.3 else round(rnd.uniform(2.0, 7.0), 2)
    truth = {"utc": format_utc(t0, 0), "lat_deg": round(lat, 4), "lon_deg": round(lon, 4),
             "course_deg": round(rnd.uniform(0.0, 360.0), 1), "speed_kn": speed}
    obs = {"eye_height_m": round(rnd.uniform(1.5, 4.0), 2), "temperature_c": round(rnd.uniform(0.0, 30.0), 1),
           "pressure_hpa": round(rnd.uniform(995.0, 1030.0), 1)}
    t0 = parse_utc(truth["utc"])
    devs = [im["deviation_deg"] for im in images]
    pairs = [("sun", "lower"), ("sun", "upper")]
    if kind == "sun_moon":
        pairs += [("moon", "lower"), ("moon", "upper")]
    found = []
    for body, limb in pairs:
        for t, k in _roots(body, limb, devs, t0, t1, truth, obs):
            found.append((t, body, limb, k))
    if not found:
        return None
    t = np.array([f[0] for f in found], dtype=np.int64)
    la, lo = rhumb(truth, t)
    sun_alt = reference.topocentric_alt_az("sun", t, la, lo)["alt_deg"]
    elong = np.degrees(np.arccos(np.clip(np.sum(reference.apparent("sun", t)["tirs"] *
                                                reference.apparent("moon", t)["tirs"], axis=-1), -1.0, 1.0)))
    keep = [f for f, s, e in zip(found, sun_alt, elong) if f[1] == "sun" or (s > -6.0 and e > 15.0)]
    if len(keep) < 6 or (kind == "sun_moon" and not any(f[1] == "moon" for f in keep)):
        return None
    rnd.shuffle(keep)
    chosen = keep[:rnd.randint(6, 20)]
    if kind == "sun_moon" and not any(f[1] == "moon" for f in chosen):
        chosen[0] = [f for f in keep if f[1] == "moon"][0]
    chosen.sort()
    rows = []
    for t_us, body, limb, k in chosen:
        tt = np.array([t_us - US // 2, t_us, t_us + US // 2], dtype=np.int64)
        hs, zn = sextant_altitude(body, limb, tt, truth, obs)
        dip = 1.76 * np.sqrt(obs["eye_height_m"]) / 60.0
        weather = 0.28 * obs["pressure_hpa"] / (obs["temperature_c"] + 273.0)
        r = weather * float(bennett_refined_arcmin(np.array([hs[1] - dip]))[0])
        rows.append([t_us, body, limb, images[k]["id"], round(float(hs[2] - hs[0]) * 60.0, 6), round(r, 4),
                     round(float(zn[1]), 3)])
    epoch = rows[-1][0]
    la, lo = rhumb(truth, np.array([epoch], dtype=np.int64))
    return {"kind": kind, "truth": truth, "observer": obs, "epoch_us": epoch,
            "truth_at_epoch": [round(float(la[0]), 8), round(float(lo[0]), 8)], "contacts": rows}


def main():
    started = time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime())
    rnd = random.Random(SEED)
    images = instrument_images()
    scenarios = []
    drawn = 0
    while len(scenarios) < N_SCENARIOS:
        drawn += 1
        s = _scenario(rnd, images)
        if s is not None:
            scenarios.append(s)
            if len(scenarios) % 50 == 0:
                print("%d scenarios (%d drawn)" % (len(scenarios), drawn))
                sys.stdout.flush()
    doc = {"format": "limbclock-vectors/coverage-1",
           "provenance": {"generator": "vectors/generate_coverage.py", "generated_utc": started, "seed": SEED,
                          "libraries": reference.library_versions(),
                          "method": "contact = instant the reference sextant altitude of the limb equals the "
                                    "image's deviation (vectors.generate_schedule.sextant_altitude: DE421 + ERFA "
                                    "exact topocentric place on WGS 84, topocentric SD, Bennett refined refraction "
                                    "x NA weather factor, NA dip 1.76' sqrt(h), exact rhumb line); 60 s grid, "
                                    "Illinois regula falsi to |Hs - D| < 1e-7 deg; rate by central difference "
                                    "over 1 s; noise-free",
                          "note": "invented scenarios; errors are added by the reader (seeded)"},
           "instrument": {"plate_angles_deg": list(PLATES_DEG), "images": images},
           "columns": COLUMNS, "scenarios": scenarios}
    with open(OUT, "w") as f:
        json.dump(doc, f, separators=(",", ":"))
        f.write("\n")
    print("wrote %s: %d scenarios, %d contacts" % (OUT, len(scenarios), sum(len(s["contacts"]) for s in scenarios)))
    return 0


def load():
    """(header, scenarios) of ``vectors/coverage_sessions.json``."""
    with open(OUT) as f:
        doc = json.load(f)
    scenarios = doc.pop("scenarios")
    return doc, scenarios


if __name__ == "__main__":
    sys.exit(main())
