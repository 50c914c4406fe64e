"""engine.reduce_session under MicroPython (WebAssembly port) gives the CPython answer."""
import json
import os

import engine
from engine import almanac
from mpy import run_micropython

SESSION = os.path.join(os.path.dirname(os.path.dirname(os.path.abspath(__file__))), "vectors", "sessions",
                       "mislabelled.json")


def test_reduce_session_under_micropython():
    with open(SESSION) as f:
        text = f.read()
    ref = engine.reduce_session(text, almanac.load())
    code = "import json, engine\n"
    code += "r = engine.reduce_session(%r)\n" % text
    code += ("print(json.dumps([r['lat_deg'], r['lon_deg'], r['ellipse_95']['major_nm'], r['rejected'], "
             "r['contacts'][6]['reason'] or '']))\n")
    lat, lon, major, rejected, reason = json.loads(run_micropython(code).strip().splitlines()[-1])
    assert abs(lat - ref["lat_deg"]) * 60.0 < 1e-4 and abs(lon - ref["lon_deg"]) * 60.0 < 1e-4   # 0.0001 nmi
    assert abs(major - ref["ellipse_95"]["major_nm"]) < 1e-3
    assert rejected == ref["rejected"] == [] and reason == ref["contacts"][6]["reason"]
    assert reason.startswith("relabelled: timed as i05")
