"""The timer reduces on its own: heap, time and accuracy of the on-board fix.

The on-board path (``device.onboard``): the contacts in the timer's log (unlabelled, as pressed) ->
``limbclock-session/1`` text -> ``engine.reduce_session`` (identification of the images, then the
fix).  Sessions: the first 30 contacts of ``vectors/sessions/sun_moon.json`` (Sun and Moon, contact
times from DE421 + ERFA), also all 42, and labelled (no identification, the session parsed first and
its text dropped, as the timer does): 30 of them, and the first 100 of ``long_day``.

1. Heap (MicroPython unix port, fixed heap, ``tests/mpu.py``), the fix now and the dense-covariance
   fix it replaced (``tests/fix_dense.py``, swapped in) side by side: the smallest contiguous free heap
   in which the call succeeds (bisection to 2 KB; "4 layouts": in each of ``mpu.PADS``, since
   where blocks fall changes the need by a few KB), after the code and the timer's files are loaded
   (a board freezes the modules into flash: their bytecode takes no heap).  The port is 64-bit;
   a 32-bit board's objects are half the size (4-byte words, 16-byte GC blocks), so the board
   figure is estimated as half (measured: the reduction allocates 1.995 times the bytes here that
   it does in the 32-bit WebAssembly port), except that a microsecond instant is a small int here and a
   heap-allocated long on a 32-bit board (a few dozen bytes per live instant), and the unboxed
   numbers (``array('d')`` in the fix and identification, a few KB live) take 8 bytes on both.
   The WebAssembly port is shown growing its heap instead (``tests/mp/run.mjs`` with LIMBCLOCK_MP_HEAP starts it small).
2. Time: CPython, the WebAssembly port under node (``tests/mpy.py``), and an estimate for a
   100-200 MHz board from a pure-Python float loop timed in the WebAssembly port against an
   assumed board rate (see ``BOARD_LOOP_PER_S``).
3. Accuracy: the WebAssembly port against CPython (same code, double precision in both), and the
   virtual timer's on-board fix against the truth (the session's ``truth``).
"""
import json
import os
import sys
import tempfile
import time

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
TESTS = os.path.join(ROOT, "tests")
# An assumed MicroPython rate of the loop below on a 100-200 MHz Cortex-M0+/M4 or ESP32 board:
# 50 000 - 150 000 iterations per second [from memory: MicroPython runs of the order of 10^5-10^6
# simple bytecodes per second on such boards; each iteration here is about 8].  An estimate only.
BOARD_LOOP_PER_S = (50000, 150000)
LOOP = ("import time\nx = 0.0\nt0 = time.ticks_ms()\nfor i in range(200000):\n    x = x * 0.999 + 1.5\n"
        "print(time.ticks_diff(time.ticks_ms(), t0))\n")


def _tools():
    if TESTS not in sys.path:
        sys.path.insert(0, TESTS)
    import mpu
    import mpy
    import onboard_scripts
    return mpy, mpu, onboard_scripts


def _wasm_heap_growth(mpy):
    """The WebAssembly port's heap total after holding 200 KB live from a 64 KB start, or None."""
    import subprocess
    if not mpy.available():
        return None
    with tempfile.NamedTemporaryFile("w", suffix=".py", delete=False) as f:
        f.write("import micropython\nx = [bytearray(50) for i in range(4000)]\nmicropython.mem_info()\n")
        script = f.name
    try:
        out = subprocess.run(["node", os.path.join(TESTS, "mp", "run.mjs"), ROOT, script],
                             cwd=os.path.join(TESTS, "mp"), capture_output=True, text=True, timeout=60,
                             env=dict(os.environ, LIMBCLOCK_MP_HEAP="65536")).stdout
    finally:
        os.unlink(script)
    for line in out.splitlines():
        if line.startswith("GC: total:"):
            return int(line.split(":")[2].split(",")[0])
    return None


