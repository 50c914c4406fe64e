"""The compact almanac (engine/almanac.py, engine/data/*.lca) against outside references.

Vector file: ``vectors/almanac_reference.json`` (DE421 + ERFA apparent places,
see its header).  Published facts are checked with their sources named beside them.
"""
import math

import numpy as np
import pytest
from hypothesis import given, settings, strategies as st

from engine import almanac, timescale as ts
from engine.constants import US_PER_DAY, US_PER_S
from vectors import generate_almanac, reference

ALM = almanac.load()
HOUR = 3600 * US_PER_S


def _dm(deg):
    return abs(deg) * 60.0


def _wrap_arcmin(a_deg, b_deg):
    return abs((a_deg - b_deg + 180.0) % 360.0 - 180.0) * 60.0


# Accuracy targets of the almanac (the project's requirement, not a published value):
# Sun GHA/dec 0.005', Moon 0.01', SD/HP 0.005'.
TARGET = {"sun": (0.005, 0.005, 0.005), "moon": (0.01, 0.01, 0.005)}


def test_engine_matches_reference_vectors():
    header, rows = generate_almanac.load()
    assert header["columns"] == ["utc", "body", "gha_deg", "dec_deg", "sd_arcmin", "hp_arcmin"]
    assert len(rows) > 4000
    worst = {}
    for utc, body, gha, dec, sd, hp in rows:
        p = ALM.position(body, ts.parse_utc(utc))
        assert 0.0 <= p.gha_deg < 360.0
        e = (_wrap_arcmin(p.gha_deg, gha), _dm(p.dec_deg - dec), abs(p.sd_arcmin - sd), abs(p.hp_arcmin - hp))
        w = worst.setdefault(body, [0.0] * 4)
        for i in range(4):
            w[i] = max(w[i], e[i])
    for body, (gha_t, dec_t, x_t) in TARGET.items():
        g, d, s, h = worst[body]
        assert g <= gha_t and d <= dec_t and s <= x_t and h <= x_t, (body, worst[body])


def test_vectors_still_agree_with_reference_pipeline():
    """Keeps the vector file honest: a sample is recomputed with vectors.reference now."""
    _, rows = generate_almanac.load()
    sample = rows[::97]
    for body in ("sun", "moon"):
        sub = [r for r in sample if r[1] == body]
        t = np.array([ts.parse_utc(r[0]) for r in sub], dtype=np.int64)
        ref = reference.apparent(body, t)
        for i, r in enumerate(sub):
            assert _wrap_arcmin(ref["gha_deg"][i], r[2]) < 1e-5 * 60 * 0.6
            assert _dm(ref["dec_deg"][i] - r[3]) < 1e-5 * 60 * 0.6
            assert abs(ref["sd_arcmin"][i] - r[4]) < 1e-5 and abs(ref["hp_arcmin"][i] - r[5]) < 1e-5


def _sun_dec_max(year):
    """Largest declination of the Sun around the June solstice (engine, 10-minute steps)."""
    t0 = ts.parse_utc("%d-06-19T00:00:00Z" % year)
    best = -90.0
    for k in range(0, 5 * 24 * 6):
        best = max(best, ALM.position("sun", t0 + k * 600 * US_PER_S).dec_deg)
    return best


@pytest.mark.parametrize("year", [2027, 2030])
def test_june_solstice_declination_is_the_obliquity(year):
    # At the solstice the Sun's declination equals the true obliquity of the ecliptic (the Sun's
    # ecliptic latitude is < 1"): mean obliquity, IAU 2006 (Capitaine et al. 2003, eps_A =
    # 84381.406" - 46.836769" T - 0.0001831" T^2 ...), plus nutation in obliquity, whose
    # amplitude is 9.205" (IAU 1980/2000 nutation, 18.6-year term) [from memory].
    T = (timescale_days_j2000(year, 6, 21) / 36525.0)
    eps_mean_arcsec = 84381.406 - 46.836769 * T - 0.0001831 * T * T
    dec = _sun_dec_max(year)
    assert abs(dec * 3600.0 - eps_mean_arcsec) <= 9.3 + 1.0     # 1" for the 10-min sampling and ecliptic latitude
    # and the round published figure, 23 deg 26' (Nautical Almanac June tables) within 0.5'
    assert abs(dec * 60.0 - (23 * 60 + 26)) < 0.5


def timescale_days_j2000(y, m, d):
    return ts.days_from_civil(y, m, d) - ts.days_from_civil(2000, 1, 1) - 0.5


def _eot_minutes(t_us):
    # Equation of time = apparent minus mean solar time.  At 00:00 UT1 the mean Sun is on the
    # lower meridian (GHA 180 deg), so EoT = (GHA_sun - 180 deg) x 4 min/deg; positive when the
    # true Sun is ahead (west) of the mean Sun (sundial fast), as in the Nautical Almanac.
    p = ALM.position("sun", t_us)
    hours = (t_us % US_PER_DAY) / HOUR
    return ((p.gha_deg - 180.0 - 15.0 * hours + 180.0) % 360.0 - 180.0) * 4.0


