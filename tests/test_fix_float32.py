"""The fix in emulated single precision (as on a board's FPU) stays within 0.05 nmi of double precision
(or 0.5 % of the ellipse's semi-major axis along a weak direction, where the rounding noise is amplified).

Emulation, as in ``tests/test_almanac_float32.py``: the almanac computes in ``numpy.float32``; the
modules of the reduction (``engine.angles``, ``corrections``, ``sphere``, ``fix``) get a ``math`` shim whose
functions return ``numpy.float32``, and numpy (NEP 50) rounds every operation on a float32 to single
precision.  Positions, intercepts and the normal equations therefore run in float32 (checked: the fix's
latitude comes out as a float32).  Reference: the noise-free sessions of ``vectors/sessions`` (DE421 + ERFA).
"""
import json
import math
import os
import types

import numpy as np
import pytest

import engine
from engine import almanac, angles, corrections, fix, sphere
from engine.sphere import distance_nm

SESSIONS = os.path.join(os.path.dirname(os.path.dirname(os.path.abspath(__file__))), "vectors", "sessions")


def _f32(fn):
    return lambda *a: np.float32(fn(*(float(x) for x in a)))


F32_MATH = types.SimpleNamespace(**{n: _f32(getattr(math, n)) for n in
                                    ("sin", "cos", "tan", "asin", "acos", "atan2", "sqrt", "log", "fmod")})
F32_MATH.pi = math.pi


@pytest.mark.parametrize("name", ["station_sun", "sun_moon", "both_sides", "mislabelled"])
def test_fix_in_single_precision(monkeypatch, name):
    with open(os.path.join(SESSIONS, name + ".json")) as f:
        text = f.read()
    d = json.loads(text)
    double = engine.reduce_session(text, almanac.load())
    monkeypatch.setattr(almanac, "_float", np.float32)
    monkeypatch.setattr(almanac, "math", types.SimpleNamespace(sin=F32_MATH.sin, asin=F32_MATH.asin, pi=math.pi))
    for mod in (angles, corrections, sphere, fix):
        monkeypatch.setattr(mod, "math", F32_MATH)
    single = engine.reduce_session(text, almanac.load())
    assert type(single["lat_deg"]) is np.float32          # the emulation is not a no-op
    shift = distance_nm(float(single["lat_deg"]), float(single["lon_deg"]), double["lat_deg"], double["lon_deg"])
    assert shift < max(0.05, 0.005 * double["ellipse_95"]["major_nm"]), shift
    assert distance_nm(float(single["lat_deg"]), float(single["lon_deg"]), d["truth"]["lat_deg"],
                       d["truth"]["lon_deg"]) < 0.3
    assert single["rejected"] == double["rejected"]
    assert abs(float(single["ellipse_95"]["major_nm"]) / double["ellipse_95"]["major_nm"] - 1.0) < 0.01
    assert not any("did not converge" in w for w in single["warnings"])
