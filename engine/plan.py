"""Contact schedule: when will each image of the Sun or Moon touch the horizon?

For the moving dead-reckoning position ``track.position_at(t)`` the sextant
altitude of a limb, ``model.sextant_altitude_deg`` (THE forward model, the one
the fix inverts), is compared with each image's deviation D: a contact is a
root of f(t) = Hs(t) - D.

Method.  The window is scanned with a fixed step (default 300 s).  At every
node the forward model gives Hs and its rate; an interval whose end rates
differ in sign holds a culmination (meridian passage or a turn of the Moon's
altitude), which is located by regula falsi on the rate and splits the
interval, so two contacts on either side of a culmination are never missed.
Each bracketing interval is then refined by the Illinois variant of regula
falsi (Dowell & Jarratt 1971) on integer-microsecond instants until the
bracket is shorter than ``tol_us`` (default 50 ms); the answer is the secant of
the final bracket's true values, within microseconds of the forward model's root.
Against DE421 + ERFA reference contact times the schedule agrees within 3.5 ms
(the forward model's own error, 0.002' of altitude, over the contact's rate).
Times stay integers and every float is an offset within one interval, as
single-precision boards need.

What is left out.  Images below ``min_deviation_deg`` (default 3 deg: the
refraction near the horizon varies by arcminutes: Young, "Sunset Science IV",
AJ 127, 3622, 2004) are not
scheduled; contacts under 10 deg are flagged ``low``.  Moon contacts within
``moon_min_elongation_deg`` (default 15 deg) of the Sun are skipped (a thin
crescent beside the Sun is not seen).  A contact while the Sun is below -6 deg
(civil twilight) is flagged ``dark``: the horizon may not be visible.
"""
from engine.angles import acosd, cosd, norm180, sind
from engine.constants import US_PER_S
from engine.model import BODIES, LIMBS, sextant_altitude_deg
from engine.sphere import alt_az

DEFAULT_STEP_S = 300
DEFAULT_TOL_US = 50000
DEFAULT_MIN_DEVIATION_DEG = 3.0
LOW_DEVIATION_DEG = 10.0
DARK_SUN_ALT_DEG = -6.0
MOON_MIN_ELONGATION_DEG = 15.0
MAX_WINDOW_US = 8 * 86400 * US_PER_S


class PlanError(ValueError):
    """A schedule request that cannot be served; the message names the argument."""


class PlannedContact:
    """One predicted contact."""
    __slots__ = ("t_us", "body", "limb", "image", "deviation_deg", "direction", "zn_deg",
                 "rate_arcmin_per_s", "lat_deg", "lon_deg", "low", "dark")

    def to_dict(self):
        from engine.timescale import format_utc
        return {"utc": format_utc(self.t_us, 2), "body": self.body, "limb": self.limb, "image": self.image,
                "direction": self.direction, "deviation_deg": self.deviation_deg,
                "zn_deg": round(self.zn_deg, 1), "rate_arcmin_per_s": round(self.rate_arcmin_per_s, 4),
                "lat_deg": round(self.lat_deg, 4), "lon_deg": round(self.lon_deg, 4),
                "low": self.low, "dark": self.dark}


def _hs(alm, body, limb, track, observer, t_us):
    lat, lon = track.position_at(t_us)
    return sextant_altitude_deg(alm, body, limb, t_us, lat, lon, observer)


def _check(images, bodies, limbs, t_from_us, t_to_us, step_s):
    for b in bodies:
        if b not in BODIES:
            raise PlanError("body: %r is not one of %s" % (b, ", ".join(BODIES)))
    for limb in limbs:
        if limb not in LIMBS:
            raise PlanError("limb: %r is not one of %s" % (limb, ", ".join(LIMBS)))
    if t_to_us <= t_from_us:
        raise PlanError("to: the window ends before it starts")
    if t_to_us - t_from_us > MAX_WINDOW_US:
        raise PlanError("to: window longer than 8 days")
    if not 10 <= step_s <= 3600:
        raise PlanError("step_s: %r not within 10..3600 s" % (step_s,))
    if not images:
        raise PlanError("images: none to schedule")


