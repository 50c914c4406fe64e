"""Spherical helpers against ERFA and textbook facts (sources: ``tests/SOURCES.md``)."""
import math

import erfa
import numpy as np
from hypothesis import given, settings, strategies as st

from engine import sphere
from engine.constants import US_PER_S


def test_alt_az_against_erfa_hd2ae():
    # ERFA eraHd2ae (SOFA): hour angle, declination -> azimuth (N through E), altitude
    rng = np.random.default_rng(20311)
    for _ in range(2000):
        lat = rng.uniform(-80.0, 80.0)
        dec = rng.uniform(-30.0, 30.0)
        lha = rng.uniform(0.0, 360.0)
        h, zn = sphere.alt_az(lat, dec, lha)
        az_r, el_r = erfa.hd2ae(math.radians(lha), math.radians(dec), math.radians(lat))
        assert abs(h - math.degrees(el_r)) * 60.0 < 1e-6
        if abs(h) < 89.9:
            d = (zn - math.degrees(az_r) + 180.0) % 360.0 - 180.0
            assert abs(d) * 60.0 < 1e-5
        assert 0.0 <= zn < 360.0


def test_altitude_derivatives_finite_difference():
    # dH/dLHA = cos lat sin Zn and dH/ddec (the derivatives of sin H = sin lat sin dec + cos lat cos dec
    # cos LHA; Smart, Textbook on Spherical Astronomy, 6th ed. 1977 [from memory]), against central
    # differences of ERFA's hd2ae
    rng = np.random.default_rng(7)
    for _ in range(300):
        lat, dec, lha = rng.uniform(-70, 70), rng.uniform(-28, 28), rng.uniform(0, 360)
        h, zn = sphere.alt_az(lat, dec, lha)
        if abs(h) > 80.0:
            continue
        d_lha, d_dec = sphere.alt_derivatives(lat, dec, lha, h, zn)
        e = 1e-4

        def el(ha, de):
            return math.degrees(erfa.hd2ae(math.radians(ha), math.radians(de), math.radians(lat))[1])
        assert abs(d_lha - (el(lha + e, dec) - el(lha - e, dec)) / (2 * e)) < 1e-5
        assert abs(d_dec - (el(lha, dec + e) - el(lha, dec - e)) / (2 * e)) < 1e-5


def test_rate_check_values():
    # dH/dt at Zn 90 deg for lat 0/30/45/60 = 0.250/0.217/0.177/0.125 '/s: the formula restated
    # (15 deg/h of LHA x cos lat).  Independent: ERFA's hd2ae over one second of LHA (15"), below.
    for lat, rate in ((0.0, 0.250), (30.0, 0.217), (45.0, 0.177), (60.0, 0.125)):
        h, zn = sphere.alt_az(lat, 0.0, 270.0)          # on the equator, rising due east
        assert abs(zn - 90.0) < 1e-9 and abs(h) < 1e-9
        d_lha, _ = sphere.alt_derivatives(lat, 0.0, 270.0, h, zn)
        assert abs(d_lha * 15.0 / 3600.0 * 60.0 - rate) < 0.0005
        step = math.radians(15.0 / 3600.0)              # one second of time, in hour angle
        el = [erfa.hd2ae(math.radians(270.0) + s * step, 0.0, math.radians(lat))[1] for s in (-0.5, 0.5)]
        assert abs(math.degrees(el[1] - el[0]) * 60.0 - rate) < 0.0005


def test_dr_textbook_cases():
    hour = 3600 * US_PER_S
    # 1 nmi = 1' of latitude; departure along the equator is 1' of longitude (common practice; the
    # nautical mile's definition on the sphere)
    lat, lon = sphere.dr_position(10.0, 20.0, 0.0, 6.0, 10 * hour)
    assert abs(lat - 11.0) < 1e-12 and abs(lon - 20.0) < 1e-12
    lat, lon = sphere.dr_position(0.0, 179.5, 90.0, 60.0, hour)
    assert abs(lat) < 1e-12 and abs(lon - (-179.5)) < 1e-9
    # along a parallel the departure is d cos(lat) (the Nautical Almanac's DR formula, "Explanation")
    lat, lon = sphere.dr_position(60.0, 0.0, 270.0, 30.0, hour)
    assert abs(lat - 60.0) < 1e-12 and abs(lon + 1.0) < 1e-9


def _rhumb_bowditch(lat0, lon0, course, d_nm):
    # Bowditch (NGA Pub. 9), Mercator sailing: dlat = d cos C; dlon = dlat tan C / dpsi-ratio, on the sphere
    lat1 = lat0 + d_nm * math.cos(math.radians(course)) / 60.0
    psi = lambda p: math.log(math.tan(math.pi / 4 + math.radians(p) / 2))
    if abs(lat1 - lat0) < 1e-9:
        return lat1, lon0 + d_nm * math.sin(math.radians(course)) / 60.0 / math.cos(math.radians(lat0))
    return lat1, lon0 + math.degrees(math.tan(math.radians(course)) * (psi(lat1) - psi(lat0)))


@settings(max_examples=200, deadline=None)
@given(st.floats(-70, 70), st.floats(-179, 179), st.floats(0, 360), st.floats(0, 15), st.integers(-48, 48))
def test_dr_matches_mercator_sailing(lat0, lon0, course, speed, hours):
    lat, lon = sphere.dr_position(lat0, lon0, course, speed, hours * 3600 * US_PER_S)
    if abs(math.cos(math.radians(course))) < 0.02:
        return                   # tan C blows up near east/west: covered by the parallel case above
    rl, rn = _rhumb_bowditch(lat0, lon0, course, speed * hours)
    assert abs(lat - rl) < 1e-9
    assert abs(((lon - rn + 180.0) % 360.0) - 180.0) * 60.0 * math.cos(math.radians(lat)) < 1e-3   # 0.001 nmi


def test_distance_against_erfa_seps():
    rng = np.random.default_rng(3)
    for _ in range(500):
        a = rng.uniform(-80, 80), rng.uniform(-180, 180)
        b = a[0] + rng.normal(0, 2), a[1] + rng.normal(0, 2)
        ref = math.degrees(erfa.seps(math.radians(a[1]), math.radians(a[0]), math.radians(b[1]),
                                     math.radians(b[0]))) * 60.0
        assert abs(sphere.distance_nm(a[0], a[1], b[0], b[1]) - ref) < 1e-6


@settings(max_examples=200, deadline=None)
@given(st.floats(-75, 75), st.floats(-180, 180), st.floats(-120, 120), st.floats(-120, 120))
def test_move_offset_inverse(lat, lon, n, e):
    lat2, lon2 = sphere.move_nm(lat, lon, n, e)
    n2, e2 = sphere.offset_nm(lat, lon, lat2, lon2)
    assert abs(n2 - n) < 1e-9 and abs(e2 - e) < 1e-7
    # and the local plane is good to 0.1 % at these distances (haversine distance)
    d = sphere.distance_nm(lat, lon, lat2, lon2)
    assert abs(d - math.hypot(n, e)) <= 2e-3 * math.hypot(n, e) + 1e-9
