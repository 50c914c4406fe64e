"""Seeded errors for the noise-free DE421 + ERFA sessions of ``vectors/coverage_sessions.json``:
the Monte Carlo of the fix's 95 % ellipse (``tests/test_fix_coverage.py``, 200 sessions;
``bench/bench_coverage.py``, 600).

The errors are drawn from the a-priori error model the fix states (``engine/fix.py`` docstring,
DEVELOPERS.md "The fix"), with its default sizes, so a fix that is honest about its own model puts
the truth inside its 95 % ellipse 95 % of the time (a little more: the ellipse is scaled by
max(chi2, s0^2 2F), never below chi2):

* timing scatter, independent per contact: N(0, 0.25 s);
* the personal equation, not calibrated (the session gives no ``reaction_delay_s``): one time bias
  per session, N(0, 0.2 s);
* the deviation of each image: N(0, 1'), shared by every contact of that image;
* a dip anomaly N(0, 1') and a refraction scale error N(0, 5 %) times the contact's refraction,
  shared by every contact of the session;
* judging the touch: N(0, 0.3') of altitude, independent per contact;
* the DR velocity off by N(0, 0.3 kn) per component (the session's course and speed; the truth's are
  in the vector file), and the DR position 20-60 nmi off in a random direction.

An altitude error e (arcmin) moves a contact by e / rate in time (rate = dHs/dt of the reference, in
the vector file): linearised, the contact comes when the observed altitude Hs + e reaches D.  Contact
times are written to the microsecond.
"""
import json
import math

from engine.sphere import move_nm, offset_nm
from engine.timescale import format_utc

SIGMA_TIME_S = 0.25
SIGMA_BIAS_S = 0.2
SIGMA_IMAGE_ARCMIN = 1.0
SIGMA_DIP_ARCMIN = 1.0
SIGMA_KAPPA = 0.05
SIGMA_CONTACT_ARCMIN = 0.3
SIGMA_VELOCITY_KN = 0.3


def session(header, scn, rnd, blunder=None):
    """(``limbclock-session/1`` text, epoch_us, truth (lat, lon) at the epoch) of scenario ``scn`` with
    errors drawn from ``rnd`` (``random.Random``).  ``blunder``: optional (contact index, seconds)
    added to that contact's time after the errors."""
    images = header["instrument"]["images"]
    e_img = {im["id"]: rnd.gauss(0.0, SIGMA_IMAGE_ARCMIN) for im in images}
    e_dip = rnd.gauss(0.0, SIGMA_DIP_ARCMIN)
    kappa = rnd.gauss(0.0, SIGMA_KAPPA)
    bias_s = rnd.gauss(0.0, SIGMA_BIAS_S)
    contacts = []
    for k, (t_us, body, limb, image, rate, refr, _zn) in enumerate(scn["contacts"]):
        e = e_img[image] + e_dip + kappa * refr + rnd.gauss(0.0, SIGMA_CONTACT_ARCMIN)
        dt_s = e / rate + bias_s + rnd.gauss(0.0, SIGMA_TIME_S)
        if blunder is not None and blunder[0] == k:
            dt_s += blunder[1]
        contacts.append({"utc": format_utc(t_us + int(round(dt_s * 1e6)), 6), "body": body, "limb": limb,
                         "image": image})
    truth = scn["truth"]
    vn = truth["speed_kn"] * math.cos(math.radians(truth["course_deg"])) + rnd.gauss(0.0, SIGMA_VELOCITY_KN)
    ve = truth["speed_kn"] * math.sin(math.radians(truth["course_deg"])) + rnd.gauss(0.0, SIGMA_VELOCITY_KN)
    bearing, dist = rnd.uniform(0.0, 360.0), rnd.uniform(20.0, 60.0)
    lat, lon = move_nm(truth["lat_deg"], truth["lon_deg"], dist * math.cos(math.radians(bearing)),
                       dist * math.sin(math.radians(bearing)))
    doc = {"format": "limbclock-session/1", "observer": scn["observer"],
           "instrument": {"images": [{"id": im["id"], "deviation_deg": im["deviation_deg"]} for im in images]},
           "track": {"utc": truth["utc"], "lat_deg": lat, "lon_deg": lon,
                     "course_deg": math.degrees(math.atan2(ve, vn)) % 360.0, "speed_kn": math.hypot(vn, ve)},
           "contacts": contacts}
    return json.dumps(doc), scn["epoch_us"], tuple(scn["truth_at_epoch"])


def radius(fix, truth_lat, truth_lon):
    """Where the truth lies in the fix's 95 % ellipse: 1 on the ellipse, < 1 inside (Mahalanobis)."""
    n, e = offset_nm(fix["lat_deg"], fix["lon_deg"], truth_lat, truth_lon)
    el = fix["ellipse_95"]
    a = math.radians(el["major_axis_deg"])
    along = n * math.cos(a) + e * math.sin(a)
    across = -n * math.sin(a) + e * math.cos(a)
    return math.hypot(along / el["major_nm"], across / max(el["minor_nm"], 1e-9))


def binomial_band(n, p=0.95, z=3.0):
    """(low, high) of the fraction of n Bernoulli(p) trials within z standard deviations."""
    s = math.sqrt(p * (1.0 - p) / n)
    return p - z * s, p + z * s
