"""Instrument benchmark: schedule accuracy and speed, calibration error vs number of contacts,
identification success vs DR error.

Reference contacts: ``vectors/schedule_contacts.json`` (DE421 + ERFA, Bennett refraction, NA dip;
``vectors/generate_schedule.py``).  Calibration and identification trials take those reference
contact times and add Gaussian timing noise (sigma 0.25 s, a typical reaction scatter) and, for
identification, a DR offset in a random direction: the "observations" are the reference
pipeline's, the noise is simulated.
"""
import json
import math
import os
import random
import time

HERE = os.path.dirname(os.path.abspath(__file__))
VECTORS = os.path.join(os.path.dirname(HERE), "vectors", "schedule_contacts.json")


def _load():
    with open(VECTORS) as f:
        return json.load(f)


def _session(scn, images, contacts, delay_s=0.0, noise_s=0.0, rnd=None, known=True, north=0.0, east=0.0,
             labelled=True):
    from engine.sphere import move_nm
    from engine.timescale import format_utc, parse_utc
    tr = dict(scn["track"], known=known)
    tr["lat_deg"], tr["lon_deg"] = move_nm(tr["lat_deg"], tr["lon_deg"], north, east)
    cs = []
    for c in contacts:
        dt = delay_s + (rnd.gauss(0.0, noise_s) if noise_s else 0.0)
        cs.append({"utc": format_utc(parse_utc(c["utc"]) + int(round(dt * 1e6)), 3), "body": c["body"],
                   "limb": c["limb"], "image": c["image"] if labelled else None})
    return json.dumps({"format": "limbclock-session/1", "observer": scn["observer"], "instrument": {"images": images},
                       "track": tr, "contacts": cs})


def bench_schedule(doc, alm):
    from engine import plan
    from engine.model import Observer, Track
    from engine.timescale import parse_utc
    print("-- contact schedule vs the reference pipeline")
    imgs = [(i["id"], i["deviation_deg"]) for i in doc["images"]]
    worst = 0.0
    n = 0
    total_s = 0.0
    hours = 0.0
    for s in doc["scenarios"]:
        t = s["track"]
        o = s["observer"]
        tr = Track(parse_utc(t["utc"]), t["lat_deg"], t["lon_deg"], t["course_deg"], t["speed_kn"])
        ob = Observer(o["eye_height_m"], o["temperature_c"], o["pressure_hpa"])
        t0, t1 = parse_utc(s["from"]), parse_utc(s["to"])
        a = time.perf_counter()
        got = plan.schedule(alm, imgs, tr, ob, t0, t1, moon_min_elongation_deg=0.0)
        total_s += time.perf_counter() - a
        hours += (t1 - t0) / 3.6e9
        for r, c in zip(s["contacts"], got):
            worst = max(worst, abs(c.t_us - parse_utc(r["utc"])) / 1e6)
            n += 1
        print("  %-14s %3d contacts (reference %3d)" % (s["name"], len(got), len(s["contacts"])))
    print("  max |engine - reference| over %d contacts: %.3f s   (target < 1 s)" % (n, worst))
    print("  speed: %.1f ms per hour of window (8 images x 2 bodies x 2 limbs, CPython)" % (1000 * total_s / hours))
    s = doc["scenarios"][0]
    t = s["track"]
    tr = Track(parse_utc(t["utc"]), t["lat_deg"], t["lon_deg"], t["course_deg"], t["speed_kn"])
    a = time.perf_counter()
    for _ in range(5):
        plan.next_contact(alm, imgs, tr, Observer(), parse_utc("2026-08-03T12:00:00Z"), horizon_s=8 * 3600)
    print("  next_contact with a 6.5 h gap: %.0f ms (CPython)" % ((time.perf_counter() - a) / 5 * 1000))


