"""Doubts: what the navigator must be told before trusting a fix.

``assess(session, alm, result, ident=None, ...)`` returns the list that the
``limbclock-fix/1`` dict carries as ``"doubts"``: one ``{"code", "message"}``
per reason to doubt the fix, empty when the fix is consistent.  The codes:

* ``far_from_dr`` -- the fix lies beyond the DR's stated uncertainty: squared
  Mahalanobis distance of fix - DR above chi2_2(0.999) = 13.8, with the
  covariance sigma_DR^2 I (per axis; ``dr_sigma_nm`` of the session, default
  30 nmi, 1 nmi on a known track) plus the fix's own (from its 95 % ellipse).
* ``likely_slip`` -- with the fix far from the DR, a slip that explains the
  data: the session is reduced again (same images) with the DR's latitude or
  longitude sign flipped, the contact times moved by a day or by the whole
  hours that the longitude difference suggests (a time zone), or the DR's time
  moved by the hours its along-track difference suggests; a slip explains the
  data when that fix lies within the (new) DR's uncertainty and fits as well
  (unit weight within 25 % + 0.1, no fewer contacts used).  The first slip
  that explains the data is named (in that order); at most ``MAX_SLIP_SOLVES``
  reductions.
* ``dr_not_explaining`` -- identification found that the DR does not explain the
  contacts and searched the whole globe (a cold start).
* ``candidates`` -- more than one position fits the contacts (identification):
  every one is listed.
* ``identification_ambiguous`` -- contacts whose image could not be told; or no
  contact could be identified with confidence and the fix rests on the most
  probable assignment.
* ``many_rejected`` -- a quarter or more of the usable contacts rejected (more than
  a third is no fix at all: the fix's rejection limit, ``NoConsistentFix``).
* ``residuals_high`` -- the residuals are far beyond the error model:
  s0^2 dof above the chi-square quantile at 0.999 (Wilson and Hilferty 1931).
* ``long_run`` -- a running fix over ``LONG_RUN_H`` hours or more on a DR track
  whose course and speed are assumed (track not known, no
  ``track.velocity_sigma_kn`` stated by the navigator).

``NoConsistentFix`` (a ``FixError``) is what ``engine.reduce_session`` raises
when no consistent fix exists: the fix says ``consistent: False`` (its
rejection limit stopped), or no position explains the contacts and too few are
left for a fix.  Its message is the one line the command line prints.
"""
import math

from engine.angles import cosd, fmt_lat, fmt_lon, norm180, sind
from engine.fix import FixError
from engine.sphere import distance_nm, offset_nm
from engine.timescale import parse_utc

MAHALANOBIS2 = 13.8                # chi2_2(0.999)
CHI2_95_2 = 5.991464547107979      # the fix's ellipse is k^2 >= chi2_2(0.95) times its covariance
LONG_RUN_H = 4.0
MAX_SLIP_SOLVES = 8
DEFAULT_DR_SIGMA_NM = 30.0
US_PER_H = 3600 * 1000000


class NoConsistentFix(FixError):
    """No consistent fix exists: the message says why, in one line."""


def dr_sigma_of(session):
    """sigma_DR (nmi, per axis) of a session: ``dr_sigma_nm`` at the top level, else 30; 1 on a
    known track.  A malformed value raises a ``ValueError`` naming the key."""
    v = session.extra.get("dr_sigma_nm", None)
    if v is None:
        return 1.0 if session.track.known else DEFAULT_DR_SIGMA_NM
    from engine.limits import RANGES
    lo, hi = RANGES["dr_sigma_nm"]              # the session reader's range (docs/formats.md)
    if isinstance(v, bool) or not isinstance(v, (int, float)) or not lo <= v <= hi:
        raise ValueError("session.dr_sigma_nm: must be a number of nautical miles within %g..%g, got %r" % (lo, hi, v))
    return float(v)


def _doubt(code, message):
    return {"code": code, "message": message}


def _fix_cov(result):
    """Covariance (nn, ne, ee) of the fix, nmi^2, from its 95 % ellipse (a 1-sigma ellipse at least as
    large as the fix's own: the ellipse's scale is k^2 >= chi2_2(0.95))."""
    e = result["ellipse_95"]
    a2 = e["major_nm"] ** 2 / CHI2_95_2
    b2 = e["minor_nm"] ** 2 / CHI2_95_2
    c, s = cosd(e["major_axis_deg"]), sind(e["major_axis_deg"])
    return a2 * c * c + b2 * s * s, (a2 - b2) * c * s, a2 * s * s + b2 * c * c


