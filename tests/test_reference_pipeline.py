"""The reference pipeline (vectors/reference.py: DE421 + ERFA) against second paths.

1. astropy with its built-in ephemeris, so nothing is downloaded: the Earth and Sun
   from ERFA's epv00 (VSOP2000-based, about 5 km in the Earth's position, i.e. < 0.01"
   seen from the Sun's distance: ERFA's epv00 documentation) and the Moon from the
   truncated ELP series of Meeus (*Astronomical Algorithms*, 2nd ed. 1998, ch. 47, ~10"
   [from memory]).  astropy computes its own light time, aberration, light deflection
   and IAU 2006/2000A precession-nutation; the ephemeris differs in kind, so this pins
   the ephemeris reading (Sun 0.002', Moon only 0.25').  No IERS download:
   ``auto_download`` is off and degraded accuracy warns; those warnings (and ERFA's
   "dubious year" for dates past its leap-second table) are expected here only.
2. Skyfield (Rhodes, Skyfield, Astrophysics Source Code Library ascl:1907.024, 2019)
   with the same DE421 read from the JPL SPK kernel ``de421.bsp`` that the
   ``skyfield-data`` package ships (local file, no download): the full-precision
   cross-check of the Moon and Sun at 0.01' (see ``test_full_precision_second_path``).
"""
import numpy as np
import pytest

from engine import timescale as ts
from vectors import reference

astropy = pytest.importorskip("astropy")
from astropy.utils import iers  # noqa: E402

iers.conf.auto_download = False
iers.conf.auto_max_age = None
iers.conf.iers_degraded_accuracy = "warn"

import astropy.units as u  # noqa: E402
from astropy.coordinates import CIRS, AltAz, EarthLocation, get_body, solar_system_ephemeris  # noqa: E402
from astropy.time import Time  # noqa: E402

pytestmark = [pytest.mark.filterwarnings("ignore::erfa.ErfaWarning"),
              pytest.mark.filterwarnings("ignore::astropy.utils.exceptions.AstropyWarning")]

# seeded instants over the almanac span, every field nonzero (not on round hours)
_RNG = np.random.default_rng(7)
INSTANTS = sorted(int(x) for x in _RNG.integers(ts.parse_utc("2025-01-01T00:00:00Z"),
                                                ts.parse_utc("2050-12-31T00:00:00Z"), 12))


def _astropy_cirs(body, t_us):
    t = Time([ts.format_utc(x, 6)[:-1] for x in t_us], scale="utc")
    with solar_system_ephemeris.set("builtin"):
        c = get_body(body, t).transform_to(CIRS(obstime=t))
    return c.ra.deg, c.dec.deg, c.distance.to(u.km).value


@pytest.mark.parametrize("body, tol_arcmin, tol_km", [
    ("sun", 0.002, 2000.0),      # same physics, epv00 vs DE421: well under 0.1"; 2000 km = 0.0002' of SD
    ("moon", 0.25, 20.0),        # Meeus ch. 47 Moon: ~10" and a few km [from memory]
])
def test_cirs_place_agrees_with_astropy(body, tol_arcmin, tol_km):
    t = np.array(INSTANTS, dtype=np.int64)
    ra, dec, dist = _astropy_cirs(body, INSTANTS)
    r = reference.apparent(body, t)
    dra = ((r["ra_cio_deg"] - ra + 180.0) % 360.0 - 180.0) * np.cos(np.radians(dec)) * 60.0
    ddec = (r["dec_deg"] - dec) * 60.0
    assert np.max(np.abs(dra)) < tol_arcmin and np.max(np.abs(ddec)) < tol_arcmin
    assert np.max(np.abs(r["distance_km"] - dist)) < tol_km
    # GHA = ERA - RA(CIO) uses ERFA's ERA; the engine's integer ERA must match it (IERS 2010 eq. 5.15)
    for x, era in zip(INSTANTS, r["era_deg"]):
        assert abs(((ts.era_deg(x) - era + 180.0) % 360.0) - 180.0) * 60.0 < 1e-4


