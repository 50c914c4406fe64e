"""The fix: iterated least squares over all timed contacts of a session.

Each contact is a line of position (Marcq St Hilaire): the intercept
p = Ho - Hc (arcmin = nmi, toward the body) at the track's position at the
contact's instant.  The unknowns are the north and east offsets (nmi) of the
track at the fix epoch (course and speed held: every line is carried along the
rhumb line to the epoch), and optionally a common offset b (arcmin) of every
image's deviation (index error, dip anomaly, personal equation in altitude).
Linearised: p_i = cos Zn_i dN + sin Zn_i dE - b; each iteration recomputes Hc,
Zn and Ho at the new position (Gauss-Newton; steps longer than 60 nmi are
shortened), as in the Nautical Almanac's "position from intercept and azimuth
by calculation" generalised to weighted least squares (Metcalf & Metcalf, "On
the overdetermined celestial fix", Navigation 38(1), 1991 [from memory]).

A-priori error model of the intercepts (arcmin).  The largest errors are shared
between contacts, so the covariance is S = D + U U^T: a diagonal D (what each
contact has alone) plus a few shared terms, the columns of U (each a shared
error's sigma times how it moves each intercept):

* timing (diagonal): (rate x sigma_time)^2, sigma_time^2 = reaction scatter
  (default 0.25 s)^2 + the stamp's own ``sigma_s``^2, rate = dHs/dt;
* the contact itself (diagonal): judging the instant a limb touches a sea
  horizon in a seaway, with the horizon's short-term refraction flicker,
  scatters each contact by ``sigma_contact_arcmin`` of altitude (default 0.3';
  common practice for a careful observer [from memory]; the session's
  ``observer.contact_sigma_arcmin`` overrides it);
* yaw (diagonal; instrument turned off the body's azimuth by psi, sigma
  ``observer.yaw_sigma_deg``, default 0: the observer swings the arc): the
  contact comes late by a one-sided loss (``engine.instrument.yaw_loss_arcmin``);
  its mean is taken off the deviation of nominal images (images with
  ``"source": "calibrated"`` already hold it), its scatter is independent per
  contact (``engine.instrument.yaw_sigma_arcmin``);
* dip anomaly (shared by all contacts; default 1.0'): dip follows the air-sea
  temperature difference (Tschudin, "Refraction near the horizon: an empirical
  approach", Applied Optics 55(12), 3104, 2016 [title from memory]); the size
  is [from memory], matched to the Monte Carlo of bench/bench_fix.py;
* refraction anomaly: one scale error kappa (default 0.05) of the whole
  atmosphere, column kappa R_i (low-altitude refraction varies by several per
  cent: Sampson, Lozowski, Peterson, Low & Roberts, "Variability of the
  astronomical refraction of the setting Sun", PASP 115, 1256, 2003 [title from
  memory]; kappa 0.02-0.05 is common practice);
* personal equation left after calibration (``reaction_delay_sigma_s``, default
  0.2 s when no ``reaction_delay_s`` is given, else 0.05 s): one time bias for
  all contacts, column sigma rate_i;
* image deviation: sigma of the image (``sigma_arcmin``, default 1.0'), shared
  by every contact of that image (one column per image, 1 where the contact
  was timed on it);
* the DR's course and speed (current, leeway, log error): a velocity error of
  ``velocity_sigma_kn`` (default 0.3 kn per component, [from memory] for a
  small vessel's unknown current; ``track.velocity_sigma_kn`` of the session;
  0 for a known track) moves the line of a contact taken dt before the epoch
  by dv dt along Zn: two columns sigma_v dt_i cos Zn_i, sigma_v dt_i sin Zn_i.

Solution in that structured form, never with an n x n matrix: each shared
error is one more unknown y_j with the prior y_j ~ N(0, 1) (its sigma is in its
column), so p = A x + U y + e with e ~ N(0, D).  Eliminating y from the normal
equations of (x, y) gives exactly the generalised least squares of x with S
(Henderson, "Best linear unbiased estimation and prediction under a selection
model", Biometrics 31, 423, 1975; the same algebra as Woodbury, "Inverting
modified matrices", Princeton SRG Memorandum 42, 1950): N = A^T S^-1 A, A^T S^-1 p
and p^T S^-1 p come out of a k x k system.  The image columns are disjoint
(each contact is on one image), so their block is diagonal and is eliminated
first, in O(n m) for m = shared terms + unknowns; what is left is at most 8 x 8.
Time O(n m^2) per iteration, memory O(n) columns + O(images x m).

Error ellipse (95 %): covariance N^-1 of the two position unknowns (the
offset, when estimated, is marginalised), scaled by k^2 = max(chi2_2(0.95),
s0^2 2F(2, n-u; 0.95)): the a-priori model when the residuals agree with it,
the a-posteriori unit weight s0 (s0^2 = p^T S^-1 p / (n - u)) with the F
quantile when they are larger (Mikhail, "Observations and Least Squares", 1976
[from memory]; F(2, v) has the closed form P = 1 - (1 + 2x/v)^(-v/2)).

Contacts not used at all: void ones, duplicates (``Contact.dup_of`` set by the
session reader: "duplicate of contact N", never counted as a blunder), those
without an image, and time blunders: contacts separated from the bulk of the
session by more than ``TIME_GAP_H`` hours with no contact in between (a date
or time typed wrong; at most a third of the contacts, else none is called one).

Blunders: first a robust pass (Huber, "Robust estimation of a location
parameter", Ann. Math. Statist. 35, 73, 1964: an M-estimator, by iteratively
reweighted least squares with the diagonal of the model) drops gross blunders,
one at a time, beyond 5 robust sigma (scale 1.4826 x the median of |p|/sigma,
the normal-consistent median absolute deviation: Hampel, "The influence curve
and its role in robust estimation", JASA 69, 383, 1974 [from memory]; a
mislabelled image is off by a whole image spacing, tens of arcminutes, and
would drag a plain least-squares fix far along a weak direction).  Then
Baarda's data snooping (Baarda, "A testing procedure for use in geodetic
networks", Netherlands Geodetic Commission, Publications on Geodesy 2(5),
1968): w_i = (S^-1 e)_i / sqrt((S^-1 - S^-1 A N^-1 A^T S^-1)_ii); the contact with
the largest |w| > 3 is dropped and the fix recomputed, until none is left or no
redundancy remains.  In the structured form (S^-1 - S^-1 A N^-1 A^T S^-1)_ii =
1/D_i - b_i^T M^-1 b_i / D_i^2 with b_i the contact's row of [U A] and M the
normal matrix of (y, x): O(m^2) a contact.  The rejection stops at
a third (``MAX_REJECTED_DIV``) of the usable contacts, counting time
blunders: a fix from fewer is not given; the result says ``consistent: False``
and ``engine.reduce_session`` refuses it with one line.  A rejected contact
that fits within 3 sigma when read as another image of the instrument (or the
other limb) is reported as probably mislabelled.

Fix epoch: ``at_us``, or the stamp of the last contact USED (chosen again after
the rejections, and the fix solved again there when it moved).

The deviation offset (``deviation_offset="auto"``) is estimated whenever the
geometry determines it, judged on the geometry and the a-priori model before any
residual is seen (not on a test of the residuals): estimated, the position's
a-priori mean square error is tr (N^-1)_xx; held at zero it is tr N_xx^-1 plus the
square of the shift that a common deviation error of ``sigma_offset_arcmin``
(default 2': common deviation errors of 1-3' come from dip anomalies in a strong
air-sea temperature difference, a steady way of judging the touch, a knocked
instrument [from memory]) would cause, N_xx^-1 N_xb per arcmin.  The offset is
estimated when the first is the smaller, with at least four contacts.  That
needs contacts on both sides of the meridian (rising and setting: the
equal-altitude case), and a model that lets the contacts tell the offset from
the position: over a long run the DR's velocity error and the nominal images'
own errors blur it (bench/bench_fix.py measures both rules).  Otherwise it is
held at zero, the dip term carrying a common offset, and the result says how
far a common error of 1' moves the fix (``deviation_offset_effect_nm``).
Estimated, it is reported with its sigma (a priori, or a posteriori when
s0 > 1).

Memory (the same code reduces on the timer): MicroPython ignores
``__slots__`` and boxes every float, so an object per contact with a dozen
numbers costs about 900 bytes on its 64-bit port: the working data of the
usable contacts ("lines", numbered in the session's order) are parallel
array('d') columns, allocated at their full length before the model is first
evaluated (appends would leave a trail of holes in a fragmented heap); a set of
lines is a list of indices; the normal equations' buffers are short array('d')
blocks allocated once (lists when the numbers are not plain floats, so
tests/test_fix_float32.py's float32 emulation stays float32).  Nothing grows
faster than the number of contacts.  The report (a 17-key dict per contact, its
largest part) is built after the working data are dropped: its lists and utc
texts first, then the entries one after the other, then their numbers.

Convergence: a step below 2 m, or below 0.001 sigma, or steps that stop
shrinking below 0.03 sigma (the rounding floor in single precision;
tests/test_fix_float32.py).  A last step below ``LINEAR_STEP_NM`` moves the
intercepts as the linear model says instead of evaluating the model again (the
neglected terms are a few per cent of 4 m); the robust pass stops at 20 m.

Result (``limbclock-fix/1``; DEVELOPERS.md "The fix" lists every key):
``format, utc, lat_deg, lon_deg, ellipse_95 {major_nm, minor_nm,
major_axis_deg}, contacts_used, rejected, images, deviation_offset_arcmin,
deviation_offset_estimated, deviation_offset_sigma_arcmin,
deviation_offset_effect_nm, sigma0, dof,
unknowns, consistent, contacts_usable, rejection_limit, rejected_blunders,
rejected_time_blunders, rejected_duplicates, epoch_contact, dr, iterations,
warnings, contacts``; ``engine.reduce_session`` adds ``doubts`` (``engine/doubts.py``)
and, when identification ran, ``identification``.
"""
import math
from array import array as _array

