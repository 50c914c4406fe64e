"""Scripts that run the timer's on-board reduction the same way under CPython, the MicroPython
WebAssembly port (``tests/mpy.py``) and the unix port with a fixed heap (``tests/mpu.py``).

Used by ``tests/test_onboard_micropython.py`` and ``bench/bench_onboard.py``.  The setup is what the
timer holds before the ``fix`` gesture: the engine and device modules (frozen into flash on a board),
the pushed instrument and track files, a log of contacts (unlabelled, as pressed) and the almanac
year in use; the call is ``Onboard.reduce``: session text from the log, then
``engine.reduce_session``.
"""
import json
import os

from device.sim import conditions_files
from engine.timescale import parse_utc

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
SESSIONS = os.path.join(ROOT, "vectors", "sessions")

SETUP = r'''
import gc, json
from device import hal
from device import log as L
from device.onboard import Onboard, iter_records
import engine
from engine import almanac, session, fix, identify, doubts, model, plan, instrument, corrections, sphere
st = hal.FileStore(%(root)r)
st.replace("slot_instrument", %(inst)r)
st.replace("slot_track", %(track)r)
for _n in list(st.names("log.bin")):      # the log's heads and segments from an earlier run
    st.remove(_n)
lg = L.Log(st, capacity=65536)
for t_us, body, limb in %(contacts)r:
    lg.append(L.CONTACT, t_us, 1, 30, body, limb, 1)
ob = Onboard(st)
ob._load()
ob.alm.position("sun", %(t0)d)
try:
    from time import ticks_ms, ticks_diff
except ImportError:
    from time import monotonic
    def ticks_ms():
        return int(monotonic() * 1000)
    def ticks_diff(a, b):
        return a - b
'''

CALL = r'''
_t0 = ticks_ms()
fix = ob.reduce(lambda: iter_records(lg), 1)
_ms = ticks_diff(ticks_ms(), _t0)
if fix is None:
    print(json.dumps({"error": ob.fix_error}))
    raise RuntimeError("on-board fix failed: %s" % ob.fix_error)
else:
    print(json.dumps({"lat_deg": fix["lat_deg"], "lon_deg": fix["lon_deg"], "major_nm": fix["ellipse_95"]["major_nm"],
                      "used": fix["contacts_used"], "rejected": fix["rejected"], "ms": _ms}))
'''


def session_doc(name, n=None):
    with open(os.path.join(SESSIONS, name + ".json")) as f:
        doc = json.load(f)
    if n is not None:
        doc["contacts"] = doc["contacts"][:n]
    return doc


def setup_code(doc, root):
    """The setup script for session ``doc`` with the store in directory ``root``."""
    files = conditions_files(doc)
    contacts = [(parse_utc(c["utc"]), 0 if c["body"] == "sun" else 1, 0 if c["limb"] == "lower" else 1)
                for c in doc["contacts"]]
    return SETUP % {"root": root, "inst": files["instrument"], "track": files["track"], "contacts": contacts,
                    "t0": contacts[0][0]}


def run_cpython(doc, root):
    """Run setup + call here; returns the printed dict."""
    import contextlib
    import io
    buf = io.StringIO()
    with contextlib.redirect_stdout(buf):
        exec(setup_code(doc, root) + CALL, {})
    return json.loads(buf.getvalue().strip().splitlines()[-1])


def last_json(out):
    for line in reversed(out.strip().splitlines()):
        if line.startswith("{"):
            return json.loads(line)
    raise AssertionError("no result in:\n" + out[-2000:])
