"""The reference pipeline: apparent geocentric and topocentric Sun and Moon.

This is limbclock's outside reference, used to fit the shipped almanac
(``host/almanac_fit.py``), to write the reference vectors in ``vectors/`` and
to build reference sight sessions.  It uses only published libraries:

* **JPL DE421** (Folkner, Williams & Boggs 2008, IPN Progress Report 42-178)
  through ``jplephem``'s classic interface (``jplephem.ephem.Ephemeris`` on
  the ``de421`` package).  In that interface ``'sun'`` and ``'earthmoon'`` are
  barycentric (ICRF, km) and ``'moon'`` is **geocentric** (the Moon relative
  to the Earth, as stored in the DE files; checked: its length is ~384 000 km),
  so the barycentric Earth is ``earthmoon - moon / (1 + EMRAT)``
  (EMRAT = 81.3005690699153 in DE421).  DE421 covers JD 2414992.5 to
  2524624.5 (1899-07-29 to 2053-10-09).
* **ERFA** (``pyerfa``, the open-source SOFA):
  ``dtdb`` (TDB - TT, Fairhead & Bretagnon 1990 series, geocentre),
  ``ld`` (light deflection by the Sun, Moon only), ``ab`` (annual aberration,
  relativistic form), ``c2i06a`` (GCRS -> CIRS, IAU 2006/2000A
  precession-nutation with the CIO locator s), ``era00`` (Earth rotation
  angle, IERS Conventions 2010 eq. 5.15), ``gd2gc`` (WGS 84 geodetic ->
  geocentric).

Time scales.  Instants are ``int`` microseconds of UTC since 1970 (POSIX), as
everywhere in limbclock.  TT = UTC + (TAI - UTC) + 32.184 s with the leap-second
table of ``engine.timescale`` (IERS Bulletin C); TDB = TT + ``erfa.dtdb`` at the
geocentre; UT1 = UTC + ``dut1_s`` (default 0).

Apparent geocentric place (the classical chain, e.g. *Explanatory Supplement*,
3rd ed. 2013, ch. 7):

1. Earth's barycentric position and velocity at TDB t;
2. light time: iterate tau = |B(t - tau) - E(t)| / c (three passes, to
   < 1 microsecond), giving the astrometric vector B(t - tau) - E(t);
3. Moon only: deflection of light by the Sun (``erfa.ld``; < 0.01"), none for
   the Sun itself;
4. annual aberration with Earth's barycentric velocity (``erfa.ab``);
5. rotation GCRS -> CIRS (``erfa.c2i06a``): right ascension measured from the
   CIO (``ra_cio``) and declination of date (true equator of date = CIP
   equator);
6. GHA = ERA(UT1) - ra_cio.  Polar motion (< 0.5", i.e. < 0.01') is ignored,
   so the terrestrial-intermediate frame (TIRS) is taken as the Earth-fixed
   frame.  The apparent unit vector in TIRS is
   (cos dec cos GHA, -cos dec sin GHA, sin dec), x toward the Greenwich
   (TIO) meridian, z toward the CIP, y toward 90 deg East.

Distances are the astrometric (light-time corrected) geocentric distances in
km.  Semi-diameter and horizontal parallax, with the equatorial radius
a_e = 6378.137 km (WGS 84 / IERS):

* horizontal parallax, both bodies: sin HP = a_e / distance;
* Sun semi-diameter: SD = 959.63" / r (r in au; *Explanatory Supplement*,
  solar radius 696 000 km [from memory]);
* Moon semi-diameter: sin SD = k a_e / distance, k = 0.2725076 (IAU 1982),
  i.e. SD = k HP within 0.001'.

Topocentric helper (``topocentric_alt_az``): observer at WGS 84 geodetic
latitude, east longitude and ellipsoidal height; the body placed at its
apparent direction and geocentric distance in TIRS; exact vector difference
(so parallax, including the Earth's flattening, is exact), altitude above the
plane normal to the geodetic vertical, azimuth from true north toward east.
No refraction.  Diurnal aberration (<= 0.32") and polar motion are ignored, and the
annual aberration is applied to the geocentric direction before the parallax (a
rigorous reduction applies it to the topocentric vector): for the Moon that moves the
topocentric direction by up to the aberration times the parallax factor, about
20.5" / 60 = 0.34", and its topocentric distance by up to 0.7 km.  Together <= 0.011'
(``tests/test_reference_pipeline.py`` measures 0.0074' against Skyfield).
Topocentric semi-diameter from the topocentric distance (so the Moon's
augmentation is included).

Every function accepts a scalar ``int`` or a numpy array of ``int64``
instants and returns numpy arrays (0-d for scalars).
"""
import numpy as np