def _refine(fn, ta, fa, tb, fb, tol_us):
    """Illinois regula falsi for a root of fn in [ta, tb] with fa, fb of opposite signs.

    The Illinois halving (``fa``, ``fb``) only steers the next trial point; the answer is the
    secant of the bracket's TRUE values (``ga``, ``gb``), so it does not depend on which end was
    last halved: within ``tol**2 |f''| / (8 |f'|)`` of the root (microseconds for a 50 ms bracket)."""
    side = 0
    ga, gb = fa, fb
    for _ in range(60):
        if tb - ta <= tol_us:
            break
        span = tb - ta
        frac = fa / (fa - fb)
        if frac < 0.02:
            frac = 0.02
        elif frac > 0.98:
            frac = 0.98
        tm = ta + int(span * frac)
        if tm <= ta or tm >= tb:
            tm = ta + span // 2
        fm = fn(tm)
        if (fm > 0.0) == (fa > 0.0):
            ta, fa, ga = tm, fm, fm
            if side == -1:
                fb *= 0.5
            side = -1
        else:
            tb, fb, gb = tm, fm, fm
            if side == 1:
                fa *= 0.5
            side = 1
    if abs(ga) + abs(gb) == 0.0:
        return (ta + tb) // 2
    return ta + int((tb - ta) * (ga / (ga - gb)))


def _nodes(alm, body, limb, track, observer, t_from_us, t_to_us, step_us):
    """[(t_us, hs_deg, rate_deg_per_s)] at the scan nodes, with culminations inserted."""
    nodes = []
    t = t_from_us
    while True:
        hs, rate = _hs(alm, body, limb, track, observer, t)
        if nodes and (nodes[-1][2] > 0.0) != (rate > 0.0):
            nodes.append(_extremum(alm, body, limb, track, observer, nodes[-1], (t, hs, rate)))
        nodes.append((t, hs, rate))
        if t >= t_to_us:
            break
        t = min(t + step_us, t_to_us)
    return nodes


def _extremum(alm, body, limb, track, observer, a, b):
    def rate_at(t):
        return _hs(alm, body, limb, track, observer, t)[1]
    tm = _refine(rate_at, a[0], a[2], b[0], b[2], 2 * US_PER_S)
    hs, rate = _hs(alm, body, limb, track, observer, tm)
    return (tm, hs, rate)


def _sun_alt_deg(alm, t_us, lat, lon):
    p = alm.position("sun", t_us)
    return alt_az(lat, p.dec_deg, p.gha_deg + lon)[0]


def _elongation_deg(alm, t_us):
    s = alm.position("sun", t_us)
    m = alm.position("moon", t_us)
    c = sind(s.dec_deg) * sind(m.dec_deg) + cosd(s.dec_deg) * cosd(m.dec_deg) * cosd(norm180(s.gha_deg - m.gha_deg))
    return acosd(c)


def _make(alm, body, limb, image_id, dev, t_us, track, observer):
    lat, lon = track.position_at(t_us)
    p = alm.position(body, t_us)
    _h, zn = alt_az(lat, p.dec_deg, p.gha_deg + lon)
    _hs_deg, rate = sextant_altitude_deg(alm, body, limb, t_us, lat, lon, observer)
    c = PlannedContact()
    c.t_us = t_us
    c.body = body
    c.limb = limb
    c.image = image_id
    c.deviation_deg = dev
    c.direction = "rising" if rate > 0.0 else "setting"
    c.zn_deg = zn
    c.rate_arcmin_per_s = rate * 60.0
    c.lat_deg = lat
    c.lon_deg = lon
    c.low = dev < LOW_DEVIATION_DEG
    c.dark = body != "sun" and _sun_alt_deg(alm, t_us, lat, lon) < DARK_SUN_ALT_DEG
    return c