def bench_calibration(doc, alm):
    from engine import calibrate, instrument
    print("-- calibration: deviation error (rms over images) vs contacts; noise 0.25 s, delay 0.20 s")
    lad = instrument.ladder(doc["plate_angles_deg"], 2)
    true = dict((i["id"], i["deviation_deg"]) for i in doc["images"])
    rnd = random.Random(11)
    scn = doc["scenarios"][0]
    print("  contacts  trials  rms dev error'  max dev error'  delay error rms (s)  mean sigma'")
    for n in (16, 24, 32, 48):
        errs = []
        derrs = []
        sigs = []
        trials = 12
        for _ in range(trials):
            images = [{"id": im.id, "deviation_deg": im.deviation_deg + rnd.uniform(-3, 3) / 60.0, "coef": im.coef}
                      for im in lad.images]
            pick = sorted(rnd.sample(scn["contacts"], n), key=lambda c: c["utc"])
            r = calibrate.calibrate_session(_session(scn, images, pick, 0.2, 0.25, rnd), alm)
            for im in r["images"]:
                errs.append((im["deviation_deg"] - true[im["id"]]) * 60.0)
                sigs.append(im["sigma_arcmin"])
            if r["reaction_delay_estimated"]:
                derrs.append(r["reaction_delay_s"] - 0.2)
        rms = math.sqrt(sum(e * e for e in errs) / len(errs))
        drms = math.sqrt(sum(e * e for e in derrs) / len(derrs)) if derrs else float("nan")
        print("  %8d  %6d  %14.3f  %14.3f  %19.3f  %11.3f" % (n, trials, rms, max(abs(e) for e in errs), drms,
                                                             sum(sigs) / len(sigs)))
    a = time.perf_counter()
    calibrate.calibrate_session(_session(scn, [{"id": im.id, "deviation_deg": im.deviation_deg} for im in lad.images],
                                         scn["contacts"]), alm)
    print("  speed: %.0f ms for %d contacts (CPython)" % ((time.perf_counter() - a) * 1000, len(scn["contacts"])))


def bench_identification(doc, alm):
    from engine import identify
    from engine.session import parse_session
    print("-- identification: 5 unlabelled contacts, timing noise 0.25 s, DR off by E nmi (random bearing)")
    rnd = random.Random(5)
    print("  DR error nmi  sigma_DR told  sessions  all correct  ambiguous (no guess)  wrong   ms/session")
    for err, told in ((0, 30), (10, 30), (30, 30), (60, 30), (100, 30), (60, 60), (100, 100), (200, 200)):
        ok = amb = wrong = 0
        t_tot = 0.0
        n = 0
        for s in doc["scenarios"]:
            cs = s["contacts"]
            for _ in range(10):
                k = rnd.randrange(0, len(cs) - 5)
                pick = cs[k:k + 5]
                b = rnd.uniform(0, 2 * math.pi)
                text = _session(s, doc["images"], pick, 0.0, 0.25, rnd, False, err * math.cos(b), err * math.sin(b),
                                labelled=False)
                a = time.perf_counter()
                r = identify.identify(parse_session(text), alm, float(told))
                t_tot += time.perf_counter() - a
                n += 1
                got = [c["image"] for c in r["contacts"]]
                want = [c["image"] for c in pick]
                if got == want:
                    ok += 1
                elif all(g is None or g == w for g, w in zip(got, want)):
                    amb += 1
                else:
                    wrong += 1
        print("  %12d  %13d  %8d  %10.0f%%  %19.0f%%  %4.0f%%  %10.0f" % (
            err, told, n, 100.0 * ok / n, 100.0 * amb / n, 100.0 * wrong / n, 1000 * t_tot / n))


def bench_ladder():
    from engine import instrument
    print("-- ladder enumeration")
    for plates, order in (([2.7, 4.05], 2), ([2.7, 4.0], 3), ([1.9, 3.1, 4.4], 3), ([1.9, 3.1, 4.4, 5.3], 4)):
        a = time.perf_counter()
        lad = instrument.ladder(plates, order)
        dt = time.perf_counter() - a
        print("  plates %-22s order %d: %3d images (%3d visible), %2d confusable pairs, %.1f ms" % (
            plates, order, len(lad.images), len(lad.visible()), len(lad.pairs), dt * 1000))


def run():
    from engine import almanac
    doc = _load()
    alm = almanac.load()
    bench_ladder()
    bench_schedule(doc, alm)
    bench_calibration(doc, alm)
    bench_identification(doc, alm)
    sizes = []
    for name in ("instrument", "plan", "calibrate", "identify"):
        p = os.path.join(os.path.dirname(HERE), "engine", name + ".py")
        sizes.append("%s %.1f kB" % (name, os.path.getsize(p) / 1024.0))
    print("-- source sizes (engine, before mpy-cross): " + ", ".join(sizes))
