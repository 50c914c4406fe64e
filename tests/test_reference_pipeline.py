"""The reference pipeline (vectors/reference.py: DE421 + ERFA) against a second library, astropy.

astropy's built-in ephemeris is used so nothing is downloaded: the Earth and Sun
from ERFA's epv00 (VSOP2000-based, about 5 km in the Earth's position, i.e. < 0.01"
seen from the Sun's distance [ERFA epv00 notes]) and the Moon from the truncated
ELP series of Meeus (Astronomical Algorithms ch. 47, ~10" [from memory]).  astropy
computes its own light time, aberration, light deflection and IAU 2006/2000A
precession-nutation; only the Moon's model differs in kind.  No IERS download:
``auto_download`` is off and degraded accuracy warns; those warnings (and ERFA's
"dubious year" for dates past its leap-second table) are expected here only.
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
    # (Nautical Almanac), and the Moon's augmented SD ~ SD (1 + sin HP sin H) (REFERENCES 1.5).
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
    # 0.3': the flattening term (REFERENCES 1.4, up to 0.2') and second-order terms
    assert abs((h_geo - h_top) * 60.0 - pa) < 0.3
    aug = float(g["sd_arcmin"]) * (1.0 + np.sin(np.radians(g["hp_arcmin"] / 60.0)) * np.sin(np.radians(h_top)))
    assert abs(float(r["sd_arcmin"]) - aug) < 0.01


def test_reference_rejects_bad_input():
    with pytest.raises(ValueError, match="body"):
        reference.apparent("mars", ts.parse_utc("2030-01-01T00:00:00Z"))
    with pytest.raises(ValueError, match="integers"):
        reference.apparent("sun", 1.9e15)