from engine import coop
from engine.angles import cosd, sind, atan2d
from engine.constants import US_PER_S
from engine.corrections import refraction_arcmin, dip_arcmin
from engine.instrument import invert, yaw_sigma_arcmin
from engine.model import contact_terms, sextant_altitude_deg
from engine.sphere import dr_position, move_nm
from engine.timescale import format_utc

FORMAT = "limbclock-fix/1"
CHI2_2_95 = 5.991464547107979      # chi-square, 2 degrees of freedom, P = 0.95: -2 ln 0.05
REJECT_W = 3.0                     # |w| above which the worst contact is dropped (common practice)
SNOOP_BATCH = 200                  # data snooping drops one contact at a time, n // 200 at a time beyond 400
MAX_REJECTED_DIV = 3               # at most a third of the usable contacts rejected as blunders (common practice)
TIME_GAP_H = 12.0                  # a contact this far (h) from the bulk, with none between, is a time blunder
MAX_STEP_NM = 60.0
MAX_ITERATIONS = 40
MAX_LAT_DEG = 89.0
CONVERGED_NM = 1e-3                # last step below 2 m ...
HUBER_CONVERGED_NM = 0.01          # (the robust pass stops below 20 m)
LINEAR_STEP_NM = 0.002             # a last step below 4 m moves the intercepts linearly (no new evaluation)
CONVERGED_QUAD = 1e-6              # ... or below 0.001 sigma (dx' N dx)
STALLED_QUAD = 1e-3                # ... or no longer shrinking below 0.03 sigma (rounding floor)
HUBER_K = 1.5                      # Huber's constant, in a-priori sigmas (Huber 1964; common practice)
PRESCREEN_K = 5.0                  # robust first pass: gross blunders beyond 5 robust sigma are dropped
DEFAULTS = {"sigma_time_s": 0.25, "sigma_image_arcmin": 1.0, "kappa": 0.05, "sigma_dip_arcmin": 1.0,
            "reaction_delay_sigma_s": 0.2, "yaw_sigma_deg": 0.0, "velocity_sigma_kn": 0.3,
            "sigma_contact_arcmin": 0.3, "sigma_offset_arcmin": 2.0}   # sigma_offset: the offset's guard (above)
_TICK_EVERY = 16                   # coop.tick() once per this many lines in loops that skip the model


class FixError(ValueError):
    """No fix can be computed (too few usable contacts, degenerate geometry)."""


def f2_quantile(v, p=0.95):
    """Quantile x of the F(2, v) distribution: P = 1 - (1 + 2x/v)^(-v/2)."""
    return 0.5 * v * ((1.0 - p) ** (-2.0 / v) - 1.0)


