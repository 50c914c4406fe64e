"""The reduction on the timer under MicroPython: the same answers as CPython, and a heap budget.

* ``engine.reduce_session`` under the WebAssembly port (``tests/mpy.py``) gives the CPython fix of
  every reference session in ``vectors/sessions`` (DE421 + ERFA contact times) within 0.05 nmi, with
  the same rejected contacts.
* The timer's own path (``device.onboard``: log -> session text -> reduce, contacts unlabelled so
  ``engine.identify`` runs) under the WebAssembly port gives the CPython fix.
* Heap budget (``tests/mpu.py``, MicroPython's unix port, whose fixed heap collects garbage when it
  runs short; the WebAssembly port grows its heap instead and frees nothing during a call): the
  on-board reduction of 30 contacts (identified on board) must run with ``ONBOARD_ARENA_64BIT`` bytes of
  free heap (about 32 KB on a 32-bit board), and 100 labelled contacts (``long_day``, DE421 + ERFA) through
  ``engine.reduce_session`` with ``LABELLED_100_ARENA_64BIT`` (about 64 KB on a board); each must fail with
  far less (the harness can fail).  See DEVELOPERS.md "On-board reduction" for the figures and what they
  mean on a 32-bit board.
"""
import json
import os
import tempfile

import pytest

import engine
from engine import almanac
from engine.sphere import distance_nm
from mpy import run_micropython
from mpu import arena_script, run_unix
from mpu import fits as mpu_fits
import onboard_scripts as S

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
NAMES = ("station_sun", "sun_moon", "both_sides", "mislabelled", "morning_run")
ONBOARD_CONTACTS = 30
# The target is 64 KB of a 32-bit board's heap (stretch: 32 KB).  This port's objects are twice a 32-bit
# port's (8-byte words, 32-byte GC blocks): measured, the same reduction allocates 1.947 times the bytes
# here that it allocates in the 32-bit WebAssembly port (2026-12-03; 1.995 before identification's tables
# became array('d') columns: test below, holding the ratio at >= WORD_RATIO); the unboxed numbers of the
# fix and identification (array('d'), a few KB live) are 8 bytes on both.
# The need is not monotonic (the collector scans the C stack conservatively; where blocks fall decides
# whether a 400-byte request finds a hole): on 2026-12-03, with the pairwise identification, the doubts
# and the structured fix, the reduction fitted at 56 and 60-68 KB but failed at 58, 62 and 66 KB - luck,
# not a budget.  Identification's seed tables and almanac cache were then allocated at their full size
# once (growing and rebuilding them left holes): it fits at every 2 KB step from 60 KB to 100 KB in every
# layout of mpu.PADS (also at 56 KB).  The budget is the stretch target, 64 KB here (about 32 KB on a
# board), checked at the budget and at three sizes above it so that luck cannot pass it.
WORD_RATIO = 1.93
ONBOARD_ARENA_64BIT = 64 * 1024
TOO_SMALL_64BIT = 32 * 1024
# 100 labelled contacts (the first 100 of long_day), the session parsed and its text dropped as the timer does:
# it fits at every 4 KB step from 120 KB to 148 KB in every layout of mpu.PADS (2026-12-03, with the doubts'
# module imported beforehand like every other, as frozen code would be; the dense-covariance fix needed 231 KB):
# the budget is the target, 128 KB here (about 64 KB on a board), a margin of about 6 %, checked at the budget and
# above it.  Most of it is
# the parsed session (about 36 KB: a Contact object is about 360 bytes here) and the per-contact report of
# limbclock-fix/1 (about 57 KB: a 17-key dict of 320 bytes, six floats and the utc text per contact).
LABELLED_100_ARENA_64BIT = 128 * 1024
LABELLED_100_TOO_SMALL_64BIT = 64 * 1024


def texts():
    out = {}
    for n in NAMES:
        with open(os.path.join(ROOT, "vectors", "sessions", n + ".json")) as f:
            out[n] = f.read()
    return out


def test_reference_sessions_reduce_alike_under_micropython():
    tx = texts()
    code = "import json, engine\nfrom engine import almanac\nalm = almanac.load(keep_years=1)\nout = {}\n"
    for n in NAMES:
        code += "r = engine.reduce_session(%r, alm)\n" % tx[n]
        code += "out[%r] = [r['lat_deg'], r['lon_deg'], r['ellipse_95']['major_nm'], r['rejected']]\nr = None\n" % n
    code += "print(json.dumps(out))\n"
    mp = json.loads(run_micropython(code).strip().splitlines()[-1])
    alm = almanac.load()
    for n in NAMES:
        ref = engine.reduce_session(tx[n], alm)
        lat, lon, major, rejected = mp[n]
        assert distance_nm(lat, lon, ref["lat_deg"], ref["lon_deg"]) < 0.05, n        # single-precision budget
        assert rejected == ref["rejected"], n
        assert abs(major / ref["ellipse_95"]["major_nm"] - 1.0) < 0.01, n
        truth = json.loads(tx[n])["truth"]
        assert distance_nm(lat, lon, truth["lat_deg"], truth["lon_deg"]) < 0.3, n      # DE421 + ERFA truth