def dr_mahalanobis2(result, sigma_nm):
    """Squared Mahalanobis distance of the fix from its DR (see the module docstring)."""
    dn, de = offset_nm(result["dr"]["lat_deg"], result["dr"]["lon_deg"], result["lat_deg"], result["lon_deg"])
    nn, ne, ee = _fix_cov(result)
    s2 = sigma_nm * sigma_nm
    a, b, c = nn + s2, ne, ee + s2
    det = a * c - b * b
    return (c * dn * dn - 2.0 * b * dn * de + a * de * de) / det


def _dof(result):
    d = result.get("dof")
    if isinstance(d, int) and not isinstance(d, bool):
        return d
    return result["contacts_used"] - (3 if result.get("deviation_offset_estimated") else 2)


def _usable(result):
    """Contacts that could be used (not void, identified, not a repeat)."""
    n = 0
    for c in result["contacts"]:
        if c.get("ho_deg") is not None:
            n += 1
    return n


def consistency(result, ident=None):
    """None when a consistent fix exists, else the one-line reason (``NoConsistentFix``)."""
    if result.get("consistent") is False:
        # the fix's rejection limit stopped it (engine/fix.py): more than a third would be blunders
        return ("no consistent fix: %d of %d contacts misfit; more than a third would be rejected as blunders, "
                "so no position is given" % (len(result["rejected_blunders"]) + len(result["rejected_time_blunders"])
                                             + 1, result["contacts_usable"]))
    return None


def assess(session, alm, result, ident=None, at_us=None, deviation_offset="auto", diagnose=True):
    """The doubts about ``result`` (the fix of ``session``; ``ident``: what
    ``engine.reduce_session`` keeps of identification when it ran: ``candidates``,
    ``dr_explains``, ``ambiguous`` (contact indices), ``fallback`` (the fix rests on the most
    probable assignment rather than on confident images) and its probability ``best_p``)."""
    doubts = []
    sigma_dr = dr_sigma_of(session)
    if ident is not None:
        doubts.extend(_identification(ident))
    d2 = dr_mahalanobis2(result, sigma_dr)
    if d2 > MAHALANOBIS2:
        dist = distance_nm(result["lat_deg"], result["lon_deg"], result["dr"]["lat_deg"], result["dr"]["lon_deg"])
        doubts.append(_doubt("far_from_dr", "the fix is %.0f nmi from the DR, far beyond the DR's stated uncertainty "
                                            "(%.0f nmi a side; %.1f sigma): check the DR, the date and the times"
                                 % (dist, sigma_dr, math.sqrt(d2))))
        if diagnose:
            doubts.extend(_slips(session, alm, result, sigma_dr, at_us, deviation_offset))
    usable = _usable(result)
    rejected = usable - result["contacts_used"]
    if usable and 4 * rejected >= usable:       # (more than a third: no fix, see consistency)
        doubts.append(_doubt("many_rejected", "%d of %d usable contacts rejected: the fix rests on %d"
                             % (rejected, usable, result["contacts_used"])))
    dof = _dof(result)
    if dof >= 1:
        chi2 = result["sigma0"] ** 2 * dof
        q = chi2_quantile(dof)
        if chi2 > q:
            doubts.append(_doubt("residuals_high", "the residuals are far beyond the error model (unit weight s0 %.2f "
                                                   "with %d degrees of freedom; 0.999 limit %.2f): a systematic "
                                                   "error (instrument, times, track) or a wrong identification"
                                 % (result["sigma0"], dof, math.sqrt(q / dof))))
    doubts.extend(_long_run(session, result))
    return doubts


def chi2_quantile(dof, p=0.999):
    """Chi-square quantile (Wilson and Hilferty 1931; ``engine.identify.chi2_quantile``)."""
    from engine.identify import chi2_quantile as q
    return q(dof, p)


def _identification(ident):
    out = []
    cands = ident.get("candidates") or []
    if not ident.get("dr_explains", True):
        where = ""
        if cands:
            c = cands[0]
            where = ": they fit best at %s %s, %.0f nmi from the DR" % (fmt_lat(c["lat_deg"]), fmt_lon(c["lon_deg"]),
                                                                      c["dr_distance_nm"])
        out.append(_doubt("dr_not_explaining", "the DR does not explain the contacts; the images were found by "
                                               "searching the whole globe%s" % where))
    if len(cands) > 1:
        parts = ["%s %s (p %.2f, %.0f nmi from the DR)" % (fmt_lat(c["lat_deg"]), fmt_lon(c["lon_deg"]),
                                                          c["probability"], c["dr_distance_nm"]) for c in cands]
        out.append(_doubt("candidates", "%d positions fit the contacts at %s: %s" % (len(cands), cands[0]["utc"],
                                                                                    "; ".join(parts))))
    amb = ident["ambiguous"]
    if ident.get("fallback"):
        out.append(_doubt("identification_ambiguous",
                          "no image could be identified with confidence: the fix rests on the most probable "
                          "assignment (p %.2f); take more sights, or label the images" % ident["best_p"]))
    elif amb:
        out.append(_doubt("identification_ambiguous", "the image of contact%s %s could not be told; left out of the fix"
                          % ("s" if len(amb) > 1 else "", ", ".join(str(i) for i in amb))))
    return out