import erfa
from jplephem.ephem import Ephemeris
import de421

from engine import timescale
from engine.constants import AU_KM, SUN_SD_1AU_ARCSEC, MOON_K, US_PER_DAY, UNIX_EPOCH_JD

C_KM_S = 299792.458                # speed of light (IAU 1976, exact)
A_E_KM = 6378.137                  # Earth equatorial radius (WGS 84; IERS Conventions 2010)
SUN_RADIUS_KM = AU_KM * np.sin(np.radians(SUN_SD_1AU_ARCSEC / 3600.0))   # derived: from SD at 1 au
MOON_RADIUS_KM = MOON_K * A_E_KM   # k a_e (IAU 1982 k)
BODIES = ("sun", "moon")
LIBRARIES = "jplephem %s, de421 %s, pyerfa %s (ERFA %s), numpy %s"

_EPH = None


def ephemeris():
    """The DE421 ephemeris (loaded once)."""
    global _EPH
    if _EPH is None:
        _EPH = Ephemeris(de421)
    return _EPH


def library_versions():
    """One line naming the libraries and versions behind the reference."""
    import jplephem
    return LIBRARIES % (jplephem.__version__, getattr(de421, "__version__", "2008"), erfa.__version__,
                        erfa.version.erfa_version, np.__version__)


def _as_us(t_us):
    a = np.asarray(t_us)
    if a.dtype.kind not in "iu":
        raise ValueError("t_us: instants must be integers (microseconds of UTC), got %s" % a.dtype)
    return a.astype(np.int64)


def tt_minus_utc_us(t):
    """TT - UTC (int64 us) of int64 UTC instants, from ``engine.timescale``'s leap-second table."""
    # the leap-second table changes on whole days: evaluate it once per distinct day
    days = t // US_PER_DAY
    uniq, inv = np.unique(days, return_inverse=True)
    vals = np.array([timescale.tt_minus_utc_us(int(d) * US_PER_DAY) for d in uniq.ravel()], dtype=np.int64)
    return vals[inv].reshape(t.shape)


def _two_part_jd(t_us):
    """int64 microseconds since 1970 -> (jd1, jd2) with jd1 a whole day + 0.5 and |jd2| < 1."""
    day = t_us // US_PER_DAY
    frac = (t_us - day * US_PER_DAY) / float(US_PER_DAY)
    return UNIX_EPOCH_JD + day.astype(np.float64), frac


def _earth(eph, jd1, jd2):
    """Barycentric position (km) and velocity (km/day) of the Earth at TDB jd1 + jd2."""
    emb, emb_v = eph.position_and_velocity("earthmoon", jd1, jd2)
    moon, moon_v = eph.position_and_velocity("moon", jd1, jd2)
    share = 1.0 / (1.0 + eph.EMRAT)
    return emb - moon * share, emb_v - moon_v * share


def _barycentric(eph, body, jd1, jd2):
    if body == "sun":
        return eph.position("sun", jd1, jd2)
    if body == "moon":
        e, _ = _earth(eph, jd1, jd2)
        return e + eph.position("moon", jd1, jd2)
    raise ValueError("body must be 'sun' or 'moon', got %r" % (body,))


def _unit(v):
    return v / np.linalg.norm(v, axis=-1, keepdims=True)


def utc_from_tt(tt_us):
    """TT instants (int64 us since 1970-01-01T00:00 TT) -> UTC instants (exact except
    within 70 s after a leap second)."""
    tt = _as_us(tt_us)
    return tt - tt_minus_utc_us(tt - 69184000)


