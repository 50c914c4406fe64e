"""THE forward model of a timed contact (one implementation for fix, schedule,
calibration, identification and tests).

A contact: at instant t the ``limb`` of ``body`` seen through an image of
deviation D touches the sea horizon, so the sextant altitude of that limb is
Hs = D.  The corrections (``engine.corrections``) turn Hs into the observed
altitude of the body's centre,

    Ha = Hs - dip;   h_limb = Ha - R(Ha);   h_top = h_limb +- SD_top(h_top);
    Ho = h_top + PA(h_top)                    (lower limb +, upper limb -)

where SD_top is the topocentric (augmented) semi-diameter and PA the parallax
in altitude, both evaluated at the topocentric altitude of the centre h_top:
the Nautical Almanac's scheme (a) "augmented SD, parallax at the centre"
(one consistent scheme: mixing it with "geocentric SD, parallax at the limb"
counts the augmentation twice, about 0.3'; Explanatory Supplement to the
Astronomical Almanac, 3rd ed. 2013, ch. 7 [from memory]), applied to the Sun
and the Moon alike.  With a position the
flattening term of the parallax is included.  ``sextant_altitude_deg`` is the
exact inverse (it predicts the instant of a contact), and
``computed_alt_az`` the spherical Hc and Zn of the centre (Marcq St Hilaire):
the intercept of a contact is Ho - Hc (arcmin = nautical miles, positive
toward the body).

``alm`` is any object with ``position(body, t_us, dut1_us=0)`` returning an
object with ``gha_deg, dec_deg, sd_arcmin, hp_arcmin`` (``engine.almanac``).
"""
from engine import coop
from engine.angles import norm180
from engine.constants import US_PER_S
from engine.corrections import (dip_arcmin, refraction_arcmin, refraction_true_arcmin, limb_sign,
                                parallax_in_altitude_arcmin, moon_sd_augmented_arcmin)
from engine.sphere import alt_az, alt_derivatives, dr_position

BODIES = ("sun", "moon")
LIMBS = ("lower", "upper")


class Observer:
    """Height of eye (m) above the sea and the weather at the observer."""
    __slots__ = ("eye_height_m", "temperature_c", "pressure_hpa")

    def __init__(self, eye_height_m=2.0, temperature_c=10.0, pressure_hpa=1010.0):
        self.eye_height_m = float(eye_height_m)
        self.temperature_c = float(temperature_c)
        self.pressure_hpa = float(pressure_hpa)

    def to_dict(self):
        return {"eye_height_m": self.eye_height_m, "temperature_c": self.temperature_c,
                "pressure_hpa": self.pressure_hpa}


class Track:
    """The ship's track: position at ``t0_us`` and a rhumb line at constant course
    (deg true) and speed over ground (kn).  ``known`` is True when the track is
    truth (a GPS track, as in a calibration session)."""
    __slots__ = ("t0_us", "lat_deg", "lon_deg", "course_deg", "speed_kn", "known")

    def __init__(self, t0_us, lat_deg, lon_deg, course_deg=0.0, speed_kn=0.0, known=False):
        self.t0_us = int(t0_us)
        self.lat_deg = float(lat_deg)
        self.lon_deg = float(lon_deg)
        self.course_deg = float(course_deg)
        self.speed_kn = float(speed_kn)
        self.known = bool(known)

    def position_at(self, t_us):
        """(lat_deg, lon_deg) of the track at ``t_us`` (rhumb line)."""
        return dr_position(self.lat_deg, self.lon_deg, self.course_deg, self.speed_kn, t_us - self.t0_us)

    def rebased(self, t_us, lat_deg=None, lon_deg=None):
        """The same course and speed, anchored at ``t_us`` (at the given position,
        or at this track's own position then)."""
        if lat_deg is None or lon_deg is None:
            lat_deg, lon_deg = self.position_at(t_us)
        return Track(t_us, lat_deg, lon_deg, self.course_deg, self.speed_kn, self.known)

    def to_dict(self):
        from engine.timescale import format_utc
        return {"utc": format_utc(self.t0_us), "lat_deg": self.lat_deg, "lon_deg": self.lon_deg,
                "course_deg": self.course_deg, "speed_kn": self.speed_kn, "known": self.known}


def body_rates(alm, body, t_us, dut1_us=0, pos=None):
    """(dGHA/dt, ddec/dt) in deg/s: from the almanac's position object when it
    carries ``gha_rate_deg_per_s`` and ``dec_rate_deg_per_s``, otherwise a
    central difference over +-1 s."""
    if pos is not None:
        g = getattr(pos, "gha_rate_deg_per_s", None)
        d = getattr(pos, "dec_rate_deg_per_s", None)
        if g is not None and d is not None:
            return g, d
    a = alm.position(body, t_us - US_PER_S, dut1_us)
    b = alm.position(body, t_us + US_PER_S, dut1_us)
    return norm180(b.gha_deg - a.gha_deg) / 2.0, (b.dec_deg - a.dec_deg) / 2.0


def _hc_zn(pos, lat_deg, lon_deg):
    lha = pos.gha_deg + lon_deg
    h, zn = alt_az(lat_deg, pos.dec_deg, lha)
    return h, zn, lha


def _corrections_zn(pos, lat_deg, lon_deg):
    if lat_deg is None or lon_deg is None:
        return None
    return _hc_zn(pos, lat_deg, lon_deg)[1]


