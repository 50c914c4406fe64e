"""Almanac benchmark: accuracy over the whole shipped span, file sizes, speed (CPython, MicroPython).

Accuracy grid: Moon every 37 min, Sun every 187 min, 2025-01-01 to 2051-01-01 UTC
(about 370 000 + 73 000 instants).  The reference (``vectors.reference``) runs
vectorised on the whole grid; the shipped files are decoded with the engine's
own parser and bit reader into arrays and summed vectorised at every grid point;
the engine's pure-Python ``Almanac.position`` is run on every 200th point to show
it gives the same numbers as the vectorised sum.
"""
import json
import time

import numpy as np

from engine import almanac, timescale as ts
from engine.constants import US_PER_DAY, US_PER_S
from vectors import reference

GRID_MIN = {"moon": 37, "sun": 187}
SUBSAMPLE = 200


def _series_arrays(year_obj, body):
    """All segments of one body decoded by the engine: 3 arrays (nseg, N+1) of coefficients in the
    quantities' units (the engine's decoder scales the integers by the quantum)."""
    s = year_obj._series(body)
    out = [[], [], []]
    for i in range(s.nseg):
        for q, c in enumerate(year_obj._coefficients(s, i)):
            out[q].append(np.array(c, dtype=float))
    return s, [np.array(o) for o in out]