@pytest.mark.parametrize("year", [2026, 2038])
def test_equation_of_time_extremes(year):
    # Published: EoT reaches -14 min 06..22 s around 11 February and +16 min 24..33 s around
    # 3 November (Nautical Almanac daily pages; Meeus, Astronomical Algorithms ch. 28, fig. 28.a).
    feb = [(_eot_minutes(ts.parse_utc("%d-02-%02dT%02d:00:00Z" % (year, d, h))), d)
           for d in range(5, 18) for h in (0, 6, 12, 18)]
    nov = [(_eot_minutes(ts.parse_utc("%d-%02d-%02dT%02d:00:00Z" % (year, m, d, h))), d)
           for m, days in ((10, range(28, 32)), (11, range(1, 9))) for d in days for h in (0, 6, 12, 18)]
    lo, lo_day = min(feb)
    hi, hi_day = max(nov)
    assert -14.0 - 22.5 / 60 <= lo <= -14.0 - 5.5 / 60 and 9 <= lo_day <= 14
    assert 16.0 + 23.5 / 60 <= hi <= 16.0 + 33.5 / 60 and 1 <= hi_day <= 5


def test_sun_semi_diameter_at_perihelion_and_aphelion():
    # Sun SD = 959.63"/r; r = 0.98329 au at perihelion, 1.01671 au at aphelion (a(1 -/+ e),
    # e = 0.0167 [from memory]): 16.27' early January and 15.73' early July (Nautical Almanac).
    jan = [ALM.position("sun", ts.parse_utc("2029-01-%02dT00:00:00Z" % d)).sd_arcmin for d in range(1, 8)]
    jul = [ALM.position("sun", ts.parse_utc("2029-07-%02dT00:00:00Z" % d)).sd_arcmin for d in range(1, 10)]
    assert abs(max(jan) - 16.27) < 0.015 and abs(min(jul) - 15.73) < 0.015


def test_moon_horizontal_parallax_range():
    # Moon HP lies within 53.9'..61.5' to the printed 0.1' (derived from the distances below): the extreme
    # lunar distances of the 21st century are 356 375 km and 406 720 km (Meeus, Astronomical
    # Algorithms ch. 50 [from memory]), i.e. HP = asin(6378.137/d) = 61.53' and 53.91'.
    # A dense sample over 2025-2050 must come close to both.
    lo, end = ALM.span_us()
    hps = []
    step = 7 * HOUR + 13 * 60 * US_PER_S
    t = lo
    while t < end:
        p = ALM.position("moon", t)
        hps.append(p.hp_arcmin)
        # SD = k HP within 0.001' (k = 0.2725076, IAU 1982)
        assert abs(p.sd_arcmin - 0.2725076 * p.hp_arcmin) < 0.002
        t += step
    assert 53.905 <= min(hps) < 54.0 and 61.4 < max(hps) <= 61.535


def test_rates_match_finite_differences():
    t = ts.parse_utc("2033-03-14T15:09:26Z")
    for body in ("sun", "moon"):
        p0 = ALM.position(body, t - 30 * US_PER_S)
        p1 = ALM.position(body, t + 30 * US_PER_S)
        p = ALM.position(body, t)
        gha_rate = ((p1.gha_deg - p0.gha_deg + 180.0) % 360.0 - 180.0) / 60.0
        dec_rate = (p1.dec_deg - p0.dec_deg) / 60.0
        # 0.01'/h tolerance, common practice for hourly differences in almanacs
        assert abs(p.gha_rate_deg_per_s - gha_rate) * 3600 * 60 < 0.01
        assert abs(p.dec_rate_deg_per_s - dec_rate) * 3600 * 60 < 0.01
    # Sun's GHA rate is close to 15 deg/h; the Moon's close to 14.5 deg/h (its mean: 360 deg per lunar day
    # of 24 h 50 min = 14.49 deg/h; common practice, the Nautical Almanac's v correction is the excess
    # over 14 deg 19.0' per hour [from memory])
    assert abs(ALM.position("sun", t).gha_rate_deg_per_s * 3600 - 15.0) < 0.01
    assert 14.0 < ALM.position("moon", t).gha_rate_deg_per_s * 3600 < 14.8


def test_series_continuous_at_segment_joins():
    a = ALM.year(2031)
    for body in ("sun", "moon"):
        s = a._series(body)
        for i in range(1, s.nseg - 1, 5):
            join = a.start_tt_us + i * s.seg_us
            before, _ = a.evaluate(body, join - 1)
            after, _ = a.evaluate(body, join)
            assert _wrap_arcmin(before[0], after[0]) < 0.001 and _dm(before[1] - after[1]) < 0.001
            assert abs(before[2] - after[2]) < 0.002


