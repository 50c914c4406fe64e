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
4. The timer's loop while it reduces (MicroPython unix port): the ``fix`` gesture runs in one loop pass
   whose engine work calls the firmware's coop hook (``engine.coop``) at every model evaluation; the
   hook runs a service pass (inputs, stamps, log, watchdog) at most every 5 ms.  Measured: the longest
   interval between two service passes (the loop stall), during the fix of 30 contacts and during a
   next-contact plan, and the longest stretch between two model evaluations.  Scaled to a board by a
   portable count: the stall expressed in iterations of the reference float loop (``LOOP``) timed on the
   same port, divided by an assumed board rate for that loop (``BOARD_LOOP_PER_MHZ``).
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
# The same assumption per MHz of CPU clock (the range above at 100 and 200 MHz): 500-750 iterations per
# second per MHz [from memory]; a board's cache, flash wait states and FPU move it within that range.
BOARD_LOOP_PER_MHZ = (500, 750)
BOARDS_MHZ = (125, 240)
SERVICE_MS = 5                # device.firmware.SERVICE_US

STALL_SCRIPT = r'''
import json, time
from array import array
from device import hal, log as L
from device.firmware import Firmware
from device.onboard import iter_records
from engine import coop
import engine
from engine import almanac, session, fix, identify, model, plan, instrument, corrections, sphere
st = hal.FileStore(%(root)r)
for _n in list(st.names("log.bin")):
    st.remove(_n)
st.replace("slot_instrument", %(inst)r)
st.replace("slot_track", %(track)r)
class HW(hal.Hardware):
    store = st
    def ticks_us(self):
        return time.ticks_us()
    def ticks_ms(self):
        return time.ticks_ms()
lg = L.Log(st, capacity=65536)
for t_us, body, limb in %(contacts)r:
    lg.append(L.CONTACT, t_us, 1, 30, body, limb, 1)
lg = None
fw = Firmware(HW())
fw.onboard._load()
fw.onboard.alm.position("sun", %(t0)d)
# 1. every stretch between two model evaluations (coop ticks), the same code points run after run: the
#    shortest of RUNS runs at each point (a stretch the OS interrupted in one run is not in the others)
RUNS = %(runs)d
N = 12000
stamp = array("q", [0] * N)
best = array("q", [1 << 40] * N)
k = [0]
def h():
    i = k[0]
    if i < N:
        stamp[i] = time.ticks_us()
    k[0] = i + 1
for run in range(RUNS):
    k[0] = 1
    coop.set_hook(h)
    stamp[0] = time.ticks_us()
    fw.onboard.reduce(lambda: iter_records(fw.log), 1)
    end = time.ticks_us()
    coop.set_hook(None)
    n = k[0]
    if n < N:
        stamp[n] = end
    for i in range(1, min(n + 1, N)):
        d = stamp[i] - stamp[i - 1]        # this port's ticks_us does not wrap in a run
        if d < best[i]:
            best[i] = d
    fw.onboard.fix = None
m = 0
at = 0
for i in range(1, min(n + 1, N)):
    if best[i] > m:
        m = best[i]
        at = i
out = {"ticks": n - 1, "gap_us": m, "gap_at": at}
# 2. the firmware's own hook, as the fix gesture runs it: wall-clock longest stall between service passes
fw.fix_requested = True
fw.stall_max_us = 0
fw.svc_ext = fw.ticks.update(time.ticks_us(), time.ticks_ms())
t0 = time.ticks_us()
p0 = fw.service_passes
fw.poll()
out.update({"fix_us": time.ticks_us() - t0, "passes": fw.service_passes - p0,
            "stall_us": fw.stall_max_us, "used": fw.onboard.fix and fw.onboard.fix["contacts_used"]})
fw.stall_max_us = 0
fw.svc_ext = fw.ticks.update(time.ticks_us(), time.ticks_ms())
prev = coop.set_hook(fw._service)
fw.onboard.update(%(t0)d - 3600000000, 0, "lower")
coop.set_hook(prev)
fw._inputs("plan")
out["plan_stall_us"] = fw.stall_max_us
out["pass_us"] = out["hook_us"] = 1e9
for run in range(3):                   # the fastest of 3: the least disturbed by the machine's other work
    t0 = time.ticks_us()
    for j in range(1000):
        fw.svc_raw = (fw.svc_raw - 10000) %% hal.TICKS_PERIOD
        fw._service()
    out["pass_us"] = min(out["pass_us"], (time.ticks_us() - t0) / 1000.0)
    t0 = time.ticks_us()
    for j in range(1000):
        fw._service()
    out["hook_us"] = min(out["hook_us"], (time.ticks_us() - t0) / 1000.0)
loop = 1 << 40
for run in range(3):
    x = 0.0
    t0 = time.ticks_us()
    for j in range(200000):
        x = x * 0.999 + 1.5
    loop = min(loop, time.ticks_us() - t0)
out["loop_us"] = loop
print(json.dumps(out))
print("ARENA-OK")
'''