def _vector_eval(alm, body, t):
    """Vectorised evaluation of the shipped series at UTC instants t (int64 array) -> (ra, dec, third)."""
    tt = t + reference.tt_minus_utc_us(t)
    out = np.zeros((3, t.size))
    days, inv = np.unique(t // US_PER_DAY, return_inverse=True)
    ty = np.array([ts.civil_from_days(int(d))[0] for d in days])[inv]
    for y in alm.years:
        m = ty == y
        if not m.any():
            continue
        a = alm.year(y)
        s, arrs = _series_arrays(a, body)
        off = tt[m] - a.start_tt_us
        idx = off // s.seg_us
        x = (2.0 * (off - idx * s.seg_us) - s.seg_us) / s.seg_us
        for q in range(3):
            c = arrs[q][idx]
            T = np.cos(np.outer(np.arccos(np.clip(x, -1, 1)), np.arange(c.shape[1])))
            out[q, m] = np.sum(c * T, axis=1)
    return out


def accuracy(alm):
    lo, hi = alm.span_us()
    rows = []
    for body in ("sun", "moon"):
        t = np.arange(lo, hi, GRID_MIN[body] * 60 * US_PER_S, dtype=np.int64)
        t0 = time.perf_counter()
        ref = reference.apparent(body, t)
        t_ref = time.perf_counter() - t0
        ra, dec, third = _vector_eval(alm, body, t)
        era = ref["era_deg"]
        gha = (era - ra) % 360.0
        if body == "sun":
            sd, hp = third, third * almanac.SUN_HP_PER_SD
        else:
            hp = third
            sd = np.degrees(np.arcsin(almanac.MOON_K * np.sin(np.radians(hp / 60.0)))) * 60.0
        e_gha = np.abs((gha - ref["gha_deg"] + 180.0) % 360.0 - 180.0) * 60.0
        e_dec = np.abs(dec - ref["dec_deg"]) * 60.0
        e_sd = np.abs(sd - ref["sd_arcmin"])
        e_hp = np.abs(hp - ref["hp_arcmin"])
        # the engine itself on a subsample: same numbers as the vectorised sum
        sub = t[::SUBSAMPLE]
        d_engine = 0.0
        for k, x in enumerate(sub):
            p = alm.position(body, int(x))
            i = k * SUBSAMPLE
            d_engine = max(d_engine, abs((p.gha_deg - gha[i] + 180.0) % 360.0 - 180.0) * 60.0,
                           abs(p.dec_deg - dec[i]) * 60.0)
        rows.append((body, t.size, e_gha.max(), e_dec.max(), e_sd.max(), e_hp.max(),
                     float(np.percentile(np.maximum(e_gha, e_dec), 99)), sub.size, d_engine, t_ref))
    print("accuracy vs reference (DE421 + ERFA), whole span %d-%d, max |error| in arcmin:"
          % (alm.first_year, alm.last_year))
    print("  %-5s %8s %8s %8s %8s %8s %10s   %s" % ("body", "points", "GHA", "Dec", "SD", "HP", "99% GHA/Dec",
                                                   "engine vs vectorised (pts, arcmin)"))
    targets = {"sun": 0.005, "moon": 0.01}
    for body, n, g, d, s, h, p99, ns, de, t_ref in rows:
        print("  %-5s %8d %8.4f %8.4f %8.4f %8.4f %10.4f   %d, %.1e   (target %.3f'; SD/HP 0.005')"
              % (body, n, g, d, s, h, p99, ns, de, targets[body]))
        print("        ratio max error / target: GHA %.2f, Dec %.2f" % (g / targets[body], d / targets[body]))
    return rows


def sizes(alm):
    d = almanac.describe_shipped()
    b = [f["bytes"] for f in d["files"]]
    print("file sizes: %d files, %d bytes total; per year min %d, mean %.0f, max %d bytes (target <= 4096)"
          % (len(b), d["bytes"], min(b), sum(b) / len(b), max(b)))
    return b


def speed(alm):
    rng = np.random.default_rng(1)
    lo, hi = alm.span_us()
    rand = [int(x) for x in rng.integers(lo, hi, 400)]
    start = ts.parse_utc("2029-08-03T06:00:00Z")
    seq = [start + k * 60 * US_PER_S for k in range(2000)]
    timings = {}
    host = almanac.load(keep_years=len(alm.years))
    for t in rand:
        host.position("sun", t)
    for label, a, instants in (("sequential (1 min apart, segment cached)", alm, seq),
                               ("random, 2 years kept (read+parse a file)", alm, rand),
                               ("random, all years kept (segment decode)", host, rand)):
        t0 = time.perf_counter()
        for t in instants:
            a.position("sun", t)
            a.position("moon", t)
        timings[label] = (time.perf_counter() - t0) / len(instants)
    n_ref = 60
    t0 = time.perf_counter()
    for t in rand[:n_ref]:
        reference.apparent("sun", t)
        reference.apparent("moon", t)
    t_ref = (time.perf_counter() - t0) / n_ref
    print("CPython, time per Sun + Moon evaluation:")
    for label, v in timings.items():
        print("  engine  %-44s %8.1f us   reference/engine = %5.0fx" % (label, v * 1e6, t_ref / v))
    print("  reference pipeline, one instant at a time          %8.1f us" % (t_ref * 1e6))
    return timings, t_ref


def micropython():
    try:
        from tests.mpy import run_micropython, available
    except ImportError:
        print("MicroPython: runner not importable")
        return None
    if not available():
        print("MicroPython: WebAssembly port not installed (make mp)")
        return None
    code = """
import gc, time, json
def used():
    gc.collect()
    return gc.mem_alloc()
from engine import almanac, timescale as ts
m0 = used()
alm = almanac.load()
alm.year(2029)
m1 = used()
t = ts.parse_utc("2029-08-03T06:00:00Z")
alm.position("sun", t); alm.position("moon", t)
m2 = used()
n = 300
a = time.ticks_us()
for k in range(n):
    alm.position("sun", t + k * 60000000)
    alm.position("moon", t + k * 60000000)
b = time.ticks_us()
c = time.ticks_us()
for k in range(60):
    alm.position("sun", t + k * 9 * 86400000000 // 2)
    alm.position("moon", t + k * 9 * 86400000000 // 2)
d = time.ticks_us()
print(json.dumps({"load": m1 - m0, "eval": m2 - m1, "seq_us": time.ticks_diff(b, a) / n,
                  "new_segment_us": time.ticks_diff(d, c) / 60}))
"""
    got = json.loads(run_micropython(code).strip().splitlines()[-1])
    print("MicroPython (WebAssembly port under node; double-precision floats):")
    print("  time per Sun + Moon evaluation: %.0f us (segment cached), %.0f us (new segments)"
          % (got["seq_us"], got["new_segment_us"]))
    print("  heap allocated (upper bound; this port's gc frees nothing mid-run): load one year %d B, "
          "first Sun + Moon evaluation %d B, together %d B of a 64 KB heap"
          % (got["load"], got["eval"], got["load"] + got["eval"]))
    return got


def run():
    alm = almanac.load()
    sizes(alm)
    accuracy(alm)
    speed(alm)
    micropython()