def test_power_form_is_exact_and_as_accurate_as_the_chebyshev_sum():
    # Every segment of every shipped year: the engine turns the stored integer Chebyshev
    # coefficients into integer power-basis coefficients (exact) and sums them by Horner's rule.
    # Checked against numpy's own Chebyshev routines (cheb2poly, chebval, chebder: an outside
    # implementation): the integers agree exactly, and value and derivative to 1e-12 (deg or
    # arcmin, per unit of x) at x = -1, -0.37, 0, 0.61, 1.  The conditioning claim of the
    # docstring: sum |A_j| <= 2 sum |n_k|, so Horner's rounding (single precision on a board)
    # stays that of the Chebyshev sum.
    from numpy.polynomial import chebyshev as C
    xs = np.array([-1.0, -0.37, 0.0, 0.61, 1.0])
    worst = worst_ratio = 0.0
    n_segments = expected_segments = 0
    for y in ALM.years:
        a = ALM.year(y)
        for body in almanac.BODIES:
            s = a._series(body)
            expected_segments += s.nseg
            for i in range(s.nseg):
                n_segments += 1
                decoded = a._decode(s, i)
                for ints, q, power in zip(a._chebyshev(s, i, False), s.quantities, decoded):
                    exact = almanac._power_form(ints)
                    assert all(type(v) is int for v in exact)
                    ref = np.zeros(len(ints))       # numpy in doubles: exact below 2**53
                    p = C.cheb2poly(np.array(ints, dtype=float))
                    ref[:len(p)] = p
                    assert [float(v) for v in exact[::-1]] == list(ref)
                    worst_ratio = max(worst_ratio, sum(abs(v) for v in exact) / sum(abs(v) for v in ints))
                    c = np.array(ints, dtype=float) * float(q.quantum)
                    for x, v_ref, d_ref in zip(xs, C.chebval(xs, c), C.chebval(xs, C.chebder(c))):
                        v, d = almanac._horner(power, float(x), True)
                        worst = max(worst, abs(v - v_ref), abs(d - d_ref))
    assert n_segments == expected_segments > 26 * (11 + 45)
    assert worst < 1e-12, worst
    assert worst_ratio <= 2.0, worst_ratio


def test_decoded_and_packed_forms_give_identical_numbers():
    # The host's decoded form (every segment kept) and the board's packed form (last segment only,
    # 2 years kept) run the same arithmetic on the same numbers: equal to the last bit.
    host = almanac.load()
    board = almanac.load(decoded=False)
    assert host.decoded and host.keep_years == len(host.years)
    assert not board.decoded and board.keep_years == 2
    _, rows = generate_almanac.load()
    for utc, body, *_ in rows[::7]:
        t = ts.parse_utc(utc)
        p, q = host.position(body, t), board.position(body, t)
        assert (p.gha_deg, p.dec_deg, p.sd_arcmin, p.hp_arcmin, p.gha_rate_deg_per_s, p.dec_rate_deg_per_s) == \
               (q.gha_deg, q.dec_deg, q.sd_arcmin, q.hp_arcmin, q.gha_rate_deg_per_s, q.dec_rate_deg_per_s)
    assert len(board._cache) == 2 and len(host._cache) > 2
    # the decoded form keeps what it decoded, and a year is the same object on every use
    a = host.year(2031)
    assert a is host.year(2031) and a.is_decoded
    assert sum(1 for c in a._series("moon").decoded if c is not None) > 0


def test_year_boundaries_and_span():
    first, end = ALM.span_us()
    assert first == ts.parse_utc("2025-01-01T00:00:00Z") and end == ts.parse_utc("2051-01-01T00:00:00Z")
    ALM.position("moon", first)
    ALM.position("moon", end - 1)
    for bad in (first - 1, end):
        with pytest.raises(almanac.AlmanacError, match="outside the almanac"):
            ALM.position("sun", bad)
    with pytest.raises(almanac.AlmanacError, match="body"):
        ALM.position("venus", first)
    with pytest.raises(almanac.AlmanacError, match="int"):
        ALM.position("sun", 1.7e15)
    with pytest.raises(almanac.AlmanacError, match="dut1_us"):
        ALM.position("sun", first, dut1_us=0.3)


@settings(max_examples=60, deadline=None)
@given(st.integers(min_value=ts.parse_utc("2025-01-01T00:00:00Z"), max_value=ts.parse_utc("2051-01-01T00:00:00Z") - 1),
       st.sampled_from(["sun", "moon"]), st.integers(min_value=-900000, max_value=900000))