def run():
    from engine.sphere import distance_nm
    mpy, mpu, S = _tools()
    doc30 = S.session_doc("sun_moon", 30)
    doc42 = S.session_doc("sun_moon")

    print("1. heap: smallest contiguous free heap for the call (MicroPython unix port, 64-bit, fixed heap)")
    if not mpu.available():
        print("   unix port not installed (pip install -e '.[test]'): skipped")
    else:
        parsed = ("import gc, json, engine\nfrom engine import almanac, session, fix, identify, model\n"
                  "alm = almanac.load(keep_years=1)\n_text = %r\nalm.position('sun', %d)\n")
        call_parsed = ("s = session.parse_session(_text, alm)\n_text = None\nr = engine.reduce_session(s, alm)\n"
                       "r = s = None\n")
        dense = "import sys\nsys.path.append(%r)\nimport fix_dense\nfix.solve_fix = fix_dense.solve_fix\n" % TESTS
        from engine.timescale import parse_utc
        doc100 = S.session_doc("long_day", 100)
        t0, t100 = parse_utc(doc30["contacts"][0]["utc"]), parse_utc(doc100["contacts"][0]["utc"])
        rows = [("on-board, 30 contacts identified on board, 4 layouts", 64, S.setup_code(doc30, tempfile.mkdtemp()),
                 S.CALL, mpu.PADS),
                ("on-board, 42 contacts identified on board, 1 layout", None,
                 S.setup_code(doc42, tempfile.mkdtemp()), S.CALL, (0,)),
                ("reduce_session, 30 labelled, 1 layout", None, parsed % (json.dumps(doc30), t0), call_parsed, (0,)),
                ("reduce_session, 100 labelled (long_day), 1 layout", 128, parsed % (json.dumps(doc100), t100),
                 call_parsed, (0,))]
        print("   %-52s %9s %9s   %s" % ("", "fix now", "dense fix", "(KB on this 64-bit port; a 32-bit board needs"
                                                                       " about half)"))
        for label, target, setup, call, pads in rows:
            kb = mpu.min_arena(setup, call, lo=16384, hi=393216, step=2048, pads=pads) / 1024.0
            old = mpu.min_arena(setup + dense, call, lo=16384, hi=524288, step=2048, pads=pads) / 1024.0
            aim = ("target %d KB here (%d on a board): %s" % (target, target // 2, "met" if kb <= target else "NOT met")
                   if target else "")
            print("   %-52s %6.0f KB %6.0f KB   %s" % (label, kb, old, aim))

    grown = _wasm_heap_growth(mpy)
    if grown is not None:
        print("   why not the WebAssembly port: started with a 64 KB heap (LIMBCLOCK_MP_HEAP), holding 200 KB"
              " live it grew to %d KB instead of failing" % (grown // 1024))

    print("2. time of one on-board reduction of 30 contacts")
    t = time.perf_counter()
    ref = S.run_cpython(doc30, tempfile.mkdtemp())
    cp_ms = (time.perf_counter() - t) * 1000.0
    print("   CPython:                                   %8.0f ms (setup included; the call alone %d ms)"
          % (cp_ms, ref["ms"]))
    if not mpy.available():
        print("   WebAssembly port not installed (make mp): skipped")
        return
    out = mpy.run_micropython(S.setup_code(doc30, "/lcstore") + S.CALL, packages=("engine", "device"))
    mp = S.last_json(out)
    print("   MicroPython WebAssembly port (node):       %8d ms  (ratio to CPython %.1f)"
          % (mp["ms"], mp["ms"] / max(1.0, ref["ms"])))
    loop_ms = float(mpy.run_micropython(LOOP).strip().splitlines()[-1])
    wasm_rate = 200000 / (loop_ms / 1000.0)
    slow, fast = [wasm_rate / r for r in BOARD_LOOP_PER_S]
    print("   float loop in the WebAssembly port: %.0f iterations/s; an assumed board does %d-%d/s"
          % (wasm_rate, BOARD_LOOP_PER_S[0], BOARD_LOOP_PER_S[1]))
    print("   estimated on a 100-200 MHz board:          %5.0f-%.0f s  (x%.0f-%.0f the WebAssembly time)"
          % (mp["ms"] * fast / 1000.0, mp["ms"] * slow / 1000.0, fast, slow))

    from engine.timescale import parse_utc
    t_plan = parse_utc(doc30["contacts"][0]["utc"]) - 3600 * 1000000
    call = ("_t0 = ticks_ms()\nob.update(%d, 0, 'lower')\n_ms = ticks_diff(ticks_ms(), _t0)\n"
            "print(json.dumps({'ms': _ms, 'next': ob.next and ob.next['utc']}))\n" % t_plan)
    plan = S.last_json(mpy.run_micropython(S.setup_code(doc30, "/lcstore") + call, packages=("engine", "device")))
    print("   one next-contact plan (Onboard.update, 1 h before the first contact; found %s):" % plan["next"])
    print("      WebAssembly port %d ms, estimated on a board %.1f-%.1f s (every 5 min, or after a contact)"
          % (plan["ms"], plan["ms"] * fast / 1000.0, plan["ms"] * slow / 1000.0))

    print("3. accuracy")
    print("   WebAssembly port vs CPython: %.5f nmi, used/rejected %d/%d vs %d/%d"
          % (distance_nm(mp["lat_deg"], mp["lon_deg"], ref["lat_deg"], ref["lon_deg"]), mp["used"],
             mp["rejected"], ref["used"], ref["rejected"]))
    from device.sim import VirtualTimer
    from engine.timescale import parse_utc
    for name in ("morning_run", "station_sun"):
        doc = S.session_doc(name)
        last = max(parse_utc(c["utc"]) for c in doc["contacts"])
        t = time.perf_counter()
        vt = VirtualTimer(session=doc, conditions=True, fix_at_us=last + 20000000)
        vt.run_contacts()
        fix = vt.fw.onboard.fix
        truth = doc["truth"]
        print("   virtual timer, %-12s %d contacts pressed: fix %.3f nmi from the truth, ellipse %.1f x %.1f nmi,"
              " %d used, %d rejected (%.1f s simulated run)"
              % (name, len(doc["contacts"]), distance_nm(fix["lat_deg"], fix["lon_deg"], truth["lat_deg"],
                                                         truth["lon_deg"]),
                 fix["ellipse_95"]["major_nm"], fix["ellipse_95"]["minor_nm"], fix["contacts_used"],
                 fix["rejected"], time.perf_counter() - t))