def schedule(alm, images, track, observer, t_from_us, t_to_us, bodies=BODIES, limbs=LIMBS,
             step_s=DEFAULT_STEP_S, tol_us=DEFAULT_TOL_US, min_deviation_deg=DEFAULT_MIN_DEVIATION_DEG,
             moon_min_elongation_deg=MOON_MIN_ELONGATION_DEG, stop_after=None):
    """Every contact of an image with the horizon in [t_from_us, t_to_us], in time order.

    ``images``: ``[(id, deviation_deg, ...)]`` (a session's ``images`` or
    ``Instrument.image_tuples()``); ``track``: ``model.Track``; ``observer``:
    ``model.Observer``.  Returns a list of ``PlannedContact``.  With
    ``stop_after`` the scan stops once that many contacts are found in a scan
    interval (used by ``next_contact``)."""
    _check(images, bodies, limbs, t_from_us, t_to_us, step_s)
    usable = [(im[0], im[1]) for im in images if im[1] >= min_deviation_deg]
    out = []
    if not usable:
        return out
    step_us = int(step_s) * US_PER_S
    for body in bodies:
        for limb in limbs:
            out.extend(_scan(alm, body, limb, usable, track, observer, t_from_us, t_to_us, step_us, tol_us,
                             moon_min_elongation_deg))
    out.sort(key=lambda c: (c.t_us, c.body, c.limb, c.image))
    if stop_after:
        out = out[:stop_after]
    return out


def _scan(alm, body, limb, usable, track, observer, t_from_us, t_to_us, step_us, tol_us, moon_min_elong):
    out = []
    nodes = _nodes(alm, body, limb, track, observer, t_from_us, t_to_us, step_us)
    for k in range(1, len(nodes)):
        ta, ha, _ = nodes[k - 1]
        tb, hb, _ = nodes[k]
        for image_id, dev in usable:
            fa, fb = ha - dev, hb - dev
            if fb == 0.0:
                t = tb                   # roots are taken in (ta, tb]
            elif (fa > 0.0) == (fb > 0.0) or fa == 0.0:
                continue
            else:
                def fn(t, dev=dev):
                    return _hs(alm, body, limb, track, observer, t)[0] - dev
                t = _refine(fn, ta, fa, tb, fb, tol_us)
            if body == "moon" and _elongation_deg(alm, t) < moon_min_elong:
                continue
            out.append(_make(alm, body, limb, image_id, dev, t, track, observer))
    return out


def next_contact(alm, images, track, observer, t_us, horizon_s=6 * 3600, bodies=BODIES, limbs=("lower",),
                 step_s=DEFAULT_STEP_S, min_deviation_deg=DEFAULT_MIN_DEVIATION_DEG):
    """The first contact after ``t_us`` within ``horizon_s`` seconds, or None.

    Scans in chunks of one hour so the device stops early; the same code and
    model as ``schedule``."""
    chunk_us = 3600 * US_PER_S
    end = t_us + int(horizon_s) * US_PER_S
    t = t_us
    while t < end:
        t2 = min(t + chunk_us, end)
        found = schedule(alm, images, track, observer, t, t2, bodies, limbs, step_s,
                         min_deviation_deg=min_deviation_deg)
        found = [c for c in found if c.t_us > t_us]
        if found:
            return found[0]
        t = t2
    return None


def to_json_dict(contacts, track=None, observer=None, extra=None):
    """The ``limbclock plan --json`` dict: ``{"contacts": [...]}`` plus context."""
    d = {"format": "limbclock-plan/1", "contacts": [c.to_dict() for c in contacts]}
    if track is not None:
        d["track"] = track.to_dict()
    if observer is not None:
        d["observer"] = observer.to_dict()
    if extra:
        d.update(extra)
    return d
