"""Degree trigonometry and angle formatting (pure Python, MicroPython-safe).

Every function takes and returns degrees unless its name says otherwise, and
states its output range.  Quadrant reduction is exact, so ``sind(180.0)`` is
exactly 0 and ``cosd(90.0)`` is exactly 0.
"""
import math

DEG = math.pi / 180.0
RAD = 180.0 / math.pi


def norm360(a_deg):
    """Angle reduced to [0, 360)."""
    a = math.fmod(a_deg, 360.0)
    if a < 0.0:
        a += 360.0
    if a >= 360.0:  # fmod of a tiny negative number can round up to 360
        a = 0.0
    return a


def norm180(a_deg):
    """Angle reduced to [-180, 180)."""
    a = norm360(a_deg)
    if a >= 180.0:
        a -= 360.0
    return a


def _reduce(a_deg):
    # (quadrant 0..3, remainder in [-45, 45]) with a = 90*q + r exactly where possible
    a = norm360(a_deg)
    q = int((a + 45.0) // 90.0)
    r = a - 90.0 * q
    return q % 4, r


def sind(a_deg):
    """sin of an angle in degrees, exact at multiples of 90."""
    q, r = _reduce(a_deg)
    rr = r * DEG
    if q == 0:
        return math.sin(rr)
    if q == 1:
        return math.cos(rr)
    if q == 2:
        return -math.sin(rr)
    return -math.cos(rr)


def cosd(a_deg):
    """cos of an angle in degrees, exact at multiples of 90."""
    q, r = _reduce(a_deg)
    rr = r * DEG
    if q == 0:
        return math.cos(rr)
    if q == 1:
        return -math.sin(rr)
    if q == 2:
        return -math.cos(rr)
    return math.sin(rr)


def tand(a_deg):
    return sind(a_deg) / cosd(a_deg)


def asind(x):
    """asin in degrees, [-90, 90]; the argument is clamped to [-1, 1]."""
    if x > 1.0:
        x = 1.0
    elif x < -1.0:
        x = -1.0
    return math.asin(x) * RAD


def acosd(x):
    """acos in degrees, [0, 180]; the argument is clamped to [-1, 1]."""
    if x > 1.0:
        x = 1.0
    elif x < -1.0:
        x = -1.0
    return math.acos(x) * RAD


def atan2d(y, x):
    """atan2 in degrees, (-180, 180]."""
    return math.atan2(y, x) * RAD


def split_dm(a_deg, decimals=1):
    """Split |angle| into (sign, whole degrees, minutes) after rounding the
    minutes to ``decimals`` places, so 59.99' never shows as 60.0'."""
    sign = -1 if a_deg < 0 else 1
    scale = 10 ** decimals
    total = int(round(abs(a_deg) * 60.0 * scale))
    deg = total // (60 * scale)
    minutes = (total - deg * 60 * scale) / scale
    return sign, deg, minutes


def fmt_dm(a_deg, pos="", neg="-", width=2, decimals=1):
    """Degrees and minutes, e.g. ``fmt_dm(-27.1, 'E', 'W', 3)`` -> ``'027°06.0'W'``."""
    sign, d, m = split_dm(a_deg, decimals)
    hemi = pos if sign > 0 else neg
    mfmt = "%0" + str(3 + decimals if decimals else 2) + "." + str(decimals) + "f"
    body = ("%0" + str(width) + "d") % d + "\u00b0" + mfmt % m + "'"
    if hemi in ("-", ""):
        return (hemi if sign < 0 else "") + body
    return body + hemi


def fmt_lat(lat_deg, decimals=1):
    return fmt_dm(lat_deg, "N", "S", 2, decimals)


def fmt_lon(lon_deg, decimals=1):
    return fmt_dm(lon_deg, "E", "W", 3, decimals)
