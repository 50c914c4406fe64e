"""Identification and doubts: cold starts, calibrated confidence, doubt rate, bounded cost.

Sessions (``tests/identify_trials.py``): contact times of 24 invented days at sea computed outside
the engine (``vectors/identify_scenarios.json``: DE421 + ERFA, Bennett refraction, NA dip), with
simulated errors (image deviations 1', dip 1', 0.3' per contact, 0.25 s timing, the DR's velocity
0.3 kn), unlabelled, the DR off as each part says.

1. Cold start inside ``limbclock fix`` (``engine.reduce_session``) by session size, DR 200-600 nmi
   off: the truth among the positions that fit (the search is complete), the fix right and
   unhedged, hedged (several positions fit: doubts), wrong without a doubt (must be none).
2. The seeded 300 sessions of ``tests/test_identify_calibration.py`` (DR 0-600 nmi off): labels
   right / withheld / wrong (given at confidence >= 0.99) by DR error and by size, and more sessions
   (seeds 101-102) for the reliability table: confidence bins against the share of right labels.
3. Doubt rate on clean sessions: the DR off by N(0, sigma_DR) per axis as the session states
   (30 nmi), 6-20 contacts; unlabelled (identification on), and labelled.
4. Cost: identification and the on-board reduction in CPython, ticks (``engine.coop.ticks``:
   model evaluations, anchor image pairs, refinement steps: a portable count) and bytes against the
   session's size; MicroPython's unix port (``tests/mpu.py``): time, ticks and the smallest heap of
   the on-board reduction of 30 contacts; an estimate for 125 and 240 MHz boards.
"""
import json
import math
import os
import random
import sys
import tempfile
import time
import tracemalloc

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
TESTS = os.path.join(ROOT, "tests")
# MicroPython's rate for the loop below on a board, iterations per second per MHz of clock:
# 500-750 [from memory, the range bench/bench_onboard.py assumes for 100-200 MHz boards: 50 000-150 000
# iterations/s]; the board estimate is the unix port's time times (unix rate / board rate).
BOARD_LOOP_PER_S_PER_MHZ = (500.0, 750.0)
LOOP = ("import time\nx = 0.0\nt0 = time.ticks_ms()\nfor i in range(400000):\n    x = x * 0.999 + 1.5\n"
        "print('LOOP-MS', time.ticks_diff(time.ticks_ms(), t0))\n")


def _tools():
    if TESTS not in sys.path:
        sys.path.insert(0, TESTS)
    import identify_trials
    return identify_trials