def test_any_instant_matches_reference_pipeline(t, body, dut1_us):
    # vectors/reference.py (DE421 + ERFA) computed now, at instants and DUT1 values hypothesis picks
    p = ALM.position(body, t, dut1_us)
    r = reference.apparent(body, t, dut1_s=dut1_us / 1e6)
    tol = TARGET[body]
    assert _wrap_arcmin(p.gha_deg, float(r["gha_deg"])) <= tol[0]
    assert _dm(p.dec_deg - float(r["dec_deg"])) <= tol[1]
    assert abs(p.sd_arcmin - float(r["sd_arcmin"])) <= tol[2] and abs(p.hp_arcmin - float(r["hp_arcmin"])) <= tol[2]


def test_describe_shipped():
    d = almanac.describe_shipped()
    assert d["first_utc"] == "2025-01-01T00:00:00Z" and d["last_utc"] == "2050-12-31T23:59:59Z"
    assert len(d["files"]) == 26
    # the size target of the design: Sun + Moon in at most 4 KB per year
    assert all(f["bytes"] <= 4096 for f in d["files"]) and d["bytes"] == sum(f["bytes"] for f in d["files"])


def _shipped_bytes(year=2029):
    with open("%s/%d.lca" % (almanac._data_dir(), year), "rb") as f:
        return f.read()


DATA = _shipped_bytes()


@settings(max_examples=150, deadline=None)
@given(st.integers(min_value=0, max_value=len(DATA) - 1), st.integers(min_value=1, max_value=255))
def test_any_flipped_byte_is_refused(pos, xor):
    bad = bytearray(DATA)
    bad[pos] ^= xor
    with pytest.raises(almanac.AlmanacError):
        almanac.parse(bytes(bad), "2029.lca")


@settings(max_examples=60, deadline=None)
@given(st.integers(min_value=0, max_value=len(DATA) - 1))
def test_truncated_file_is_refused(n):
    with pytest.raises(almanac.AlmanacError, match="truncated|checksum|magic"):
        almanac.parse(DATA[:n], "2029.lca")


def test_other_versions_and_bad_directories_refused(tmp_path):
    import binascii
    import struct
    body = bytearray(DATA[:-4])
    body[4] = 2                                    # a future format version, with a valid checksum
    with pytest.raises(almanac.AlmanacError, match="version 2"):
        almanac.parse(bytes(body) + struct.pack("<I", binascii.crc32(bytes(body)) & 0xFFFFFFFF))
    with pytest.raises(almanac.AlmanacError, match="not found"):
        almanac.load(str(tmp_path / "nowhere"))
    with pytest.raises(almanac.AlmanacError, match="no almanac files"):
        almanac.load(str(tmp_path))
    (tmp_path / "2029.lca").write_bytes(DATA[:-1] + bytes([DATA[-1] ^ 1]))
    alm = almanac.load(str(tmp_path))
    with pytest.raises(almanac.AlmanacError, match="checksum"):
        alm.position("sun", ts.parse_utc("2029-08-03T06:41:12.250Z"))
    with pytest.raises(almanac.AlmanacError, match="outside the almanac"):
        alm.position("sun", ts.parse_utc("2030-08-03T06:41:12.250Z"))
    (tmp_path / "2029.lca").unlink()
    with pytest.raises(almanac.AlmanacError, match="cannot be read"):
        alm.position("sun", ts.parse_utc("2029-08-03T06:41:12.250Z"))


def test_dut1_shifts_gha_by_earth_rotation():
    t = ts.parse_utc("2029-08-03T06:41:12.250Z")
    a = ALM.position("sun", t)
    b = ALM.position("sun", t, dut1_us=500000)
    # 0.5 s of UT1 = 0.5 x 15.041"/s = 7.52" of GHA (IERS Conventions 2010, ERA rate)
    assert abs(_wrap_arcmin(b.gha_deg, a.gha_deg) - 0.5 * 360.0 * 1.00273781191135448 / 86400 * 60) < 1e-4
    assert b.dec_deg == a.dec_deg
    assert math.isclose(b.gha_rate_deg_per_s, a.gha_rate_deg_per_s)


@settings(max_examples=80, deadline=None)
@given(st.lists(st.integers(min_value=1, max_value=29).flatmap(
    lambda w: st.tuples(st.just(w), st.integers(min_value=-(1 << (w - 1)), max_value=(1 << (w - 1)) - 1))),
    min_size=1, max_size=40))
def test_bit_packing_round_trip(fields):
    # the fitter's writer (host/almanac_fit.py) and the engine's reader agree on every width 1..29
    # at every bit alignment, including the two-byte over-read the reader relies on (4-byte CRC after)
    from host.almanac_fit import _BitWriter
    bw = _BitWriter()
    for w, v in fields:
        bw.put(v, w)
    buf = bw.tobytes() + b"\0\0\0\0"
    pos = 0
    for w, v in fields:
        assert almanac._signed_bits(buf, pos, w) == v
        pos += w