@pytest.mark.parametrize("body, tol_arcmin", [("sun", 0.02), ("moon", 0.3)])
def test_topocentric_alt_az_agrees_with_astropy(body, tol_arcmin):
    # Dates inside astropy's bundled IERS tables, so it has real UT1 and polar motion; refraction
    # off (pressure 0).  Sun: 0.02' allows polar motion (~0.3") and diurnal aberration (0.32")
    # that the reference ignores.  An invented observer off the Azores, 12 m above the ellipsoid.
    lat, lon, h = 38.52, -27.11, 12.0
    texts = ["2025-03-01T10:17:43.5", "2025-05-19T16:02:11.25", "2025-08-03T07:41:12.25"]
    t = Time(texts, scale="utc")
    loc = EarthLocation.from_geodetic(lon * u.deg, lat * u.deg, h * u.m)
    with solar_system_ephemeris.set("builtin"):
        aa = get_body(body, t, location=loc).transform_to(AltAz(obstime=t, location=loc, pressure=0 * u.hPa))
    dut1 = np.asarray((t.ut1.jd1 - t.utc.jd1) + (t.ut1.jd2 - t.utc.jd2)) * 86400.0
    for i, text in enumerate(texts):
        r = reference.topocentric_alt_az(body, ts.parse_utc(text + "Z"), lat, lon, h, dut1_s=float(dut1[i]))
        assert abs(float(r["alt_deg"]) - aa.alt.deg[i]) * 60.0 < tol_arcmin
        daz = (float(r["az_deg"]) - aa.az.deg[i] + 180.0) % 360.0 - 180.0
        assert abs(daz * np.cos(np.radians(aa.alt.deg[i]))) * 60.0 < tol_arcmin


def test_topocentric_parallax_and_semidiameter():
    # Geometry check with published approximations: parallax in altitude PA = HP cos H
    # (The Nautical Almanac, "Explanation": altitude corrections, parallax in altitude), and the
    # Moon's augmented SD ~ SD (1 + sin HP sin H) (Explanatory Supplement to the Astronomical
    # Almanac, 3rd ed. 2013, ch. 7, topocentric semi-diameter [from memory]).
    t = ts.parse_utc("2031-03-01T11:59:59Z")
    lat, lon = -36.8, 160.4
    g = reference.apparent("moon", t)
    r = reference.topocentric_alt_az("moon", t, lat, lon)
    # geocentric altitude from the geocentric unit vector, for a spherical-Earth comparison
    v = g["tirs"]
    la, lo = np.radians(lat), np.radians(lon)
    up = np.array([np.cos(la) * np.cos(lo), np.cos(la) * np.sin(lo), np.sin(la)])
    h_geo = np.degrees(np.arcsin(v @ up))
    h_top = float(r["alt_deg"])
    pa = float(g["hp_arcmin"]) * np.cos(np.radians(h_top))
    # 0.3': the flattening term (The Nautical Almanac's Moon "OB" correction: up to 0.0032 deg =
    # 0.2', [from memory]) and second-order terms
    assert abs((h_geo - h_top) * 60.0 - pa) < 0.3
    aug = float(g["sd_arcmin"]) * (1.0 + np.sin(np.radians(g["hp_arcmin"] / 60.0)) * np.sin(np.radians(h_top)))
    assert abs(float(r["sd_arcmin"]) - aug) < 0.01


def test_reference_rejects_bad_input():
    with pytest.raises(ValueError, match="body"):
        reference.apparent("mars", ts.parse_utc("2030-01-01T00:00:00Z"))
    with pytest.raises(ValueError, match="integers"):
        reference.apparent("sun", 1.9e15)


# ---- 2. the full-precision second path: Skyfield + DE421 from its SPK kernel ----

@pytest.fixture(scope="module")
def skyfield():
    """(skyfield.api, the DE421 SPK kernel, a timescale with UT1 = UTC), the kernel closed after."""
    skyfield_api = pytest.importorskip("skyfield.api")
    skyfield_data = pytest.importorskip("skyfield_data")
    from skyfield.jpllib import SpiceKernel
    import os
    # the package's data directory (its get_skyfield_data_path() also warns about the expiry of
    # an Earth-orientation file we do not use, so the path is taken directly)
    bsp = os.path.join(os.path.dirname(skyfield_data.__file__), "data", "de421.bsp")
    eph = SpiceKernel(bsp)
    # UT1 = UTC as in the reference (DUT1 = 0): Delta T = TT - UT1 = TT - UTC = 69.184 s over
    # 2017-2050 (no leap second in the engine's table after 2017)
    yield skyfield_api, eph, skyfield_api.load.timescale(builtin=True, delta_t=69.184)
    eph.close()


_RNG2 = np.random.default_rng(11)
INSTANTS2 = np.array(sorted(int(x) for x in _RNG2.integers(ts.parse_utc("2025-01-01T00:00:00Z"),
                                                           ts.parse_utc("2050-12-31T00:00:00Z"), 200)), dtype=np.int64)