def ellipse_k2(s0, dof, p=0.95):
    """Scale k^2 of the covariance for probability p (see the module docstring)."""
    k2 = -2.0 * math.log(1.0 - p)
    if dof >= 1:
        k2 = max(k2, s0 * s0 * 2.0 * f2_quantile(dof, p))
    return k2


def ellipse(cnn, cne, cee, k2):
    """(major_nm, minor_nm, major_axis_deg in [0, 180)) of the ellipse k^2 of a
    north/east covariance (nmi^2)."""
    half_tr = 0.5 * (cnn + cee)
    rad = math.sqrt(max(0.0, (0.5 * (cnn - cee)) ** 2 + cne * cne))
    lmax, lmin = half_tr + rad, max(0.0, half_tr - rad)
    ang = 0.5 * atan2d(2.0 * cne, cnn - cee)   # from north toward east
    if ang < 0.0:
        ang += 180.0
    if ang >= 180.0:
        ang -= 180.0
    return math.sqrt(k2 * lmax), math.sqrt(k2 * lmin), ang


def _num_extra(d, key, default):
    v = d.get(key, None)
    if (isinstance(v, int) or isinstance(v, float)) and not isinstance(v, bool) and v == v and v - v == 0:
        return float(v)
    return default


def _median(xs):
    v = sorted(xs)
    n = len(v)
    return v[n // 2] if n % 2 else 0.5 * (v[n // 2 - 1] + v[n // 2])


def _zeros(n):
    """array('d') of n zeros."""
    return _array('d', [0.0] * n)


def _time_blunders(ts):
    """{k: reason} for the instants ``ts[k]`` (int us) far outside the session's time span: the
    instants are split where two successive ones are more than ``TIME_GAP_H`` apart; the largest
    group is the session and the others are time blunders, provided they are at most a third of
    the contacts and the largest group is the only one of its size (otherwise none is named)."""
    n = len(ts)
    if n < 3:
        return {}
    order = sorted(range(n), key=lambda k: ts[k])
    gap_us = int(TIME_GAP_H * 3600) * US_PER_S
    groups = [[order[0]]]
    for a, b in zip(order, order[1:]):
        if ts[b] - ts[a] > gap_us:
            groups.append([])
        groups[-1].append(b)
    if len(groups) == 1:
        return {}
    main = max(groups, key=len)
    if MAX_REJECTED_DIV * (n - len(main)) > n or sum(1 for g in groups if len(g) == len(main)) > 1:
        return {}
    mt = sorted(ts[k] for k in main)
    med = mt[len(mt) // 2] if len(mt) % 2 else (mt[len(mt) // 2 - 1] + mt[len(mt) // 2]) // 2
    hour_us = 3600 * US_PER_S
    out = {}
    for g in groups:
        if g is main:
            continue
        for k in g:
            dh = (ts[k] - med) / 3.6e9
            # a whole number of days off puts it back among the others (to within an hour): a date slip
            days = int(abs(dh) / 24.0 + 0.5)
            back = ts[k] - (days if dh > 0 else -days) * 24 * hour_us
            hint = "a date typed wrong?" if days >= 1 and mt[0] - hour_us <= back <= mt[-1] + hour_us \
                else "a time typed wrong?"
            if dh > 0:
                where = "%.1f h after the last of the other contacts" % ((ts[k] - mt[-1]) / 3.6e9)
            else:
                where = "%.1f h before the first of the other contacts" % ((mt[0] - ts[k]) / 3.6e9)
            out[k] = "time blunder: %s (%s)" % (where, hint)
    return out


_NO_GROUP = 0xFFFF                 # a line whose image has no shared term (sigma 0)


def _quad_form(Minv, h, n, base):
    """base + h' Minv h over the first ``n`` entries of ``h`` (``Minv``: n rows)."""
    quad = base
    for a in range(n):
        ma = Minv[a]
        s = 0.0
        for b in range(n):
            s += ma[b] * h[b]
        quad += h[a] * s
    return quad


def solve_fix(session, alm, at_us=None, deviation_offset="auto", dut1_us=None, options=None):
    """Fix of a validated Session (``engine.session``) with almanac ``alm``.

    ``at_us``: fix epoch (default: the stamp of the last contact used).
    ``deviation_offset``: "auto" (estimate when the geometry determines it), True, False.
    ``dut1_us``: UT1 - UTC (default: the session's ``dut1_s``, else 0).
    ``options``: overrides of ``DEFAULTS`` (error model).
    Returns the ``limbclock-fix/1`` dict (module docstring, DEVELOPERS.md), also when the
    rejection limit stopped the blunder tests (``consistent`` False).  Raises FixError when
    no fix can be computed at all."""
    if dut1_us is None:
        dut1_us = int(round(_num_extra(session.extra, "dut1_s", 0.0) * 1e6))
    opt = dict(DEFAULTS)
    if "yaw_sigma_deg" in session.observer_extra:
        opt["yaw_sigma_deg"] = session.observer_extra["yaw_sigma_deg"]
    if "contact_sigma_arcmin" in session.observer_extra:
        opt["sigma_contact_arcmin"] = session.observer_extra["contact_sigma_arcmin"]
    if options:
        opt.update(options)
    contacts = session.contacts
    tr = session.track
    obs = session.observer
    inst_x = session.instrument_extra
    delay_s = _num_extra(inst_x, "reaction_delay_s", None)
    if delay_s is None:
        delay_s = 0.0
        tb_sigma = opt["reaction_delay_sigma_s"]
    else:
        tb_sigma = _num_extra(inst_x, "reaction_delay_sigma_s", 0.05)
    delay_us = int(round(delay_s * US_PER_S))
    warnings = []
    if abs(delay_s) > 0.0:
        warnings.append("contact times corrected for a reaction delay of %.2f s" % delay_s)

    # contacts never used: void, duplicates, unidentified, then time blunders
    reasons = {}
    duplicates = []
    cand = []
    for c in contacts:
        dup = getattr(c, "dup_of", None)
        if c.void:
            reasons[c.index] = "void"
        elif dup is not None:
            reasons[c.index] = "duplicate of contact %d" % dup
            duplicates.append(c.index)
        elif c.image is None:
            reasons[c.index] = "image not identified"
        else:
            cand.append(c)
    tb = _time_blunders([c.t_us for c in cand])
    time_blunders = []
    lc = []                                     # the contact of each line
    for k, c in enumerate(cand):
        if k in tb:
            reasons[c.index] = tb[k]
            time_blunders.append(c.index)
        else:
            lc.append(c)
    cand = tb = None
    n_usable = len(lc) + len(time_blunders)
    if at_us is not None:
        epoch, epoch_contact = at_us, None
    elif lc:
        last = max(lc, key=lambda c: c.t_us)
        epoch, epoch_contact = last.t_us, last.index
    else:
        epoch, epoch_contact = max(c.t_us for c in contacts), None
    dr_lat, dr_lon = tr.position_at(epoch)

    # the usable contacts ("lines"), numbered 0..n-1 in the session's order: their working data are
    # parallel columns (unboxed array('d'): 8 bytes a number, where an object per line with a
    # dozen float attributes took about 900 bytes of a board's heap)
    # every column is allocated here at its full length, before any model evaluation (grown by appends
    # they would leave a trail of holes in a board's heap)
    n_lines = len(lc)
    t_l = [0] * n_lines                         # instant (int us), reaction delay removed
    dev_l, rate_l, refr_l, var_l = _zeros(n_lines), _zeros(n_lines), _zeros(n_lines), _zeros(n_lines)
    vn_l, ve_l, sigma_l, zn0_l = _zeros(n_lines), _zeros(n_lines), _zeros(n_lines), _zeros(n_lines)
    grp_l = _array('H', bytes(2 * n_lines))     # the line's image term (index into sig_g), or _NO_GROUP
    # azimuth and intercept (arcmin) at the last evaluated position: array('d'), or lists when the
    # model's results are another number type (see the Memory paragraph)
    zn_l = _zeros(n_lines) if type(cosd(1.0)) is float else [0.0] * n_lines
    p_l = _zeros(n_lines) if type(cosd(1.0)) is float else [0.0] * n_lines
    groups = {}
    sig_g = []
    sig_img = {}
    dev_of = {}
    for iid, dev, s in session.images:
        sig_img[iid] = s if s is not None else opt["sigma_image_arcmin"]
        dev_of[iid] = dev
    for k, c in enumerate(lc):
        t_us = c.t_us - delay_us if delay_us else c.t_us
        dev = dev_of[c.image]
        calibrated = session.image_extra.get(c.image, {}).get("source") == "calibrated"
        yaw_mean, yaw_rms = yaw_sigma_arcmin(dev, opt["yaw_sigma_deg"])
        lat, lon = dr_position(dr_lat, dr_lon, tr.course_deg, tr.speed_kn, t_us - epoch)
        _, rate = sextant_altitude_deg(alm, c.body, c.limb, t_us, lat, lon, obs, dut1_us)
        rate = rate * 60.0                                            # arcmin/s
        ha = dev - dip_arcmin(obs.eye_height_m) / 60.0
        st2 = opt["sigma_time_s"] ** 2 + c.sigma_s ** 2
        t_l[k] = t_us
        dev_l[k] = dev if calibrated else dev - yaw_mean / 60.0
        rate_l[k] = rate
        refr_l[k] = refraction_arcmin(ha, obs.temperature_c, obs.pressure_hpa)
        var_l[k] = rate * rate * st2 + yaw_rms * yaw_rms + opt["sigma_contact_arcmin"] ** 2
        sg = sig_img[c.image]
        if sg > 0.0:
            if c.image not in groups:
                groups[c.image] = len(sig_g)
                sig_g.append(sg)
            grp_l[k] = groups[c.image]
        else:
            grp_l[k] = _NO_GROUP
    n_groups = len(sig_g)
    groups = None
    for v in var_l:
        if not v > 0.0:
            raise FixError("the error model's covariance is not positive definite (a contact without scatter)")

    # the shared terms: sigma of the dip anomaly, of the refraction scale, of the time bias, of the velocity
    s_dip = opt["sigma_dip_arcmin"]
    s_kap = opt["kappa"]
    s_tb = tb_sigma
    s_off = opt["sigma_offset_arcmin"]
    s_vel = 0.0 if tr.known else _num_extra(session.track_extra, "velocity_sigma_kn", opt["velocity_sigma_kn"])
    q_full = (s_dip != 0.0) + (s_kap != 0.0) + (s_tb != 0.0) + 2 * (s_vel != 0.0)

    def set_epoch_terms():
        """The velocity columns (LOP shift per knot of velocity error, dt before the epoch) and
        each line's a-priori sigma (the diagonal of S), for the current epoch."""
        for i in range(n_lines):
            dt_h = (t_l[i] - epoch) / 3.6e9
            vn_l[i] = cosd(zn0_l[i]) * dt_h
            ve_l[i] = sind(zn0_l[i]) * dt_h
            g = grp_l[i]
            v = var_l[i] + s_dip * s_dip + (s_kap * refr_l[i]) ** 2 + (s_tb * rate_l[i]) ** 2 + \
                s_vel * s_vel * (vn_l[i] ** 2 + ve_l[i] ** 2)
            if g != _NO_GROUP:
                v += sig_g[g] * sig_g[g]
            sigma_l[i] = math.sqrt(v)
            if i % _TICK_EVERY == 0:
                coop.tick()

    evaluated_at = [None]                       # the point of the last evaluation (``use`` only shrinks)

    def evaluate(use, lat_e, lon_e, bias):
        point = (lat_e, lon_e, bias, epoch)
        if evaluated_at[0] == point:
            return
        evaluated_at[0] = point
        for i in use:
            c = lc[i]
            lat, lon = dr_position(lat_e, lon_e, tr.course_deg, tr.speed_kn, t_l[i] - epoch)
            ho, hc, zn = contact_terms(alm, c.body, c.limb, dev_l[i] + bias / 60.0, t_l[i], lat, lon, obs, dut1_us)
            zn_l[i] = zn
            p_l[i] = (ho - hc) * 60.0

    def row(i, with_bias, full, h):
        """The line's row of [U A] into ``h``: the shared terms (``full``), then cos Zn, sin Zn (, -1);
        returns its length."""
        m = 0
        if full:
            if s_dip != 0.0:
                h[m] = s_dip
                m += 1
            if s_kap != 0.0:
                h[m] = s_kap * refr_l[i]
                m += 1
            if s_tb != 0.0:
                h[m] = s_tb * rate_l[i]
                m += 1
            if s_vel != 0.0:
                h[m] = s_vel * vn_l[i]
                h[m + 1] = s_vel * ve_l[i]
                m += 2
        z = zn_l[i]
        h[m] = cosd(z)
        h[m + 1] = sind(z)
        if with_bias:
            h[m + 2] = -1.0
            return m + 3
        return m + 2

    # K (rows), r, the image accumulators (one short array per image) and a row: allocated once, here,
    # before the iterations fragment the heap, and in short blocks (a board's heap may hold no long one);
    # unboxed array('d') on a board, lists for another number type (float32 emulation: Memory paragraph)
    m_max = q_full + 3
    mk = _zeros if type(cosd(1.0)) is float else (lambda k: [0.0] * k)
    K_rows = [mk(m_max) for _ in range(m_max)]
    r_buf = mk(m_max)
    acc_g = [mk(m_max + 2) for _ in range(n_groups)]
    h_buf = mk(m_max)
    w_buf = mk(n_lines)                         # the w of each line
    mk = None

    def build(use, with_bias, huber=False):
        """Normal equations of the position (and offset) with the shared terms eliminated:
        (N, A^T S^-1 p, p^T S^-1 p, parts kept for the w test).  ``huber``: no shared term, the
        diagonal variances Huber-reweighted, sigma^2 max(1, |p|/(k sigma)) (Huber 1964, in the
        iteratively reweighted form), for the robust first pass.  K (m rows), r and the image
        accumulators are the buffers above, overwritten by the next call."""
        q = 0 if huber else q_full
        u = 3 if with_bias else 2
        m = q + u
        n_g = 0 if huber else n_groups
        K, r, h = K_rows, r_buf, h_buf
        for a in range(m):
            Ka = K[a]
            for b in range(m):
                Ka[b] = 0.0
            r[a] = 0.0
        for g in range(n_g):
            acc = acc_g[g]
            for j in range(m + 2):
                acc[j] = 0.0
        ptp = 0.0
        for k, i in enumerate(use):
            if k % _TICK_EVERY == 0:
                coop.tick()
            row(i, with_bias, not huber, h)
            p = p_l[i]
            if huber:
                s = sigma_l[i]
                d = s * s * max(1.0, abs(p) / (HUBER_K * s))
            else:
                d = var_l[i]
            w = 1.0 / d
            pw = p * w
            for a in range(m):
                ha = h[a] * w
                Ka = K[a]
                for b in range(a, m):
                    Ka[b] += ha * h[b]
                r[a] += h[a] * pw
            ptp += p * pw
            if n_g:
                g = grp_l[i]
                if g != _NO_GROUP:
                    acc = acc_g[g]
                    acc[0] += w
                    for a in range(m):
                        acc[1 + a] += h[a] * w
                    acc[1 + m] += pw
        for a in range(m):
            for b in range(a):
                K[a][b] = K[b][a]
        for a in range(q):
            K[a][a] += 1.0                      # the prior of each shared term: N(0, 1) in its scaled column
        # the image terms: a diagonal block, eliminated first; each group's (d_g, c_g, r_g) stays in acc_g
        for g in range(n_g):
            acc = acc_g[g]
            if acc[0] == 0.0:
                continue
            sg = sig_g[g]
            dg = 1.0 + sg * sg * acc[0]
            acc[0] = dg
            for a in range(m + 1):
                acc[1 + a] *= sg
            rg = acc[1 + m]
            for a in range(m):
                ca = acc[1 + a] / dg
                Ka = K[a]
                for b in range(m):
                    Ka[b] -= ca * acc[1 + b]
                r[a] -= ca * rg
            ptp -= rg * rg / dg
        # then the other shared terms: N = Kxx - Kxs Ks^-1 Ksx
        if q:
            Ksinv = invert([[K[a][c] for c in range(q)] for a in range(q)])
            if Ksinv is None:
                raise FixError("the error model's covariance is not positive definite")
            ys = [sum(Ksinv[a][c] * r[c] for c in range(q)) for a in range(q)]
            X = [[sum(Ksinv[a][c] * K[c][q + b] for c in range(q)) for b in range(u)] for a in range(q)]
            N = [[K[q + a][q + b] - sum(K[q + a][c] * X[c][b] for c in range(q)) for b in range(u)]
                 for a in range(u)]
            rhs = [r[q + a] - sum(K[q + a][c] * ys[c] for c in range(q)) for a in range(u)]
            ptp -= sum(r[a] * ys[a] for a in range(q))
            X = None
        else:
            Ksinv, ys = None, []
            N = [[K[a][b] for b in range(m)] for a in range(m)]
            rhs = [r[a] for a in range(m)]
        return N, rhs, ptp, (q, m, Ksinv, ys)

    def w_test(use, with_bias, parts):
        """Baarda's w of every line in use: [(k, w)] of the largest |w| beyond ``REJECT_W``, worst first,
        at most one for fewer than 2 SNOOP_BATCH lines and len(use) // SNOOP_BATCH beyond."""
        q, m, Ksinv, ys = parts
        Kinv = invert([[K_rows[a][b] for b in range(m)] for a in range(m)])
        if Kinv is None:
            return []
        h = h_buf
        batch = max(1, len(use) // SNOOP_BATCH)
        w_l = w_buf
        for k, i in enumerate(use):
            if k % _TICK_EVERY == 0:
                coop.tick()
            row(i, with_bias, True, h)
            d = var_l[i]
            pred = 0.0                          # b_i' y: the shared terms' share of the intercept
            for a in range(q):
                pred += h[a] * ys[a]
            base = 0.0
            g = grp_l[i]
            if n_groups and g != _NO_GROUP:
                acc = acc_g[g]
                dg = acc[0]
                sg = sig_g[g]
                yg = acc[1 + m]
                for a in range(q):
                    yg -= acc[1 + a] * ys[a]
                pred += sg * yg / dg
                f = sg / dg
                for a in range(m):
                    h[a] -= acc[1 + a] * f
                base = sg * f
            quad = _quad_form(Kinv, h, m, base)
            quad_s = _quad_form(Ksinv, h, q, base)
            sinv_ii = 1.0 / d - quad_s / (d * d)           # (S^-1)_ii
            m_ii = 1.0 / d - quad / (d * d)                # (S^-1 - S^-1 A N^-1 A' S^-1)_ii
            if m_ii <= 1e-9 * sinv_ii:
                w_l[k] = 0.0                    # no redundancy for this line: it cannot be tested
                continue
            w_l[k] = (p_l[i] - pred) / d / math.sqrt(m_ii)      # (S^-1 p)_i / sqrt(m_ii)
        n = len(use)
        top = []                                # (k, w), |w| decreasing
        for k in range(n):
            w = w_l[k]
            if abs(w) > REJECT_W and (len(top) < batch or abs(w) > abs(top[-1][1])):
                j = len(top)
                while j > 0 and abs(w) > abs(top[j - 1][1]):
                    j -= 1
                top.insert(j, (k, w))
                if len(top) > batch:
                    top.pop()
        return top

    def solve(use, lat_e, lon_e, bias, with_bias, huber=False):
        """Gauss-Newton to convergence; with ``huber`` iteratively reweighted
        (diagonal model, Huber weights) for the robust first pass."""
        its = 0
        converged = False
        prev_quad = 1e30
        for its in range(1, MAX_ITERATIONS + 1):
            evaluate(use, lat_e, lon_e, bias)
            N, rhs, _, _ = build(use, with_bias, huber)
            Ninv = invert(N)
            if Ninv is None:
                raise FixError("the lines of position do not cross (azimuths too alike): no fix")
            dx = [sum(a * b for a, b in zip(row_, rhs)) for row_ in Ninv]
            step = math.sqrt(dx[0] ** 2 + dx[1] ** 2)
            if step > MAX_STEP_NM:
                dx = [v * MAX_STEP_NM / step for v in dx]
            lat_e, lon_e = move_nm(lat_e, lon_e, dx[0], dx[1])
            if lat_e > MAX_LAT_DEG or lat_e < -MAX_LAT_DEG:
                raise FixError("the fix ran off toward a pole: the contacts do not fit the track")
            if with_bias:
                bias += dx[2]
            if huber and step < HUBER_CONVERGED_NM and (not with_bias or abs(dx[2]) < HUBER_CONVERGED_NM):
                # the robust pass only screens gross blunders (5 robust sigma, tens of arcminutes): its last
                # intercepts, a few metres from here, are good enough, and the full model starts from here
                return lat_e, lon_e, bias, None, None, None, its
            # converged: a step below 2 m, or below 1/1000 of the fix's own sigma in every direction
            # (dx' N dx < 1e-6), or steps that no longer shrink once below 3 % of sigma: the rounding
            # floor of a single-precision board, where the model's own noise keeps the steps jittering
            quad = sum(dx[r] * N[r][c] * dx[c] for r in range(len(dx)) for c in range(len(dx)))
            if (step < CONVERGED_NM and (not with_bias or abs(dx[2]) < CONVERGED_NM)) or quad < CONVERGED_QUAD \
                    or (quad < STALLED_QUAD and quad > 0.25 * prev_quad):
                converged = True
                break
            prev_quad = quad
        if not converged and not huber:
            warnings.append("the fix did not converge in %d iterations" % MAX_ITERATIONS)
        if converged and step < LINEAR_STEP_NM and (not with_bias or abs(dx[2]) < LINEAR_STEP_NM):
            # the last step is a few metres: the intercepts move as the linear model says (the neglected terms,
            # the lines' own curvature and dHo/dD - 1, are a few per cent of the step: below 1e-4 nmi), so
            # the model is not evaluated again for it
            for k, i in enumerate(use):
                if k % _TICK_EVERY == 0:
                    coop.tick()
                z = zn_l[i]
                v = p_l[i] - (cosd(z) * dx[0] + sind(z) * dx[1])
                p_l[i] = v + dx[2] if with_bias else v
            evaluated_at[0] = (lat_e, lon_e, bias, epoch)
        evaluate(use, lat_e, lon_e, bias)
        N, rhs, ptp, parts = build(use, with_bias, huber)
        Ninv = invert(N)
        if Ninv is None:
            raise FixError("the lines of position do not cross (azimuths too alike): no fix")
        return lat_e, lon_e, bias, Ninv, ptp, parts, its

    offset_note = [None]                        # (rms free, rms held, nmi per arcmin held) of the last decision

    def offset_wanted(use, lat_e, lon_e, bias):
        """Whether to estimate the offset with the lines ``use`` (see the module docstring)."""
        if deviation_offset is False or len(use) < 4:
            return False
        if deviation_offset is True:
            return True
        evaluate(use, lat_e, lon_e, bias)
        N = build(use, True)[0]
        held = invert([N[0][:2], N[1][:2]])
        if held is None:
            offset_note[0] = None
            return False
        # a-priori mean square position error (nmi^2): estimated, tr (N^-1)_xx; held at 0, tr N_xx^-1 plus
        # the square of the shift a common deviation error of sigma_offset_arcmin causes, N_xx^-1 N_xb per arcmin
        var_held = held[0][0] + held[1][1]
        bn = held[0][0] * N[0][2] + held[0][1] * N[1][2]
        be = held[1][0] * N[0][2] + held[1][1] * N[1][2]
        per_arcmin2 = bn * bn + be * be
        Ninv = invert(N)
        # an offset the position's unknowns explain to within 1e-4 is not determined at all (and past single
        # precision's reach)
        if Ninv is None or not 0.0 < Ninv[2][2] * N[2][2] < 1e4 or not Ninv[0][0] + Ninv[1][1] > 0.0:
            offset_note[0] = (None, math.sqrt(var_held), math.sqrt(per_arcmin2))
            return False
        var_free = Ninv[0][0] + Ninv[1][1]
        offset_note[0] = (math.sqrt(var_free), math.sqrt(var_held), math.sqrt(per_arcmin2))
        return var_free < var_held + per_arcmin2 * s_off * s_off

    use = list(range(n_lines))                  # the lines in use (indices)
    if len(use) < 2:
        raise FixError("%d usable contact(s): a fix needs at least two lines of position" % len(use))
    evaluate(use, dr_lat, dr_lon, 0.0)          # the azimuths at the DR, for the velocity columns
    for i in range(n_lines):
        zn0_l[i] = zn_l[i]
    set_epoch_terms()
    rejected_w = {}                             # line -> its rejection statistic
    n_time = len(time_blunders)
    consistent = True

    def may_reject():
        """One more blunder keeps the rejected contacts within a third of the usable ones."""
        return MAX_REJECTED_DIV * (n_time + len(rejected_w) + 1) <= n_usable

    lat_e, lon_e, bias = dr_lat, dr_lon, 0.0
    iterations = 0
    # robust first pass: Huber IRLS, dropping gross blunders (> PRESCREEN_K robust sigma) one at a time
    while len(use) > 3:
        with_bias = offset_wanted(use, lat_e, lon_e, bias)
        lat_e, lon_e, bias, _, _, _, its = solve(use, lat_e, lon_e, bias if with_bias else 0.0, with_bias, True)
        iterations += its
        ratios = [abs(p_l[i]) / sigma_l[i] for i in use]
        scale = max(1.0, 1.4826 * _median(ratios))
        worst = max(range(len(use)), key=lambda i: ratios[i])
        if ratios[worst] <= PRESCREEN_K * scale:
            break
        if not may_reject():
            consistent = False
            break
        bad = use.pop(worst)
        rejected_w[bad] = ratios[worst] / scale
    ratios = None
    # least squares with the full error model, then Baarda's data snooping; again at the last
    # used contact's instant when that is not the epoch any more
    for _ in range(3):
        while True:
            with_bias = offset_wanted(use, lat_e, lon_e, bias)
            if not with_bias:
                bias = 0.0
            lat_e, lon_e, bias, Ninv, ptp, parts, its = solve(use, lat_e, lon_e, bias, with_bias)
            iterations += its
            n, u = len(use), len(Ninv)
            dof = n - u
            s0 = math.sqrt(max(0.0, ptp) / dof) if dof > 0 else 0.0      # p' S^-1 p
            if dof < 1 or not consistent:
                break
            top = w_test(use, with_bias, parts)
            parts = None
            if not top or n - 1 < 2:
                break
            if not may_reject():
                consistent = False
                break
            drop = []
            for k, w in top:
                if len(drop) and (not may_reject() or n - len(drop) - 1 < u + 1):
                    break
                drop.append(k)
                rejected_w[use[k]] = w
            for k in sorted(drop, reverse=True):
                use.pop(k)
            top = drop = None
        parts = None
        if at_us is not None:
            break
        last = max(use, key=lambda i: t_l[i])
        t_last = t_l[last] + delay_us
        if t_last == epoch:
            break
        lat_e, lon_e = dr_position(lat_e, lon_e, tr.course_deg, tr.speed_kn, t_last - epoch)
        epoch, epoch_contact = t_last, lc[last].index
        dr_lat, dr_lon = tr.position_at(epoch)
        set_epoch_terms()

    cnn, cne, cee = Ninv[0][0], Ninv[0][1], Ninv[1][1]
    k2 = ellipse_k2(s0, dof)
    major, minor, axis = ellipse(cnn, cne, cee, k2)
    # the offset's sigma as an estimate of the whole common offset (dip anomaly included, which the
    # estimated offset absorbs: (N^-1)_bb carries the dip term's variance on top)
    offset_sigma = math.sqrt(max(0.0, Ninv[2][2] - s_dip * s_dip)) * max(1.0, s0) if u == 3 else None
    if not consistent:
        warnings.append("inconsistent: %d of %d usable contacts would have to be rejected as blunders (at most a "
                        "third may be): no consistent fix" % (n_time + len(rejected_w) + 1, n_usable))
    if dof < 1:
        warnings.append("no redundancy (%d contacts for %d unknowns): the ellipse rests on the a-priori "
                        "error model alone and blunders cannot be detected" % (len(use), u))
    offset_effect = None
    if u == 2:
        # how far a common deviation error of 1' moves the fix held at zero: N_xx^-1 N_xb (a priori)
        N3 = build(use, True)[0]
        held = invert([N3[0][:2], N3[1][:2]])
        if held is not None:
            offset_effect = math.sqrt((held[0][0] * N3[0][2] + held[0][1] * N3[1][2]) ** 2 +
                                      (held[1][0] * N3[0][2] + held[1][1] * N3[1][2]) ** 2)
        N3 = held = None
    note = offset_note[0]
    if deviation_offset == "auto" and u == 2 and len(use) >= 4:
        if note is None or note[0] is None:
            warnings.append("deviation offset not estimable from these azimuths: held at 0 (contacts on both sides "
                            "of the meridian make it estimable)")
        else:
            both = min(rate_l[i] for i in use) < 0.0 < max(rate_l[i] for i in use)
            warnings.append("deviation offset not estimable from these contacts: held at 0 (estimated, the fix would "
                            "scatter %.1f nmi rms against %.1f held; a common deviation error of 1' moves it %.1f nmi; "
                            "%s)" % (note[0], note[1], note[2],
                                     "calibrated images or a better-known DR velocity would make it estimable" if both
                                     else "contacts on both sides of the meridian make it estimable"))
    spread = _azimuth_spread([zn_l[i] for i in use])
    if spread < 30.0:
        warnings.append("poor geometry: the lines of position span only %.0f deg of azimuth" % spread)
    run_h = (max(t_l[i] for i in use) - min(t_l[i] for i in use)) / 3.6e9
    if run_h > 0.5 and not tr.known:
        warnings.append("running fix over %.1f h: it assumes the DR course %.0f deg and speed %.1f kn held"
                        % (run_h, tr.course_deg, tr.speed_kn))

    # per-contact report: the working data go first (a board's heap holds one or the other)
    Ninv = parts = None
    zn_l = p_l = zn0_l = vn_l = ve_l = grp_l = None
    K_rows = r_buf = acc_g = h_buf = w_buf = None
    out_contacts = [None] * len(contacts)       # the report's lists at their full length first (the
    images = [None] * len(contacts)             # entries' places hold their utc text meanwhile)
    for j, c in enumerate(contacts):
        images[j] = c.image
        out_contacts[j] = format_utc(c.t_us)
    refr_l = var_l = None                       # (not needed by the report)
    used = _zeros(n_lines)                      # 1.0 for a line in use
    for i in use:
        used[i] = 1.0
    contacts_used = len(use)
    use = None
    # first every entry, one after the other (its dict is the largest block), then the numbers of every
    # line (rejected ones too) at the fix and its intercept at the DR, filled in: the model's garbage then
    # falls between small numbers, not between the entries
    rejected = []
    k = 0                                       # the next line (lines are in the contacts' order)
    for j, c in enumerate(contacts):
        line = k < n_lines and lc[k] is c
        out_contacts[j] = {"index": c.index, "utc": out_contacts[j], "body": c.body, "limb": c.limb,
                           "image": c.image, "deviation_deg": dev_of[c.image] if line else None, "ho_deg": None,
                           "hc_deg": None, "zn_deg": None, "intercept_nm": None, "residual_nm": None,
                           "sigma_nm": sigma_l[k] if line else None, "used": line and used[k] != 0.0,
                           "reason": reasons.get(c.index),
                           "direction": ("rising" if rate_l[k] >= 0.0 else "setting") if line else None,
                           "suggest": None}
        if not (line and used[k] != 0.0):
            rejected.append(c.index)
        if line:
            k += 1
    k = 0
    for j, c in enumerate(contacts):
        if not (k < n_lines and lc[k] is c):
            continue
        entry = out_contacts[j]
        t_us = t_l[k]
        dev = dev_l[k] + bias / 60.0
        lat, lon = dr_position(lat_e, lon_e, tr.course_deg, tr.speed_kn, t_us - epoch)
        ho, hc, zn = contact_terms(alm, c.body, c.limb, dev, t_us, lat, lon, obs, dut1_us)
        dlat, dlon = dr_position(dr_lat, dr_lon, tr.course_deg, tr.speed_kn, t_us - epoch)
        ho_dr, hc_dr, _ = contact_terms(alm, c.body, c.limb, dev, t_us, dlat, dlon, obs, dut1_us)
        p = (ho - hc) * 60.0
        entry["ho_deg"] = ho
        entry["hc_deg"] = hc
        entry["zn_deg"] = zn
        entry["intercept_nm"] = (ho_dr - hc_dr) * 60.0
        entry["residual_nm"] = p
        if k in rejected_w:
            entry["reason"], entry["suggest"] = _reject_reason(session, alm, c, t_us, dev_l[k], lat, lon, p,
                                                               sigma_l[k], rejected_w[k], bias, obs, dut1_us, opt)
        k += 1

    blunders = sorted([lc[j].index for j in rejected_w])
    if blunders:
        warnings.append("%d contact(s) rejected as blunders: %s" % (len(blunders), ", ".join(str(i) for i in blunders)))
    if time_blunders:
        warnings.append("%d contact(s) rejected as time blunders (far outside the session's time span): %s"
                        % (len(time_blunders), ", ".join(str(i) for i in time_blunders)))
    if duplicates:
        warnings.append("%d duplicate contact(s) not used: %s"
                        % (len(duplicates), ", ".join(str(i) for i in duplicates)))
    return {"format": FORMAT, "utc": format_utc(epoch), "lat_deg": lat_e, "lon_deg": lon_e,
            "ellipse_95": {"major_nm": major, "minor_nm": minor, "major_axis_deg": axis},
            "contacts_used": contacts_used, "rejected": rejected, "images": images,
            "deviation_offset_arcmin": bias if u == 3 else None, "deviation_offset_estimated": u == 3,
            "deviation_offset_sigma_arcmin": offset_sigma, "deviation_offset_effect_nm": offset_effect,
            "sigma0": s0, "dof": dof, "unknowns": u, "consistent": consistent, "contacts_usable": n_usable,
            "rejection_limit": n_usable // MAX_REJECTED_DIV, "rejected_blunders": blunders,
            "rejected_time_blunders": time_blunders, "rejected_duplicates": duplicates,
            "epoch_contact": epoch_contact,
            "dr": {"lat_deg": dr_lat, "lon_deg": dr_lon}, "iterations": iterations,
            "warnings": warnings, "contacts": out_contacts}


def _azimuth_spread(zns):
    """Spread (deg, 0..90) of azimuths as lines: the largest angle between two LOP directions.
    O(n log n): the directions mod 180 sorted, each paired with the one nearest 90 deg beyond it."""
    a = sorted(z % 180.0 for z in zns)
    n = len(a)
    best = 0.0
    j = 0
    for i in range(n):
        if i % 256 == 0:
            coop.tick()
        target = a[i] + 90.0
        if j < i:
            j = i
        while j + 1 < n and a[j + 1] <= target:
            j += 1
        for k in (j, j + 1):
            if i <= k < n:
                d = a[k] - a[i]
                d = min(d, 180.0 - d)
                if d > best:
                    best = d
    return best


def _reject_reason(session, alm, c, t_us, dev_deg, lat, lon, p, sigma_nm, w, bias, obs, dut1_us, opt):
    """Why contact ``c`` (instant ``t_us`` less the reaction delay, deviation ``dev_deg`` with the yaw
    mean removed, at ``lat``, ``lon`` with residual ``p`` and sigma ``sigma_nm`` at the fix) was
    rejected, with the mislabelled-image diagnosis: (text, suggestion) where suggestion is None,
    {"image": id} or {"limb": "lower"|"upper"}."""
    text = "residual %+.1f' = %.1f sigma" % (p, abs(w))
    best = None
    for iid, dev, _ in session.images:
        if iid == c.image:
            continue
        d = dev if session.image_extra.get(iid, {}).get("source") == "calibrated" else \
            dev - yaw_sigma_arcmin(dev, opt["yaw_sigma_deg"])[0] / 60.0
        ho, hc, _ = contact_terms(alm, c.body, c.limb, d + bias / 60.0, t_us, lat, lon, obs, dut1_us)
        r = (ho - hc) * 60.0
        if abs(r) <= 3.0 * sigma_nm and (best is None or abs(r) < abs(best[1])):
            best = (iid, r, dev)
    if best is not None:
        spacing = (session.deviation_of(c.image) - best[2]) * 60.0
        text += "; %+.1f' = %.2f image spacing %s->%s: probably mislabelled (as %s it fits within %.1f')" % (
            spacing, p / spacing if spacing else 0.0, c.image, best[0], best[0], abs(best[1]))
        return text, {"image": best[0]}
    other = "upper" if c.limb == "lower" else "lower"
    ho, hc, _ = contact_terms(alm, c.body, other, dev_deg + bias / 60.0, t_us, lat, lon, obs, dut1_us)
    r = (ho - hc) * 60.0
    if abs(r) <= 3.0 * sigma_nm:
        text += "; fits the %s limb within %.1f': probably the wrong limb" % (other, abs(r))
        return text, {"limb": other}
    return text, None


def lop_points(fix, contact, half_length_nm=10.0):
    """Two ends (lat, lon) of a contact's line of position at the fix epoch, for plotting:
    the line perpendicular to Zn through the point ``residual_nm`` from the fix toward Zn."""
    zn = contact["zn_deg"]
    r = contact["residual_nm"]
    n0, e0 = r * cosd(zn), r * sind(zn)
    pts = []
    for s in (-half_length_nm, half_length_nm):
        pts.append(move_nm(fix["lat_deg"], fix["lon_deg"], n0 - s * sind(zn), e0 + s * cosd(zn)))
    return pts

