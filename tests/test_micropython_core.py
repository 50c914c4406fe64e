"""The engine's time scales under MicroPython (WebAssembly port) give CPython's numbers."""
import json

from engine import timescale as ts
from mpy import run_micropython

SAMPLES = ["2029-08-03T06:41:12.250Z", "2016-12-31T23:59:60.500Z", "2050-06-21T12:00:00Z", "2025-03-01T00:00:00.000001Z"]


def test_timescale_under_micropython():
    code = "import json\nfrom engine import timescale as ts\nout=[]\n"
    code += "for s in %r:\n" % (SAMPLES,)
    code += "    t = ts.parse_utc(s); out.append([t, ts.format_utc(t, 6), ts.tt_minus_utc_us(t), ts.era_deg(t, 300000)])\n"
    code += "print(json.dumps(out))\n"
    got = json.loads(run_micropython(code).strip().splitlines()[-1])
    for s, (t, text, tt, era) in zip(SAMPLES, got):
        ref = ts.parse_utc(s)
        assert t == ref and text == ts.format_utc(ref, 6) and tt == ts.tt_minus_utc_us(ref)
        assert abs(era - ts.era_deg(ref, 300000)) * 60 < 1e-9