def stall_figures(mpu, S, runs=3):
    """The loop stall while the timer reduces, on the unix port, and the portable count behind it."""
    from device.sim import conditions_files
    from engine.timescale import parse_utc
    doc = S.session_doc("sun_moon", 30)
    files = conditions_files(doc)
    contacts = [(parse_utc(c["utc"]), 0 if c["body"] == "sun" else 1, 0 if c["limb"] == "lower" else 1)
                for c in doc["contacts"]]
    code = STALL_SCRIPT % {"root": tempfile.mkdtemp() + "/lc", "inst": files["instrument"],
                           "track": files["track"], "contacts": contacts, "t0": contacts[0][0], "runs": runs}
    ok, out = mpu.run_unix(code, heap_bytes=4 << 20)
    if not ok:
        raise AssertionError(out[-1500:])
    return S.last_json(out)


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
        parsed = ("import gc, json, engine\nfrom engine import almanac, session, fix, identify, model, doubts\n"
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
    _accuracy(S, mp, ref, distance_nm)
    print("4. the timer's loop while it reduces (MicroPython unix port)")
    if not mpu.available():
        print("   unix port not installed: skipped")
        return
    r = stall_figures(mpu, S)
    rate = 200000 / (r["loop_us"] / 1e6)
    cost = r["passes"] * r["pass_us"] + r["ticks"] * r["hook_us"]
    print("   fix of 30 contacts in one loop pass: %.1f s, %d model evaluations, %d service passes; a service pass"
          " costs %.0f us and a hook call with nothing to do %.1f us: %.0f ms in all (%.1f %%)"
          % (r["fix_us"] / 1e6, r["ticks"], r["passes"], r["pass_us"], r["hook_us"], cost / 1000.0,
             100.0 * cost / r["fix_us"]))
    print("   longest stall between service passes, wall clock of one run: %.1f ms during the fix, %.1f ms during"
          " a plan (this machine is shared: the OS can add its own pauses)"
          % (r["stall_us"] / 1000.0, r["plan_stall_us"] / 1000.0))
    worst = r["gap_us"] + SERVICE_MS * 1000
    units = r["gap_us"] / 1e6 * rate
    print("   longest stretch between two model evaluations (the shortest of 3 runs at each of the %d points):"
          " %.1f ms, at evaluation %d; a pass follows at the first evaluation %d ms after the last one, so"
          " the stall is at most %.1f ms" % (r["ticks"], r["gap_us"] / 1000.0, r["gap_at"], SERVICE_MS,
                                              worst / 1000.0))
    print("   portable count: the reference loop runs %.0f iterations/s here (fastest of 3), so that stretch is"
          " the work of %.0f iterations" % (rate, units))
    for mhz in BOARDS_MHZ:
        lo, hi = [mhz * k for k in BOARD_LOOP_PER_MHZ]
        print("   on a %d MHz board (%d-%d iterations/s assumed): longest stall %d ms + %.2f-%.2f s"
              % (mhz, lo, hi, SERVICE_MS, units / hi, units / lo))


def _accuracy(S, mp, ref, distance_nm):
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
