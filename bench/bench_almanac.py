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
    """All segments of one body as stored: 3 arrays (nseg, N+1) of Chebyshev coefficients in the
    quantities' units (the engine's bit reader, scaled by the quantum; summed here by numpy in
    the Chebyshev basis, independently of the engine's power form and Horner's rule)."""
    s = year_obj._series(body)
    out = [[], [], []]
    for i in range(s.nseg):
        for q, c in enumerate(year_obj.chebyshev(body, i)):
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


def _best(fn, rounds=5):
    """Smallest wall time of ``rounds`` calls of ``fn`` (the machine is shared: the minimum is the
    figure least disturbed by other work)."""
    best = None
    for _ in range(rounds):
        t0 = time.perf_counter()
        fn()
        dt = time.perf_counter() - t0
        best = dt if best is None else min(best, dt)
    return best


N_RANDOM = 2000          # random instants over the whole span, both bodies at each
N_REF = 40               # instants for the reference pipeline (about 1.5 ms each on this machine)


def speed(alm):
    """CPython time per Sun + Moon evaluation, side by side with the reference pipeline at the
    same random instants.  Returns a dict of figures (microseconds)."""
    rng = np.random.default_rng(1)
    lo, hi = alm.span_us()
    rand = [int(x) for x in rng.integers(lo, hi, N_RANDOM)]
    start = ts.parse_utc("2029-08-03T06:00:00Z")
    seq = [start + k * 60 * US_PER_S for k in range(2000)]          # 1 min apart: the segment in use

    def both(a, instants):
        def f():
            for t in instants:
                a.position("sun", t)
                a.position("moon", t)
        return f

    def ref():
        for t in rand[:N_REF]:
            reference.apparent("sun", t)
            reference.apparent("moon", t)

    host = almanac.load()                                # the host's default: decoded form, every year kept
    t0 = time.perf_counter()
    both(host, rand)()
    cold = (time.perf_counter() - t0) / N_RANDOM         # first touch: each segment decoded once
    warm_all = almanac.load()
    t0 = time.perf_counter()
    for y in warm_all.years:
        a = warm_all.year(y)
        for body in almanac.BODIES:
            s = a._series(body)
            for i in range(s.nseg):
                a._coefficients(s, i)
    t_warm_all = time.perf_counter() - t0
    board2 = almanac.load(decoded=False)                 # the board's form: packed, 2 years kept
    board_all = almanac.load(decoded=False, keep_years=len(alm.years))
    both(board_all, rand)()
    t_ref = _best(ref, 3) / N_REF
    rows = [
        ("host (decoded, every year kept)", "random instants, warm", _best(both(host, rand)) / N_RANDOM),
        ("host (decoded, every year kept)", "random instants, first touch", cold),
        ("host (decoded, every year kept)", "in the segment in use", _best(both(host, seq)) / len(seq)),
        ("board form (packed), all years", "random instants (segment decode)",
         _best(both(board_all, rand), 3) / N_RANDOM),
        ("board form (packed), 2 years", "random instants (file read+parse)",
         _best(both(board2, rand[:400]), 3) / 400),
        ("board form (packed), 2 years", "in the segment in use", _best(both(board2, seq)) / len(seq)),
    ]
    t_ref = min(t_ref, _best(ref, 2) / N_REF)            # measured before and after: the quieter figure
    print("CPython, time per Sun + Moon evaluation (best of 5 runs; reference = DE421 + ERFA,")
    print("vectors/reference.py, one instant at a time, at the same random instants):")
    print("  %-34s %-34s %9s  %s" % ("engine", "instants", "us", "reference / engine"))
    for form, what, v in rows:
        print("  %-34s %-34s %9.1f  %6.0fx%s" % (form, what, v * 1e6, t_ref / v,
                                                 "   (target >= 100x)" if what.endswith("warm") else ""))
    print("  %-34s %-34s %9.1f" % ("reference pipeline", "random instants", t_ref * 1e6))
    print("  decoding every segment of %d years once (host): %.0f ms" % (len(alm.years), t_warm_all * 1e3))
    return {"ref_us": t_ref * 1e6, "rows": [(f, w, v * 1e6) for f, w, v in rows]}


