"""Spherical navigation: altitude and azimuth, rhumb-line dead reckoning, local offsets.

The Earth is a sphere on which one arcminute of a great circle is one nautical
mile.  Latitude north-positive, longitude east-positive, LHA = GHA + longitude.
"""
import math

from engine.angles import sind, cosd, asind, atan2d, norm360, norm180, DEG, RAD
from engine.constants import US_PER_S

US_PER_HOUR = 3600 * US_PER_S


def alt_az(lat_deg, dec_deg, lha_deg):
    """(altitude deg [-90, 90], azimuth deg [0, 360) from north toward east) of a body
    of declination ``dec_deg`` at local hour angle ``lha_deg`` seen from ``lat_deg``.

    sin Hc = sin lat sin dec + cos lat cos dec cos LHA;
    Zn = atan2(-cos dec sin LHA, cos lat sin dec - sin lat cos dec cos LHA)
    (Bowditch, NGA Pub. 9, and the Nautical Almanac's sight-reduction formulas)."""
    sl, cl = sind(lat_deg), cosd(lat_deg)
    sd, cd = sind(dec_deg), cosd(dec_deg)
    ct = cosd(lha_deg)
    h = asind(sl * sd + cl * cd * ct)
    zn = norm360(atan2d(-cd * sind(lha_deg), cl * sd - sl * cd * ct))
    return h, zn


def alt_derivatives(lat_deg, dec_deg, lha_deg, h_deg, zn_deg):
    """(dH/dLHA, dH/ddec), dimensionless (deg per deg), at a point computed by ``alt_az``.

    dH/dLHA = cos lat sin Zn; dH/ddec = (sin lat cos dec - cos lat sin dec cos LHA) / cos H
    (differentiating the altitude formula)."""
    ch = cosd(h_deg)
    if ch < 1e-9:
        return 0.0, 0.0
    d_lha = cosd(lat_deg) * sind(zn_deg)
    d_dec = (sind(lat_deg) * cosd(dec_deg) - cosd(lat_deg) * sind(dec_deg) * cosd(lha_deg)) / ch
    return d_lha, d_dec


def dr_position(lat_deg, lon_deg, course_deg, speed_kn, dt_us):
    """Dead-reckoning position after ``dt_us`` microseconds (may be negative) along a
    rhumb line at ``course_deg`` true and ``speed_kn`` over ground.

    Nautical Almanac DR formulas: lat = lat0 + (V t / 60) cos C; the longitude
    change is the departure over the mean Mercator latitude (Bowditch, rhumb-line
    sailing): dlon = d sin C / q with q = dlat / dpsi (dpsi the change of
    Mercator latitude), q = cos lat near a parallel.  Returns (lat_deg, lon_deg in
    [-180, 180)); latitude is held within +-89.9 deg."""
    d_nm = speed_kn * (dt_us / US_PER_HOUR)
    if d_nm == 0.0:
        return lat_deg, norm180(lon_deg)
    dlat_deg = d_nm * cosd(course_deg) / 60.0
    lat2 = lat_deg + dlat_deg
    if lat2 > 89.9:
        lat2 = 89.9
    elif lat2 < -89.9:
        lat2 = -89.9
    dlat_rad = (lat2 - lat_deg) * DEG
    if abs(dlat_rad) < 1e-3:
        q = cosd(0.5 * (lat_deg + lat2))
    else:
        dpsi = math.log(math.tan(math.pi / 4 + lat2 * DEG / 2) / math.tan(math.pi / 4 + lat_deg * DEG / 2))
        q = dlat_rad / dpsi
    dlon_deg = d_nm * sind(course_deg) / 60.0 / q
    return lat2, norm180(lon_deg + dlon_deg)


def move_nm(lat_deg, lon_deg, north_nm, east_nm):
    """Position offset by ``north_nm`` and ``east_nm`` in the local plane at the
    point (mid-latitude departure).  Inverse of ``offset_nm`` (away from the
    poles: like ``dr_position`` the latitude is held within +-89.9 deg)."""
    lat2 = lat_deg + north_nm / 60.0
    if lat2 > 89.9:
        lat2 = 89.9
    elif lat2 < -89.9:
        lat2 = -89.9
    return lat2, norm180(lon_deg + east_nm / (60.0 * cosd(0.5 * (lat_deg + lat2))))


def offset_nm(lat0_deg, lon0_deg, lat_deg, lon_deg):
    """(north_nm, east_nm) of a position from a reference position, local plane at
    the mid-latitude (inverse of ``move_nm``)."""
    north = (lat_deg - lat0_deg) * 60.0
    east = norm180(lon_deg - lon0_deg) * 60.0 * cosd(0.5 * (lat0_deg + lat_deg))
    return north, east


def distance_nm(lat1_deg, lon1_deg, lat2_deg, lon2_deg):
    """Great-circle distance in nautical miles (haversine form, good at small distances)."""
    a = sind(0.5 * (lat2_deg - lat1_deg)) ** 2 + \
        cosd(lat1_deg) * cosd(lat2_deg) * sind(0.5 * norm180(lon2_deg - lon1_deg)) ** 2
    return 2.0 * math.asin(min(1.0, math.sqrt(a))) * RAD * 60.0
