"""Altitude corrections: dip, refraction, semi-diameter, parallax (arcmin).

The order of the corrections (Nautical Almanac, "Sight reduction procedures"):
Hs -> -dip -> Ha (apparent altitude) -> -R(Ha) -> limb -> +PA -> Ho.
With a fixed-deviation instrument Hs is known (the image's deviation) and the
time is measured, so the apparent-altitude forms (Bennett) apply directly.

Each correction is its own small function and names its published source.
Inputs and outputs: altitudes in degrees, corrections in arcminutes, heights in
metres, temperature in degrees C, pressure in hPa.
"""
import math

from engine.angles import sind, cosd, tand, asind
from engine.constants import WGS84_F

STD_TEMPERATURE_C = 10.0      # the almanac's standard atmosphere (Nautical Almanac, refraction tables)
STD_PRESSURE_HPA = 1010.0
DIP_ARCMIN_PER_SQRT_M = 1.76  # Nautical Almanac dip formula, D = 1.76' sqrt(h m) (10 C, 1010 hPa)
_MIN_HA_DEG = -1.0            # lowest apparent altitude the refraction formula is used at


class CorrectionError(ValueError):
    """An input outside the domain of a correction formula."""


def dip_arcmin(eye_height_m):
    """Dip of the sea horizon (arcmin) for a height of eye in metres.

    Nautical Almanac: D = 1.76' sqrt(h), h in metres (terrestrial refraction of
    the standard atmosphere included; the geometric value is 1.93' sqrt(h))."""
    if not eye_height_m >= 0.0:
        raise CorrectionError("eye_height_m: must be >= 0, got %r" % (eye_height_m,))
    return DIP_ARCMIN_PER_SQRT_M * math.sqrt(eye_height_m)


def weather_factor(temperature_c=STD_TEMPERATURE_C, pressure_hpa=STD_PRESSURE_HPA):
    """Refraction scale factor for non-standard weather (Nautical Almanac:
    f = 0.28 P / (T + 273), P in hPa, T in degrees C; f = 0.9993 at 10 C, 1010 hPa)."""
    if not -80.0 < temperature_c < 80.0:
        raise CorrectionError("temperature_c: %r outside -80..80" % (temperature_c,))
    if not 500.0 < pressure_hpa < 1200.0:
        raise CorrectionError("pressure_hpa: %r outside 500..1200" % (pressure_hpa,))
    return 0.28 * pressure_hpa / (temperature_c + 273.0)


def bennett_arcmin(ha_deg):
    """Standard refraction (arcmin) at apparent altitude ``ha_deg``, Bennett (1982),
    J. Navigation 35, 255-259: R = cot(Ha + 7.31/(Ha + 4.4)), refined by
    R - 0.06 sin(14.7 R + 13 deg) (within 0.015' of the Pulkovo tables).
    Altitudes below -1 deg are taken as -1 deg (the formula's useful domain)."""
    h = ha_deg if ha_deg > _MIN_HA_DEG else _MIN_HA_DEG
    r = 1.0 / tand(h + 7.31 / (h + 4.4))
    return r - 0.06 * sind(14.7 * r + 13.0)


def refraction_arcmin(ha_deg, temperature_c=STD_TEMPERATURE_C, pressure_hpa=STD_PRESSURE_HPA):
    """Astronomical refraction (arcmin) at APPARENT altitude ``ha_deg``: Bennett's
    refined formula (``bennett_arcmin``) times the Nautical Almanac weather factor
    (``weather_factor``).  Subtract it from Ha to get the airless altitude."""
    return bennett_arcmin(ha_deg) * weather_factor(temperature_c, pressure_hpa)


def refraction_true_arcmin(h_deg, temperature_c=STD_TEMPERATURE_C, pressure_hpa=STD_PRESSURE_HPA):
    """Refraction (arcmin) at TRUE (airless) altitude ``h_deg``: the R with
    Ha - R(Ha)/60 = h for ``refraction_arcmin``, solved by Newton iteration so
    that the forward model and its inverse agree to 1e-6'.  (Saemundsson 1986,
    Sky & Telescope 72, 70, gives the same within 0.1' in closed form.)"""
    f = weather_factor(temperature_c, pressure_hpa)
    ha = h_deg + bennett_arcmin(h_deg) * f / 60.0
    for _ in range(8):
        r = bennett_arcmin(ha) * f
        g = ha - r / 60.0 - h_deg
        dr = (bennett_arcmin(ha + 0.01) * f - r) / 0.01 / 60.0
        step = g / (1.0 - dr)
        ha -= step
        if abs(step) < 1e-9:
            break
    return bennett_arcmin(ha) * f


def parallax_in_altitude_arcmin(hp_arcmin, h_deg, lat_deg=None, zn_deg=None):
    """Parallax in altitude (arcmin) of a body with horizontal parallax ``hp_arcmin``
    seen at topocentric (airless) altitude ``h_deg`` of its centre.

    Spherical Earth: sin PA = sin HP cos H (Nautical Almanac; exact for a
    spherical Earth when H is the topocentric altitude).  With ``lat_deg`` and
    ``zn_deg`` the Earth's flattening is added (first order in f):
    OB = HP f (-sin^2 lat cos H + sin 2lat cos Zn sin H), which is the almanac's
    Moon term OB = -0.0032 deg sin^2 lat cos H + 0.0032 deg sin 2lat cos Zn sin H
    for HP = 57' (Nautical Almanac, "Sight reduction procedures")."""
    pa = asind(sind(hp_arcmin / 60.0) * cosd(h_deg)) * 60.0
    if lat_deg is not None and zn_deg is not None:
        s = sind(lat_deg)
        pa += hp_arcmin * WGS84_F * (-s * s * cosd(h_deg) + sind(2.0 * lat_deg) * cosd(zn_deg) * sind(h_deg))
    return pa


def moon_sd_augmented_arcmin(sd_arcmin, hp_arcmin, h_deg):
    """Topocentric ("augmented") semi-diameter (arcmin) of a body whose geocentric
    semi-diameter is ``sd_arcmin`` and horizontal parallax ``hp_arcmin``, seen at
    topocentric altitude ``h_deg`` of its centre.

    The body is nearer the observer than the geocentre by the ratio
    u = d_topo/d = sqrt(1 - sin^2 HP cos^2 H) - sin HP sin H (triangle geocentre,
    observer, body; Explanatory Supplement 3rd ed. 2013: sin SD_topo = k a_e / d_topo
    [from memory]), so sin SD_topo = sin SD / u.  To first order this is the
    almanac's SD (1 + sin HP sin H): about +0.3' for the Moon at the zenith.
    Used for the Sun too (where it adds < 0.001')."""
    rho = sind(hp_arcmin / 60.0)
    sh = sind(h_deg)
    ch = cosd(h_deg)
    u = math.sqrt(1.0 - rho * rho * ch * ch) - rho * sh
    return asind(sind(sd_arcmin / 60.0) / u) * 60.0


def limb_sign(limb):
    """+1 for the lower limb (the centre is higher), -1 for the upper limb."""
    if limb == "lower":
        return 1.0
    if limb == "upper":
        return -1.0
    raise CorrectionError("limb: must be 'lower' or 'upper', got %r" % (limb,))