def apparent_cirs(body, t_us, dut1_s=0.0, tt_us=None):
    """Core of the pipeline: returns a dict of numpy arrays (1-D, length n)

    ``ra_cio_deg`` [0, 360), ``dec_deg``, ``era_deg`` [0, 360), ``distance_km``,
    ``tt_jd1``, ``tt_jd2``, and ``cirs`` (n, 3) apparent unit vectors in CIRS.
    When ``tt_us`` is given (same shape as ``t_us``) it is used as TT instead of
    the TT derived from ``t_us`` (the fitter works on a TT grid).
    """
    if body not in BODIES:
        raise ValueError("body must be 'sun' or 'moon', got %r" % (body,))
    eph = ephemeris()
    t = _as_us(t_us).ravel()
    tt = t + tt_minus_utc_us(t) if tt_us is None else _as_us(tt_us).ravel()
    tt1, tt2 = _two_part_jd(tt)
    ut1, ut2 = _two_part_jd(t + int(round(dut1_s * 1e6)))
    # TDB - TT at the geocentre (Fairhead & Bretagnon 1990, via erfa.dtdb)
    dtdb_s = erfa.dtdb(tt1, tt2, ut2, 0.0, 0.0, 0.0)
    tdb1, tdb2 = tt1, tt2 + dtdb_s / 86400.0
    e_pos, e_vel = _earth(eph, tdb1, tdb2)          # (3, n) km, km/day
    tau = np.zeros_like(tdb2)
    for _ in range(3):                               # light time, converges in 2 passes
        b = _barycentric(eph, body, tdb1, tdb2 - tau)
        vec = b - e_pos
        dist = np.linalg.norm(vec, axis=0)
        tau = dist / C_KM_S / 86400.0
    p = _unit(vec.T)                                 # (n, 3) astrometric directions, GCRS axes
    sun_e = e_pos - eph.position("sun", tdb1, tdb2)  # Sun -> Earth, km
    em_au = np.linalg.norm(sun_e, axis=0) / AU_KM
    e_unit = _unit(sun_e.T)
    if body == "moon":
        q = _unit((b - eph.position("sun", tdb1, tdb2 - tau)).T)   # Sun -> Moon at emission
        p = erfa.ld(1.0, p, q, e_unit, em_au, 1e-9)
    v = e_vel.T / (C_KM_S * 86400.0)                 # Earth velocity in units of c
    bm1 = np.sqrt(1.0 - np.sum(v * v, axis=1))
    p = erfa.ab(p, v, em_au, bm1)
    c2i = erfa.c2i06a(tt1, tt2)                      # (n, 3, 3) GCRS -> CIRS
    cirs = np.einsum("nij,nj->ni", c2i, p)
    ra = np.degrees(np.arctan2(cirs[:, 1], cirs[:, 0])) % 360.0
    dec = np.degrees(np.arcsin(np.clip(cirs[:, 2], -1.0, 1.0)))
    era = np.degrees(erfa.era00(ut1, ut2)) % 360.0
    return {"ra_cio_deg": ra, "dec_deg": dec, "era_deg": era, "distance_km": dist,
            "tt_jd1": tt1, "tt_jd2": tt2, "cirs": cirs}


def sd_hp_arcmin(body, distance_km):
    """(semi-diameter, horizontal parallax) in arcmin from the geocentric distance (see module doc)."""
    d = np.asarray(distance_km, dtype=np.float64)
    hp = np.degrees(np.arcsin(A_E_KM / d)) * 60.0
    if body == "sun":
        sd = SUN_SD_1AU_ARCSEC / 60.0 * AU_KM / d
    else:
        sd = np.degrees(np.arcsin(MOON_RADIUS_KM / d)) * 60.0
    return sd, hp


