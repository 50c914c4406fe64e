"""The almanac evaluator under MicroPython (WebAssembly port) gives CPython's numbers, and its heap cost.

The WebAssembly port computes in double precision, so CPython (the host's
decoded form) and MicroPython (the board's packed form, the default there)
must agree to ~1e-9 deg (single-precision behaviour is covered by
``tests/test_almanac_float32.py``).  Instants: every 103rd row of
``vectors/almanac_reference.json``.

Heap: in this port ``gc.collect()`` inside one run frees nothing, so the
growth of ``gc.mem_alloc()`` is the *total allocated* by loading one year and
evaluating both bodies: an upper bound on what stays live.  The budget (32 KB)
leaves half of a 64 KB board heap for the rest of the program (module bytecode
is frozen into flash on a board, so it is not counted).
"""
import json

from engine import almanac, timescale as ts
from mpy import run_micropython
from vectors import generate_almanac

HEAP_BUDGET_BYTES = 32 * 1024


def test_same_numbers_and_errors_under_micropython():
    _, rows = generate_almanac.load()
    sample = [(r[0], r[1]) for r in rows[::103]]
    code = """
import json, gc
def used():
    gc.collect()
    return gc.mem_alloc()
from engine import almanac, timescale as ts
m0 = used()
alm = almanac.load()
t = ts.parse_utc("2029-08-03T06:41:12.250Z")
p = alm.position("moon", t)
q = alm.position("sun", t)
m1 = used()
out = []
for utc, body in %r:
    p = alm.position(body, ts.parse_utc(utc))
    out.append([p.gha_deg, p.dec_deg, p.sd_arcmin, p.hp_arcmin, p.gha_rate_deg_per_s, p.dec_rate_deg_per_s])
errors = []
try:
    alm.position("sun", ts.parse_utc("2051-01-01T00:00:00Z"))
except almanac.AlmanacError as e:
    errors.append(str(e))
data = bytearray(open(alm.path + "/2031.lca", "rb").read())
data[100] ^= 4
try:
    almanac.parse(bytes(data), "2031.lca")
except almanac.AlmanacError as e:
    errors.append(str(e))
try:
    almanac.parse(bytes(data[:10]), "2031.lca")
except almanac.AlmanacError as e:
    errors.append(str(e))
d = almanac.describe_shipped()
print(json.dumps({"heap": m1 - m0, "out": out, "errors": errors, "bytes": d["bytes"], "last": d["last_utc"],
                  "decoded": alm.decoded, "keep": alm.keep_years}))
""" % (sample,)
    got = json.loads(run_micropython(code).strip().splitlines()[-1])
    assert got["decoded"] is False and got["keep"] == 2      # a board keeps the packed form
    alm = almanac.load()                                     # the host's decoded form
    for (utc, body), vals in zip(sample, got["out"]):
        p = alm.position(body, ts.parse_utc(utc))
        ref = [p.gha_deg, p.dec_deg, p.sd_arcmin, p.hp_arcmin, p.gha_rate_deg_per_s, p.dec_rate_deg_per_s]
        for a, b in zip(vals[:4], ref[:4]):
            assert abs(a - b) < 1e-9
        for a, b in zip(vals[4:], ref[4:]):
            assert abs(a - b) < 1e-12
    assert "outside the almanac" in got["errors"][0]
    assert "checksum" in got["errors"][1] and "truncated" in got["errors"][2]
    d = almanac.describe_shipped()
    assert got["bytes"] == d["bytes"] and got["last"] == d["last_utc"]
    assert 0 < got["heap"] <= HEAP_BUDGET_BYTES, got["heap"]
