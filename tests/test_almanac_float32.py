"""The almanac evaluator in single precision stays within 0.02' of double precision.

How it is emulated: ``engine.almanac`` takes every integer -> float conversion
through its module-level ``_float`` and its trigonometry through its module-level
``math``.  The test sets ``_float = numpy.float32`` and ``math`` to a shim whose
``sin``/``asin`` return ``numpy.float32`` (a correctly rounded single-precision
libm), then loads the almanac afresh so the quanta are float32 too.  From there
every intermediate (segment coordinate x, the power-form coefficients, Horner sums, products
with the quantum, GHA = ERA - RA and its reduction mod 360, the Moon's SD) is a
``numpy.float32`` and numpy (NEP 50) rounds each operation's result to single
precision, as a board's FPU would.  The Earth rotation angle comes from
``engine.timescale.era_deg`` (built from integers; its own business) and is
rounded to float32 on entry.  The test asserts the results really are float32.
Reference values: ``vectors/almanac_reference.json`` (DE421 + ERFA).
"""
import math
import types

import numpy as np

from engine import almanac, timescale as ts
from vectors import generate_almanac

_F32_MATH = types.SimpleNamespace(sin=lambda x: np.float32(math.sin(x)), asin=lambda x: np.float32(math.asin(x)),
                                  pi=math.pi)


def test_single_precision_within_0_02_arcmin(monkeypatch):
    _, rows = generate_almanac.load()
    rows = rows[::5]
    double = almanac.load()
    expected = [double.position(r[1], ts.parse_utc(r[0])) for r in rows]      # in double precision
    assert all(type(q.gha_deg) is float for q in expected)
    monkeypatch.setattr(almanac, "_float", np.float32)
    monkeypatch.setattr(almanac, "math", _F32_MATH)
    single = almanac.load()                 # the host's decoded form
    board = almanac.load(decoded=False)     # the board's packed form: must give the same float32 numbers
    worst_vs_double = worst_vs_ref = 0.0
    for (utc, body, gha, dec, sd, hp), q in zip(rows, expected):
        t = ts.parse_utc(utc)
        p = single.position(body, t)
        assert type(p.gha_deg) is np.float32 and type(p.dec_deg) is np.float32
        assert type(p.sd_arcmin) is np.float32 and type(p.hp_arcmin) is np.float32
        b = board.position(body, t)
        assert (b.gha_deg, b.dec_deg, b.sd_arcmin, b.hp_arcmin) == (p.gha_deg, p.dec_deg, p.sd_arcmin, p.hp_arcmin)
        e = max(abs((float(p.gha_deg) - q.gha_deg + 180.0) % 360.0 - 180.0) * 60.0,
                abs(float(p.dec_deg) - q.dec_deg) * 60.0,
                abs(float(p.sd_arcmin) - q.sd_arcmin), abs(float(p.hp_arcmin) - q.hp_arcmin))
        worst_vs_double = max(worst_vs_double, e)
        worst_vs_ref = max(worst_vs_ref, abs((float(p.gha_deg) - gha + 180.0) % 360.0 - 180.0) * 60.0,
                           abs(float(p.dec_deg) - dec) * 60.0)
    print("single vs double: %.4f'; single vs reference: %.4f'" % (worst_vs_double, worst_vs_ref))
    assert worst_vs_double < 0.02
    # single precision plus the almanac's own error stays within the Moon's target + 0.02'
    assert worst_vs_ref < 0.03
    # and the emulation is not a no-op: float32 rounding is visible at this scale
    assert worst_vs_double > 1e-5