MP_SPEED = """
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
seq = time.ticks_diff(time.ticks_us(), a) / n
# random instants inside the year in use (a new segment nearly every time; the year stays parsed)
t0 = ts.parse_utc("2029-01-01T00:00:00Z")
x = 12345
inst = []
for k in range(60):
    x = (x * 1103515245 + 12345) % 2147483648
    inst.append(t0 + (x % 364) * 86400000000 + (x % 86400) * 1000000)
a = time.ticks_us()
for u in inst:
    alm.position("sun", u)
    alm.position("moon", u)
in_year = time.ticks_diff(time.ticks_us(), a) / len(inst)
# random instants over the whole span (2 years kept: mostly a file read and parse too)
inst = []
for k in range(40):
    x = (x * 1103515245 + 12345) % 2147483648
    inst.append(ts.parse_utc("2025-01-01T00:00:00Z") + (x % 9490) * 86400000000 + (x % 86400) * 1000000)
a = time.ticks_us()
for u in inst:
    alm.position("sun", u)
    alm.position("moon", u)
span = time.ticks_diff(time.ticks_us(), a) / len(inst)
print(json.dumps({"load": m1 - m0, "eval": m2 - m1, "seq_us": seq, "year_us": in_year, "span_us": span,
                  "decoded": alm.decoded}))
print("ARENA-OK")
"""


def micropython(ref_us):
    try:
        import sys
        import os
        tests = os.path.join(os.path.dirname(os.path.dirname(os.path.abspath(__file__))), "tests")
        if tests not in sys.path:
            sys.path.insert(0, tests)
        import mpy
        import mpu
    except ImportError:
        print("MicroPython: runners not importable")
        return None
    out = {}
    if mpy.available():
        out["WebAssembly port (node)"] = json.loads(mpy.run_micropython(MP_SPEED).strip().splitlines()[-2])
    else:
        print("MicroPython: WebAssembly port not installed (make mp)")
    if mpu.available():
        ok, text = mpu.run_unix(MP_SPEED, heap_bytes=1 << 20)
        if ok:
            out["unix port (native, 64-bit)"] = json.loads([ln for ln in text.splitlines() if ln.startswith("{")][-1])
        else:
            print("MicroPython unix port failed:\n" + text[-1000:])
    else:
        print("MicroPython: unix port not installed (pip install -e '.[test]')")
    if not out:
        return None
    print("MicroPython, the board's form (packed, 2 years kept, double-precision floats in these ports),")
    print("time per Sun + Moon evaluation; reference = DE421 + ERFA on CPython (%.0f us), a different machine"
          % ref_us)
    print("class: the ratio says how the board's code on this PC compares, not a board's speed:")
    print("  %-28s %-44s %9s  %s" % ("port", "instants", "us", "reference / port"))
    for port, got in out.items():
        assert got["decoded"] is False
        for key, what in (("seq_us", "in the segment in use (1 min apart)"),
                          ("year_us", "random in the year in use (segment decode)"),
                          ("span_us", "random over 2025-2050 (file read + parse)")):
            print("  %-28s %-44s %9.0f  %6.1fx" % (port, what, got[key], ref_us / got[key]))
    got = next(iter(out.values()))
    print("  heap allocated (WebAssembly port: upper bound, its gc frees nothing mid-run): load one year %d B,"
          % got["load"])
    print("  first Sun + Moon evaluation %d B, together %d B of a 64 KB heap" % (got["eval"], got["load"] + got["eval"]))
    return out


def run():
    alm = almanac.load()
    sizes(alm)
    accuracy(alm)
    sp = speed(alm)
    micropython(sp["ref_us"])