@pytest.mark.parametrize("body", ["moon", "sun"])
def test_full_precision_second_path(body, skyfield):
    """DE421 + ERFA (CIO-based) against Skyfield (equinox-based), 200 seeded instants 2025-2050.

    Why the paths are independent.  The ephemeris is the same (DE421), but read from a different
    file (the SPK kernel ``de421.bsp`` through Skyfield's SPK reader, against jplephem's classic
    arrays of the ``de421`` package), and every step after it is other code: Skyfield's own numpy
    light-time iteration, relativistic aberration and light deflection (Sun, Jupiter, Saturn),
    its own implementation of IAU 2006 precession and the full IAU 2000A nutation series, and the
    hour angle from Greenwich APPARENT sidereal time and right ascension from the true EQUINOX of
    date (GAST - RA_equinox), where the reference takes the Earth rotation angle and right
    ascension from the CIO (ERA - RA_cio, ERFA's c2i06a / era00).  The two origins differ by the
    equation of the origins (about 0.2 deg of drift by 2050), so a wrong precession, nutation,
    Earth-rotation or aberration step in either path shows at once.

    Expected residual: both paths implement the same IAU models of the same ephemeris; what is
    left is Skyfield's planetary light deflection (microarcseconds at the Moon), its TDB - TT
    series (tens of microseconds of time: < 0.0001") and rounding.  Measured: GHA 5e-6',
    declination 2e-7', distance 2e-5 km.  Asserted: 0.001' (a tenth of the 0.01' target) and
    0.001 km.
    """
    api, eph, tsc = skyfield
    tt_us = INSTANTS2 + reference.tt_minus_utc_us(INSTANTS2)        # the same TT (engine leap table)
    t = tsc.tt_jd(2440587.5 + tt_us / 86400e6)
    app = eph["earth"].at(t).observe(eph[body]).apparent()
    ra, dec, dist = app.radec(epoch="date")                          # true equator and equinox of date
    gha = (t.gast * 15.0 - ra._degrees) % 360.0
    r = reference.apparent(body, INSTANTS2)
    d_gha = ((gha - r["gha_deg"] + 180.0) % 360.0 - 180.0) * 60.0
    d_dec = (dec.degrees - r["dec_deg"]) * 60.0
    assert np.max(np.abs(d_gha)) < 0.001 and np.max(np.abs(d_dec)) < 0.001, (np.abs(d_gha).max(), np.abs(d_dec).max())
    assert np.max(np.abs(dist.km - r["distance_km"])) < 0.001
    # the check is not blind: the equation of the origins (RA_equinox - RA_cio) is large
    eo = ((ra._degrees - r["ra_cio_deg"] + 180.0) % 360.0 - 180.0) * 60.0
    assert np.min(np.abs(eo)) > 1.0


@pytest.mark.parametrize("body, tol_arcmin", [("moon", 0.012), ("sun", 0.007)])
def test_topocentric_second_path(body, tol_arcmin, skyfield):
    """``reference.topocentric_alt_az`` against Skyfield's topocentric apparent altitude and azimuth
    (observer on the WGS 84 ellipsoid, Skyfield's ``wgs84.latlon``), 200 seeded instants and
    observers (latitude 60 S to 60 N, 0-30 m).

    Expected residual, from what the reference leaves out (module docstring): diurnal
    aberration, up to 0.32" = 0.0053' (Skyfield includes the observer's velocity), and, for the
    Moon, annual aberration applied to the geocentric direction before the parallax, which moves
    the topocentric direction by the aberration times the parallax factor, up to about
    20.5" x 1/60 = 0.34" = 0.0057'.  Measured: Moon 0.0074', Sun 0.0053'.  Asserted: their sums,
    0.012' and 0.007'.  The topocentric distance differs by up to 0.7 km for the same reason
    (6378 km x 1e-4 rad), 2e-5' of the Moon's semi-diameter."""
    api, eph, tsc = skyfield
    rng = np.random.default_rng(12)
    n = INSTANTS2.size
    lat, lon, h = rng.uniform(-60.0, 60.0, n), rng.uniform(-180.0, 180.0, n), rng.uniform(0.0, 30.0, n)
    tt_us = INSTANTS2 + reference.tt_minus_utc_us(INSTANTS2)
    t = tsc.tt_jd(2440587.5 + tt_us / 86400e6)
    r = reference.topocentric_alt_az(body, INSTANTS2, lat, lon, h)
    worst = worst_km = 0.0
    for i in range(n):
        site = eph["earth"] + api.wgs84.latlon(lat[i], lon[i], elevation_m=h[i])
        alt, az, d = site.at(t[i]).observe(eph[body]).apparent().altaz()
        d_az = ((az.degrees - r["az_deg"][i] + 180.0) % 360.0 - 180.0) * np.cos(np.radians(alt.degrees))
        worst = max(worst, abs(alt.degrees - r["alt_deg"][i]) * 60.0, abs(d_az) * 60.0)
        worst_km = max(worst_km, abs(d.km - r["distance_km"][i]))
    assert worst < tol_arcmin, worst
    assert worst_km < 0.8