def _long_run(session, result):
    tr = session.track
    if tr.known or "velocity_sigma_kn" in session.track_extra:
        return []
    ts = [parse_utc(c["utc"]) for c in result["contacts"] if c["used"]]
    if len(ts) < 2:
        return []
    run_h = (max(ts) - min(ts)) / 3.6e9
    if run_h < LONG_RUN_H:
        return []
    return [_doubt("long_run", "a running fix over %.1f h: it assumes the DR's course %03.0f deg and speed %.1f kn held "
                               "throughout; an unmodelled current of 1 kn would move it about %.0f nmi"
                   % (run_h, tr.course_deg, tr.speed_kn, 0.5 * run_h))]


# ----------------------------------------------------------------------------- slips

def _slip_sessions(session, result):
    """(description, transform of the session dict, contact shift us) of the slips worth trying,
    most likely first."""
    out = []
    tr = session.track
    dr_lat, dr_lon = result["dr"]["lat_deg"], result["dr"]["lon_deg"]
    if abs(tr.lat_deg) >= 0.5:
        out.append(("the DR's latitude sign (%s, not %s)" % (fmt_lat(-tr.lat_deg), fmt_lat(tr.lat_deg)),
                    _set_track("lat_deg", -tr.lat_deg), 0))
    if 0.5 <= abs(tr.lon_deg) <= 179.5:
        out.append(("the DR's longitude sign (%s, not %s)" % (fmt_lon(-tr.lon_deg), fmt_lon(tr.lon_deg)),
                    _set_track("lon_deg", -tr.lon_deg), 0))
    # contact times k hours late put the fix 15 k deg of longitude west of the ship
    k0 = int(round(norm180(dr_lon - result["lon_deg"]) / 15.0))
    for k in (k0, k0 - 1, k0 + 1):
        if k != 0 and abs(k) <= 14:
            out.append(("the contact times, %d h %s (a time zone?)" % (abs(k), "late" if k > 0 else "early"),
                        None, -k * US_PER_H))
    for k in (1, -1):
        out.append(("the contact times, a day %s" % ("late" if k > 0 else "early"), None, -k * 24 * US_PER_H))
    if tr.speed_kn >= 1.0:
        dn, de = offset_nm(dr_lat, dr_lon, result["lat_deg"], result["lon_deg"])
        along = dn * cosd(tr.course_deg) + de * sind(tr.course_deg)
        k = int(round(along / tr.speed_kn))
        if k != 0 and abs(k) <= 36:
            out.append(("the DR's time, %d h %s" % (abs(k), "early" if k < 0 else "late"),
                        _shift_track(k * US_PER_H), 0))
    return out


def _set_track(key, value):
    def f(d):
        d["track"][key] = value
    return f


def _shift_track(dt_us):
    def f(d):
        from engine.timescale import format_utc
        d["track"]["utc"] = format_utc(parse_utc(d["track"]["utc"]) - dt_us)
    return f


def _slips(session, alm, result, sigma_dr, at_us, deviation_offset):
    from engine.fix import solve_fix
    from engine.session import session_from_dict
    from engine.timescale import format_utc
    s0 = result["sigma0"]
    used = result["contacts_used"]
    for what, transform, shift_us in _slip_sessions(session, result)[:MAX_SLIP_SOLVES]:
        d = session.to_dict()
        if transform is not None:
            transform(d)
        if shift_us:
            for c in d["contacts"]:
                c["utc"] = format_utc(parse_utc(c["utc"]) + shift_us, 6)
        try:
            s2 = session_from_dict(d, alm)
            d = None
            r2 = solve_fix(s2, alm, None if at_us is None else at_us + shift_us, deviation_offset)
        except ValueError:
            continue
        if r2.get("consistent") is False or r2["contacts_used"] < used:
            continue
        if r2["sigma0"] > 1.25 * s0 + 0.1:
            continue
        if dr_mahalanobis2(r2, sigma_dr) > MAHALANOBIS2:
            continue
        dist = distance_nm(r2["lat_deg"], r2["lon_deg"], r2["dr"]["lat_deg"], r2["dr"]["lon_deg"])
        return [_doubt("likely_slip", "likely slip in %s: read so, the contacts fit as well (s0 %.2f against %.2f) "
                                      "at %s %s, %.0f nmi from the DR"
                       % (what, r2["sigma0"], s0, fmt_lat(r2["lat_deg"]), fmt_lon(r2["lon_deg"]), dist))]
    return []