def test_onboard_path_under_micropython_matches_cpython():
    doc = S.session_doc("sun_moon", ONBOARD_CONTACTS)
    ref = S.run_cpython(doc, tempfile.mkdtemp())
    out = run_micropython(S.setup_code(doc, "/lcstore") + S.CALL, packages=("engine", "device"))
    mp = S.last_json(out)
    assert "error" not in mp, mp
    assert distance_nm(mp["lat_deg"], mp["lon_deg"], ref["lat_deg"], ref["lon_deg"]) < 0.05
    assert (mp["used"], mp["rejected"]) == (ref["used"], ref["rejected"]) == (ONBOARD_CONTACTS, 0)
    assert abs(mp["major_nm"] / ref["major_nm"] - 1.0) < 0.01


@pytest.mark.parametrize("free, fits", [(ONBOARD_ARENA_64BIT, True), (ONBOARD_ARENA_64BIT + 2048, True),
                                        (ONBOARD_ARENA_64BIT + 4096, True), (ONBOARD_ARENA_64BIT + 8192, True),
                                        (TOO_SMALL_64BIT, False)])
def test_onboard_reduction_heap_budget(free, fits):
    doc = S.session_doc("sun_moon", ONBOARD_CONTACTS)
    setup = S.setup_code(doc, tempfile.mkdtemp())
    if fits:
        ok, out = mpu_fits(setup, S.CALL, free)
        assert ok, "the on-board reduction of %d contacts no longer fits %d bytes of heap:\n%s" % (
            ONBOARD_CONTACTS, free, out[-1500:])
        assert S.last_json(out)["used"] == ONBOARD_CONTACTS
    else:
        ok, out = run_unix(arena_script(setup, S.CALL, free), heap_bytes=free + (1 << 20))
        assert not ok and "no memory for the fix" in out


@pytest.mark.parametrize("free, fits", [(LABELLED_100_ARENA_64BIT, True), (LABELLED_100_ARENA_64BIT + 2048, True),
                                        (LABELLED_100_ARENA_64BIT + 6144, True), (LABELLED_100_TOO_SMALL_64BIT, False)])
def test_hundred_labelled_contacts_heap_budget(free, fits):
    from engine.timescale import parse_utc
    doc = S.session_doc("long_day", 100)
    setup = ("import gc, json, engine\nfrom engine import almanac, session, fix, identify, model, doubts\n"
             "alm = almanac.load(keep_years=1)\n_text = %r\nalm.position('sun', %d)\n"
             % (json.dumps(doc), parse_utc(doc["contacts"][0]["utc"])))
    call = ("s = session.parse_session(_text, alm)\n_text = None\nr = engine.reduce_session(s, alm)\n"
            "print(json.dumps({'used': r['contacts_used']}))\n")
    if fits:
        ok, out = mpu_fits(setup, call, free)
        assert ok, "100 labelled contacts no longer fit %d bytes of heap:\n%s" % (free, out[-1500:])
        assert S.last_json(out)["used"] == 100
    else:
        ok, out = run_unix(arena_script(setup, call, free), heap_bytes=free + (1 << 20))
        assert not ok and "MemoryError" in out


def test_next_contact_plan_under_micropython_matches_cpython():
    import contextlib
    import io
    from engine.timescale import parse_utc
    doc = S.session_doc("sun_moon", 4)
    t = parse_utc(doc["contacts"][0]["utc"]) - 3600 * 1000000
    call = ("ob.update(%d, 0, 'lower')\nn = ob.next\n"
            "print(json.dumps([n['t_us'], n['body'], n['image'], n['direction'], n['zn_deg']]))\n" % t)
    buf = io.StringIO()
    with contextlib.redirect_stdout(buf):
        exec(S.setup_code(doc, tempfile.mkdtemp()) + call, {})
    ref = json.loads(buf.getvalue().strip().splitlines()[-1])
    mp = json.loads(run_micropython(S.setup_code(doc, "/lcstore") + call,
                                    packages=("engine", "device")).strip().splitlines()[-1])
    assert mp[1:4] == ref[1:4] and abs(mp[0] - ref[0]) <= 1000 and abs(mp[4] - ref[4]) <= 0.1


def test_this_heap_is_twice_a_32_bit_heap_for_the_reduction():
    # The conversion of the budget: total bytes the on-board reduction allocates (garbage collection off)
    # on the 64-bit unix port against the 32-bit WebAssembly port (which collects nothing during a call).
    doc = S.session_doc("sun_moon", ONBOARD_CONTACTS)
    call = ("gc.collect()\ngc.disable()\n_a0 = gc.mem_alloc()\n" + S.CALL +
            "print(json.dumps({'alloc': gc.mem_alloc() - _a0}))\nprint('ARENA-OK')\n")
    wasm = S.last_json(run_micropython(S.setup_code(doc, "/lcstore") + call, packages=("engine", "device")))
    ok, out = run_unix(S.setup_code(doc, tempfile.mkdtemp()) + call, heap_bytes=1 << 29)
    assert ok, out[-1500:]
    ratio = S.last_json(out)["alloc"] / float(wasm["alloc"])
    assert WORD_RATIO <= ratio <= 2.05, ratio