def _ho_from_hs(pos, limb, hs_deg, observer, lat_deg, zn_deg):
    """Observed (geocentric) altitude of the centre from the sextant altitude of a limb."""
    ha = hs_deg - dip_arcmin(observer.eye_height_m) / 60.0
    h_limb = ha - refraction_arcmin(ha, observer.temperature_c, observer.pressure_hpa) / 60.0
    sign = limb_sign(limb)
    h_top = h_limb + sign * pos.sd_arcmin / 60.0
    for _ in range(3):   # the augmentation changes by < 0.001' per degree: converges at once
        h_top = h_limb + sign * moon_sd_augmented_arcmin(pos.sd_arcmin, pos.hp_arcmin, h_top) / 60.0
    return h_top + parallax_in_altitude_arcmin(pos.hp_arcmin, h_top, lat_deg, zn_deg) / 60.0


def _hs_from_ho(pos, limb, ho_deg, observer, lat_deg, zn_deg):
    """Inverse of ``_ho_from_hs``: sextant altitude of the limb for a centre altitude."""
    h_top = ho_deg - parallax_in_altitude_arcmin(pos.hp_arcmin, ho_deg, lat_deg, zn_deg) / 60.0
    for _ in range(4):   # PA changes by HP sin H per radian: contraction < 0.02
        h_top = ho_deg - parallax_in_altitude_arcmin(pos.hp_arcmin, h_top, lat_deg, zn_deg) / 60.0
    sign = limb_sign(limb)
    h_limb = h_top - sign * moon_sd_augmented_arcmin(pos.sd_arcmin, pos.hp_arcmin, h_top) / 60.0
    ha = h_limb + refraction_true_arcmin(h_limb, observer.temperature_c, observer.pressure_hpa) / 60.0
    return ha + dip_arcmin(observer.eye_height_m) / 60.0


def observed_altitude_deg(alm, body, limb, deviation_deg, t_us, observer, lat_deg=None, lon_deg=None,
                          dut1_us=0):
    """Ho (deg) of the body's centre for a contact of an image of deviation
    ``deviation_deg`` with the ``limb`` ('lower' or 'upper') at ``t_us``.

    Needs no position; with ``lat_deg``/``lon_deg`` the Earth's flattening
    term of the parallax is included (up to 0.2' for the Moon)."""
    pos = alm.position(body, t_us, dut1_us)
    return _ho_from_hs(pos, limb, deviation_deg, observer, lat_deg, _corrections_zn(pos, lat_deg, lon_deg))


def computed_alt_az(alm, body, t_us, lat_deg, lon_deg, dut1_us=0):
    """(Hc deg, Zn deg [0, 360), dHc/dt deg/s) of the body's centre at a position.

    The rate includes the body's own GHA and declination rates (not the ship's motion)."""
    pos = alm.position(body, t_us, dut1_us)
    h, zn, lha = _hc_zn(pos, lat_deg, lon_deg)
    return h, zn, _rate(alm, body, t_us, dut1_us, pos, lat_deg, lha, h, zn)


def _rate(alm, body, t_us, dut1_us, pos, lat_deg, lha, h, zn):
    gha_rate, dec_rate = body_rates(alm, body, t_us, dut1_us, pos)
    d_lha, d_dec = alt_derivatives(lat_deg, pos.dec_deg, lha, h, zn)
    return d_lha * gha_rate + d_dec * dec_rate


def sextant_altitude_deg(alm, body, limb, t_us, lat_deg, lon_deg, observer, dut1_us=0):
    """(Hs deg, dHs/dt deg/s): the sextant altitude of the ``limb`` that would be
    seen at ``t_us`` from a position (the inverse of the corrections).  A contact
    of an image with deviation D happens where Hs == D."""
    coop.tick()                     # every evaluation of the model is a safe point (engine/coop.py)
    pos = alm.position(body, t_us, dut1_us)
    h, zn, lha = _hc_zn(pos, lat_deg, lon_deg)
    hs = _hs_from_ho(pos, limb, h, observer, lat_deg, zn)
    rate = _rate(alm, body, t_us, dut1_us, pos, lat_deg, lha, h, zn)
    # dHs/dh = 1 / (1 - dR/dHa): refraction (falling with altitude) slows the apparent motion
    ha = hs - dip_arcmin(observer.eye_height_m) / 60.0
    r0 = refraction_arcmin(ha, observer.temperature_c, observer.pressure_hpa)
    r1 = refraction_arcmin(ha + 0.01, observer.temperature_c, observer.pressure_hpa)
    return hs, rate / (1.0 - (r1 - r0) / 0.6)


def contact_terms(alm, body, limb, deviation_deg, t_us, lat_deg, lon_deg, observer, dut1_us=0):
    """(Ho deg, Hc deg, Zn deg) of a contact seen from a position (one almanac call)."""
    coop.tick()
    pos = alm.position(body, t_us, dut1_us)
    h, zn, _ = _hc_zn(pos, lat_deg, lon_deg)
    return _ho_from_hs(pos, limb, deviation_deg, observer, lat_deg, zn), h, zn


def contact_residual_arcmin(alm, body, limb, deviation_deg, t_us, lat_deg, lon_deg, observer, dut1_us=0):
    """(intercept Ho - Hc in arcmin = nautical miles, positive toward the body; Zn deg)."""
    ho, hc, zn = contact_terms(alm, body, limb, deviation_deg, t_us, lat_deg, lon_deg, observer, dut1_us)
    return (ho - hc) * 60.0, zn