def cold_starts(alm, T, doc, per_size=40):
    import engine
    from engine import doubts
    from engine.sphere import distance_nm
    from engine.timescale import parse_utc
    print("1. cold start inside fix: DR 200-600 nmi off, unlabelled contacts (%d sessions per size)" % per_size)
    print("   'right': every image right and no doubt about them (the fix's error median and share within its")
    print("   99.9 % ellipse); 'hedged': several positions fit or images uncertain, said in doubts")
    print("   contacts  truth among fits  right  (median nmi, in ellipse)  hedged  refused  WRONG images unhedged"
          "  s/session")
    rnd = random.Random(7)
    for n in (4, 6, 10, 20):
        found = right = hedged = refused = wrong = inside = 0
        errs = []
        t = 0.0
        for _ in range(per_size):
            sess, truth = T.make(doc, rnd, n=n, dr_error_nm=rnd.uniform(200.0, 600.0))
            a = time.perf_counter()
            try:
                r = engine.reduce_session(json.dumps(sess), alm)
            except doubts.NoConsistentFix:
                refused += 1
                t += time.perf_counter() - a
                continue
            t += time.perf_counter() - a
            scn = [s for s in doc["scenarios"] if s["name"] == truth["scenario"]][0]
            lat, lon = T.true_position(scn, parse_utc(r["utc"]))
            found += any(distance_nm(c["lat_deg"], c["lon_deg"], *T.true_position(scn, parse_utc(c["utc"]))) < 60.0
                         for c in r["identification"]["candidates"])
            if {"candidates", "identification_ambiguous"} & set(d["code"] for d in r["doubts"]):
                hedged += 1
            elif r["images"] == truth["images"]:
                right += 1
                errs.append(distance_nm(r["lat_deg"], r["lon_deg"], lat, lon))
                inside += doubts.dr_mahalanobis2(dict(r, dr={"lat_deg": lat, "lon_deg": lon}), 0.0) < 13.8
            else:
                wrong += 1
        errs.sort()
        med = errs[len(errs) // 2] if errs else float("nan")
        print("   %8d  %16s  %5s  (%10.1f, %9s)  %6s  %7d  %21d  %9.2f" % (
            n, "%d%%" % round(100.0 * found / per_size), "%d%%" % round(100.0 * right / per_size), med,
            "%d%%" % round(100.0 * inside / max(1, right)), "%d%%" % round(100.0 * hedged / per_size), refused,
            wrong, t / per_size))


def calibration(alm, T, doc):
    from engine import identify
    from engine.session import session_from_dict
    print("2. confidence: the seeded 300 sessions (DR 0-600 nmi off, 4-16 unlabelled contacts)")
    rows = []

    def trial(rnd, count):
        for _ in range(count):
            sess, truth = T.make(doc, rnd)
            r = identify.identify(session_from_dict(sess), alm)
            rows.append((truth, r))
    a = time.perf_counter()
    trial(random.Random(2031), 300)
    dt = time.perf_counter() - a
    for label, key, bins in (("DR error nmi", lambda t: int(t["dr_error_nm"] // 100), range(6)),
                             ("contacts", lambda t: len(t["images"]), T.SIZES)):
        print("   %-12s  sessions  labels  right   withheld  WRONG  sessions all right" % label)
        for b in bins:
            sel = [(t, r) for t, r in rows if key(t) == b]
            if not sel:
                continue
            ok = amb = bad = allok = 0
            for t, r in sel:
                g, w, x = T.score(r, t)
                ok += g
                amb += w
                bad += x
                allok += g == len(t["images"])
            tot = float(ok + amb + bad)
            name = ("%d-%d" % (100 * b, 100 * b + 100)) if label.startswith("DR") else str(b)
            print("   %-12s  %8d  %6d  %5.1f%%  %7.1f%%  %5d  %17.0f%%" % (
                name, len(sel), tot, 100 * ok / tot, 100 * amb / tot, bad, 100.0 * allok / len(sel)))
    print("   identify: %.0f ms a session (CPython)" % (1000.0 * dt / 300))
    trial(random.Random(101), 300)
    trial(random.Random(102), 300)
    print("   reliability, %d sessions (seeds 2031, 101, 102): confidence of each contact's most probable image"
          % len(rows))
    print("   confidence      labels  right")
    edges = [0.0, 0.5, 0.7, 0.8, 0.9, 0.95, 0.99, 0.999, 1.0001]
    for lo, hi in zip(edges[:-1], edges[1:]):
        n = ok = 0
        for t, r in rows:
            for c, want, h in zip(r["contacts"], t["images"], r["hypotheses"][0]["images"]):
                if lo <= c["confidence"] < hi:
                    n += 1
                    ok += h == want
        if n:
            print("   %5.3f-%5.3f  %8d  %5.1f%%" % (lo, min(hi, 1.0), n, 100.0 * ok / n))


def doubt_rate(alm, T, doc, count=120):
    import engine
    from engine import doubts
    print("3. doubts on clean sessions: DR off N(0, 30 nmi) a side as stated, contacts over 1-3.5 h (a"
          " morning's sights), %d sessions each" % count)
    for labelled, sizes in ((True, (6, 8, 10, 12, 16, 20)), (False, (6, 8, 10, 12, 16, 20)), (False, (10, 12, 16, 20))):
        rnd = random.Random(55)
        with_doubt = 0
        codes = {}
        refused = 0
        for _ in range(count):
            n = rnd.choice(sizes)
            err = math.hypot(rnd.gauss(0.0, 30.0), rnd.gauss(0.0, 30.0))
            sess, truth = T.make(doc, rnd, n=n, dr_error_nm=err, span_h=rnd.uniform(1.0, 3.5),
                                 labelled=n if labelled else 0, strict_span=True)
            try:
                r = engine.reduce_session(json.dumps(sess), alm)
            except doubts.NoConsistentFix:
                refused += 1
                continue
            with_doubt += bool(r["doubts"])
            for d in r["doubts"]:
                codes[d["code"]] = codes.get(d["code"], 0) + 1
        print("   %-10s %-17s sessions with a doubt: %4.1f%%  (%s)%s" % (
            "labelled" if labelled else "unlabelled", "%d-%d contacts" % (min(sizes), max(sizes)),
            100.0 * with_doubt / count, ", ".join("%s %d" % kv for kv in sorted(codes.items())) or "none",
            "; refused %d" % refused if refused else ""))


def cost(alm):
    from engine import coop, identify
    from engine.session import session_from_dict
    import test_identify_bounds as B
    import onboard_scripts as S
    print("4. cost")
    doc = S.session_doc("sun_moon", 30)
    for c in doc["contacts"]:
        c["image"] = None
    s = session_from_dict(json.loads(json.dumps(doc)))
    identify.identify_for_fix(s, alm)
    s = session_from_dict(json.loads(json.dumps(doc)))
    t0, k0 = time.perf_counter(), coop.ticks
    identify.identify_for_fix(s, alm)
    print("   CPython, 30 unlabelled contacts (sun_moon): identification %.0f ms, %d ticks"
          % (1000 * (time.perf_counter() - t0), coop.ticks - k0))
    print("   contacts   ticks   ticks/contact  ms (CPython)  peak KB (tracemalloc)")
    identify.identify_for_fix(B.long_session(24), alm)                 # that day's almanac year decoded
    for n in (30, 300, 3000, 10000):
        s = B.long_session(n)
        t0, k0 = time.perf_counter(), coop.ticks
        tracemalloc.start()
        identify.identify_for_fix(s, alm)
        peak = tracemalloc.get_traced_memory()[1]
        tracemalloc.stop()
        dt = time.perf_counter() - t0
        print("   %8d  %6d  %13.2f  %12.0f  %21.0f" % (n, coop.ticks - k0, (coop.ticks - k0) / float(n), 1000 * dt,
                                                      peak / 1024.0))
    import mpu
    if not mpu.available():
        print("   MicroPython unix port not installed (pip install -e '.[test]'): skipped")
        return
    setup = S.setup_code(doc, tempfile.mkdtemp()) + "\nfrom engine.session import parse_session\nfrom engine import coop\n"
    call = ("s = parse_session(ob.session_text(lambda: iter_records(lg), 1), ob.alm)\n"
            "k0 = coop.ticks\n_t0 = ticks_ms()\nnotes, sm = identify.identify_for_fix(s, ob.alm)\n_t1 = ticks_ms()\n"
            "k1 = coop.ticks\nr = fix.solve_fix(s, ob.alm)\n_t2 = ticks_ms()\n"
            "print('MP', ticks_diff(_t1, _t0), k1 - k0, ticks_diff(_t2, _t1), coop.ticks - k1)\n"
            "s = parse_session(ob.session_text(lambda: iter_records(lg), 1), ob.alm)\n_t3 = ticks_ms()\n"
            "r = engine.reduce_session(s, ob.alm)\nprint('MPR', ticks_diff(ticks_ms(), _t3))\n")
    runs = []
    for _ in range(5):                      # five runs: the median of each run's ratio to the loop (a shared machine)
        # a 1 MB heap: a collection scans the whole heap, and a 16 MB one doubles some times
        ok, out = mpu.run_unix(setup + call + LOOP + "print('ARENA-OK')\n", heap_bytes=1 << 20)
        if not ok:
            print("   MicroPython run failed: %s" % out[-300:])
            return
        vals = {}
        for line in out.splitlines():
            parts = line.split()
            if parts and parts[0] in ("MP", "MPR", "LOOP-MS"):
                vals[parts[0]] = [int(x) for x in parts[1:]]
        runs.append(vals)

    def median(xs):
        xs = sorted(xs)
        return xs[len(xs) // 2]
    id_ms = median([v["MP"][0] for v in runs])
    fix_ms = median([v["MP"][2] for v in runs])
    red_ms = median([v["MPR"][0] for v in runs])
    id_ticks, fix_ticks = runs[0]["MP"][1], runs[0]["MP"][3]
    loop_ms = median([v["LOOP-MS"][0] for v in runs])
    # in loop-iterations: each run's time over that run's loop rate, so that the machine's load cancels
    id_loops = median([v["MP"][0] / float(v["LOOP-MS"][0]) * 400000 for v in runs])
    red_loops = median([v["MPR"][0] / float(v["LOOP-MS"][0]) * 400000 for v in runs])
    print("   MicroPython unix port (64-bit), on-board session of 30 contacts (median of 5 runs): identification"
          " %d ms (%d ticks), fix %d ms (%d ticks), reduce_session %d ms" % (id_ms, id_ticks, fix_ms, fix_ticks,
                                                                             red_ms))
    print("   in float-loop iterations of the same run: identification %.0f k, reduce_session %.0f k (the loop: %.0f k/s"
          " here)" % (id_loops / 1000.0, red_loops / 1000.0, 400.0 / (loop_ms / 1000.0)))
    print("   board estimate: those iterations at %.0f-%.0f per s per MHz [from memory]"
          % BOARD_LOOP_PER_S_PER_MHZ)
    for mhz in (125, 240):
        lo, hi = [mhz * r for r in BOARD_LOOP_PER_S_PER_MHZ]
        print("      %3d MHz: identification %.1f-%.1f s, whole reduction %.1f-%.1f s (aim: <= 5 s at 125 MHz)"
              % (mhz, id_loops / hi, id_loops / lo, red_loops / hi, red_loops / lo))
    kb = mpu.min_arena(S.setup_code(doc, tempfile.mkdtemp()), S.CALL, lo=32768, hi=131072, step=2048) / 1024.0
    print("   heap: the on-board reduction of 30 unlabelled contacts needs %.0f KB here (4 layouts; about %.0f KB on a"
          " 32-bit board; budget %d KB here)" % (kb, kb / 2.0, 64))


def run():
    from engine import almanac
    T = _tools()
    doc = T.load()
    alm = almanac.load()
    cold_starts(alm, T, doc)
    calibration(alm, T, doc)
    doubt_rate(alm, T, doc)
    cost(alm)