def apparent(body, t_us, dut1_s=0.0):
    """Apparent geocentric place of ``body`` ('sun' or 'moon') at UTC instant(s) ``t_us``.

    Returns a dict of numpy arrays shaped like ``t_us``:
    ``gha_deg`` [0, 360) (= ERA(UT1) - RA from the CIO), ``dec_deg``,
    ``ra_cio_deg`` [0, 360), ``era_deg``, ``sd_arcmin``, ``hp_arcmin``,
    ``distance_km`` and ``tirs`` (shape + (3,)): the apparent geocentric unit
    vector in the terrestrial-intermediate frame (x Greenwich, y 90 E, z CIP).
    """
    shape = np.shape(t_us)
    r = apparent_cirs(body, t_us, dut1_s)
    gha = (r["era_deg"] - r["ra_cio_deg"]) % 360.0
    sd, hp = sd_hp_arcmin(body, r["distance_km"])
    era = np.radians(r["era_deg"])
    c, s = np.cos(era), np.sin(era)
    x, y, z = r["cirs"][:, 0], r["cirs"][:, 1], r["cirs"][:, 2]
    tirs = np.stack([c * x + s * y, -s * x + c * y, z], axis=-1)   # R3(ERA) applied to CIRS
    out = {"gha_deg": gha, "dec_deg": r["dec_deg"], "ra_cio_deg": r["ra_cio_deg"], "era_deg": r["era_deg"],
           "sd_arcmin": sd, "hp_arcmin": hp, "distance_km": r["distance_km"]}
    out = {k: v.reshape(shape) for k, v in out.items()}
    out["tirs"] = tirs.reshape(shape + (3,))
    return out


def observer_tirs_km(lat_deg, lon_deg, height_m=0.0):
    """Geocentric position (km, Earth-fixed = TIRS, polar motion ignored) of a WGS 84
    geodetic position (latitude N+, longitude E+, ellipsoidal height in m)."""
    xyz = erfa.gd2gc(1, np.radians(lon_deg), np.radians(lat_deg), height_m)   # 1 = WGS 84, metres
    return np.asarray(xyz) / 1000.0


def topocentric_alt_az(body, t_us, lat_deg, lon_deg, height_m=0.0, dut1_s=0.0):
    """True topocentric place of the body's centre (no refraction).

    Returns a dict of numpy arrays shaped like ``t_us`` (the observer may be
    scalars or arrays broadcastable to it): ``alt_deg``, ``az_deg`` [0, 360)
    from true north toward east, ``sd_arcmin`` (topocentric semi-diameter),
    ``distance_km`` (topocentric).  See the module docstring for the frames.
    """
    shape = np.shape(t_us)
    g = apparent(body, np.asarray(t_us).ravel(), dut1_s)
    body_km = g["tirs"] * g["distance_km"][:, None]
    lat = np.broadcast_to(np.asarray(lat_deg, dtype=float), shape).ravel()
    lon = np.broadcast_to(np.asarray(lon_deg, dtype=float), shape).ravel()
    h = np.broadcast_to(np.asarray(height_m, dtype=float), shape).ravel()
    obs = observer_tirs_km(lat, lon, h).reshape(-1, 3)
    topo = body_km - obs
    dist = np.linalg.norm(topo, axis=1)
    u = topo / dist[:, None]
    la, lo = np.radians(lat), np.radians(lon)
    up = np.stack([np.cos(la) * np.cos(lo), np.cos(la) * np.sin(lo), np.sin(la)], axis=-1)
    east = np.stack([-np.sin(lo), np.cos(lo), np.zeros_like(lo)], axis=-1)
    north = np.stack([-np.sin(la) * np.cos(lo), -np.sin(la) * np.sin(lo), np.cos(la)], axis=-1)
    alt = np.degrees(np.arcsin(np.clip(np.sum(u * up, axis=1), -1.0, 1.0)))
    az = np.degrees(np.arctan2(np.sum(u * east, axis=1), np.sum(u * north, axis=1))) % 360.0
    radius = SUN_RADIUS_KM if body == "sun" else MOON_RADIUS_KM
    sd = np.degrees(np.arcsin(radius / dist)) * 60.0
    return {"alt_deg": alt.reshape(shape), "az_deg": az.reshape(shape),
            "sd_arcmin": sd.reshape(shape), "distance_km": dist.reshape(shape)}
