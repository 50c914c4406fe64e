"""REFERENCE ONLY: the fix solver as it was before the structured error model (commit 9c8e241),
kept verbatim (apart from this paragraph) to check the structured solver against.

It forms the dense n x n a-priori covariance of the intercepts and its Cholesky factor (O(n^2)
memory, O(n^3) time).  ``tests/test_fix_structured.py`` compares ``engine.fix.solve_fix`` with it on
every reference session (same fix and ellipse to 0.001 nmi, offset forced on and off, where the two
share their decision logic), and ``bench/bench_fix.py`` times both.  Never imported by the engine.

The fix: iterated least squares over all timed contacts of a session.

Each contact is a line of position (Marcq St Hilaire): the intercept
p = Ho - Hc (arcmin = nmi, toward the body) at the track's position at the
contact's instant.  The unknowns are the north and east offsets (nmi) of the
track at the fix epoch (course and speed held: every line is carried along the
rhumb line to the epoch), and optionally a common offset b (arcmin) of every
image's deviation (index error, dip anomaly, personal equation in altitude).
Linearised: p_i = cos Zn_i dN + sin Zn_i dE - b; each iteration recomputes Hc,
Zn and Ho at the new position (Gauss-Newton; steps longer than 60 nmi are
shortened), as in the Nautical Almanac's "position from intercept and azimuth
by calculation" generalised to weighted least squares (Metcalf & Metcalf,
Navigation 38(1), 1991 [from memory]).

A-priori error model of the intercepts (arcmin; a full covariance, because the
largest errors are shared between contacts):

* timing: each contact (rate x sigma_time)^2, with sigma_time^2 = reaction
  scatter (default 0.25 s)^2 + the stamp's own ``sigma_s``^2, rate = dHs/dt;
* personal equation left after calibration (``reaction_delay_sigma_s``, default
  0.2 s when no ``reaction_delay_s`` is given): one time bias for all contacts,
  covariance rate_i rate_j sigma^2;
* image deviation: sigma of the image (``sigma_arcmin``, default 1.0'), shared by
  every contact of that image;
* dip anomaly (default 1.0'; dip follows the air-sea temperature difference,
  Tschudin, Applied Optics 55, 3104, 2016 [title from memory: tests/SOURCES.md]; the size of the
  anomaly is [from memory], matched to the Monte Carlo of bench/bench_fix.py),
  shared by all contacts;
* refraction anomaly: one scale error kappa (default 0.05) of the whole
  atmosphere, covariance kappa^2 R_i R_j;
* the DR's course and speed (current, leeway, log error): a velocity error of
  ``velocity_sigma_kn`` (default 0.3 kn per component; ``track.velocity_sigma_kn``
  of the session; 0 for a known track) moves the line of a contact taken dt
  before the epoch by dv dt along Zn: covariance sigma_v^2 dt_i dt_j cos(Zn_i - Zn_j);
* the contact itself: judging the instant a limb touches a sea horizon in a
  seaway, with the horizon's short-term refraction flicker, scatters each
  contact independently by ``sigma_contact_arcmin`` of altitude (default 0.3';
  common practice for a careful observer, [from memory]; the session's
  ``observer.contact_sigma_arcmin`` overrides it);
* yaw (instrument turned off the body's azimuth by psi, sigma
  ``observer.yaw_sigma_deg`` of the session, default 0: the observer swings the
  arc): the contact comes late by a one-sided loss; its mean is taken off the
  deviation of nominal images (images with ``"source": "calibrated"`` already
  hold it) and its scatter is independent per contact
  (``engine.instrument.yaw_sigma_arcmin``).

Error ellipse (95 %): covariance N^-1 of the two position unknowns (the
offset, when estimated, is marginalised), scaled by k^2 = max(chi2_2(0.95),
s0^2 2F(2, n-u; 0.95)): the a-priori model when the residuals agree with it,
the a-posteriori unit weight s0 with the F quantile when they are larger
(Mikhail, "Observations and Least Squares", 1976 [from memory]; F(2, v) has the closed form
P = 1 - (1 + 2x/v)^(-v/2)).

Blunders: first a robust pass (Huber 1964 M-estimator by iteratively
reweighted least squares with the diagonal of the model) drops gross blunders,
one at a time, beyond 5 robust sigma (a mislabelled image is off by a whole
image spacing, tens of arcminutes, and would drag a plain least-squares fix
far along a weak direction).  Then Baarda's data snooping (w test with the a-priori covariance,
w_i = (S^-1 e)_i / sqrt((S^-1 Q_ee S^-1)_ii)); the contact with the largest
|w| > 3 is dropped and the fix recomputed, until none is left or no
redundancy remains.  A rejected contact that fits within 3 sigma when read as
another image of the instrument (or the other limb) is reported as probably
mislabelled.

Memory: the covariance is never stored, only its Cholesky factor (n^2/2
floats, rows as array('d')), so a board's heap holds a few dozen contacts.
MicroPython ignores ``__slots__`` and boxes every float, so an object per
contact with a dozen numbers costs about 900 bytes on its 64-bit port: the
working data of the usable contacts ("lines", numbered in the session's
order) are parallel array('d') columns instead, a set of lines is a list of
indices, and the whitened vectors are array('d') (lists when the numbers are
not plain floats, so tests/test_fix_float32.py's float32 emulation stays
float32).  The working matrices go before the per-contact report is built.  Convergence: a step
below 2 m, or below 0.001 sigma, or steps that stop shrinking below 0.03 sigma
(the rounding floor in single precision; tests/test_fix_float32.py).

The deviation offset is estimated ("auto") when its variance inflation
(N^-1)_bb N_bb is at most ``MAX_OFFSET_VIF`` and there are at least four
contacts, and kept when it is significant: |b| >= 2 s0 sqrt((N^-1)_bb) (a t test
of the extra unknown); otherwise it is held at zero (a warning says so), the
common terms of the error model (dip anomaly) carrying it.  In practice it
needs contacts on both sides of the meridian (rising and setting).
"""
import math
from array import array as _array

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
MAX_OFFSET_VIF = 10.0              # largest variance inflation of the offset that is still "estimable"
OFFSET_T = 2.0                     # an estimated offset below 2 of its a-posteriori sigmas is not significant
MAX_STEP_NM = 60.0
MAX_ITERATIONS = 40
MAX_LAT_DEG = 89.0
CONVERGED_NM = 1e-3                # last step below 2 m ...
CONVERGED_QUAD = 1e-6              # ... or below 0.001 sigma (dx' N dx)
STALLED_QUAD = 1e-3                # ... or no longer shrinking below 0.03 sigma (rounding floor)
HUBER_K = 1.5                      # Huber's constant, in a-priori sigmas (Huber 1964; common practice)
PRESCREEN_K = 5.0                  # robust first pass: gross blunders beyond 5 robust sigma are dropped
DEFAULTS = {"sigma_time_s": 0.25, "sigma_image_arcmin": 1.0, "kappa": 0.05, "sigma_dip_arcmin": 1.0,
            "reaction_delay_sigma_s": 0.2, "yaw_sigma_deg": 0.0, "velocity_sigma_kn": 0.3,
            "sigma_contact_arcmin": 0.3}


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


def _huber_factor(use, sigma, p):
    """Diagonal "Cholesky factor" (a list of floats) of the Huber-reweighted variances
    sigma^2 max(1, |p|/(k sigma)) (Huber 1964, in the iteratively reweighted form) of the
    lines ``use`` (indices into the columns ``sigma`` and ``p``)."""
    return [sigma[i] * math.sqrt(max(1.0, abs(p[i]) / (HUBER_K * sigma[i]))) for i in use]


# Small dense linear algebra on lists, in O(n^2) memory for a board's heap: the covariance
# S is never stored, only its Cholesky factor L (row i holds L[i][0..i]).  A diagonal
# factor is a plain list of floats.

_ROW = (list, _array)      # a row of a full factor (a diagonal factor is a list of floats)


def _cholesky(items, cov):
    """Lower-triangular L with L L^T = S, S[i][j] = cov(items[i], items[j], i == j);
    None when S is not positive definite (Cholesky-Banachiewicz)."""
    L = []
    for i in range(len(items)):
        row = _array('d', [0.0] * (i + 1))         # unboxed: 8 bytes a number on a board's heap
        for j in range(i + 1):
            s = cov(items[i], items[j], i == j)
            lj = L[j] if j < i else row
            for k in range(j):
                s -= row[k] * lj[k]
            if i == j:
                if s <= 0.0:
                    return None
                row[i] = math.sqrt(s)
            else:
                row[j] = s / lj[j]
        L.append(row)
    return L


def _forward(L, v):
    """y with L y = v (see ``_like``)."""
    if not isinstance(L[0], _ROW):
        return _like(v, [x / d for x, d in zip(v, L)])
    y = _array('d') if type(v[0]) is float else []
    for i, row in enumerate(L):
        s = v[i]
        for k in range(i):
            s -= row[k] * y[k]
        y.append(s / row[i])
    return y


def _backward(L, y):
    """x with L^T x = y (see ``_like``)."""
    if not isinstance(L[0], _ROW):
        return _like(y, [x / d for x, d in zip(y, L)])
    n = len(L)
    x = _zeros(n) if type(y[0]) is float else [0.0] * n
    for i in range(n - 1, -1, -1):
        s = y[i]
        for k in range(i + 1, n):
            s -= L[k][i] * x[k]
        x[i] = s / L[i][i]
    return x


def _inverse_diagonal(L):
    """Diagonal of S^-1 = L^-T L^-1: the squared norms of the columns of L^-1 (an array('d'))."""
    n = len(L)
    out = _array('d')
    z = _zeros(n)
    for i in range(n):
        z[i] = 1.0 / L[i][i]
        total = z[i] * z[i]
        for r in range(i + 1, n):
            row = L[r]
            s = 0.0
            for k in range(i, r):
                s -= row[k] * z[k]
            z[r] = s / row[r]
            total += z[r] * z[r]
        out.append(total)
    return out


def _zeros(n):
    """array('d') of n zeros."""
    return _array('d', [0.0] * n)


def _like(v, values):
    """``values`` (a list) as an array('d') (unboxed) when ``v`` holds plain floats; kept a list
    otherwise, so that another number type (tests/test_fix_float32.py's float32 emulation of a
    board) is not turned into double precision on the way."""
    return _array('d', values) if type(v[0]) is float else values


def _dot(a, b):
    return sum(x * y for x, y in zip(a, b))


def _mat_vec(m, v):
    return [sum(a * b for a, b in zip(row, v)) for row in m]


def solve_fix(session, alm, at_us=None, deviation_offset="auto", dut1_us=None, options=None):
    """Fix of a validated Session (``engine.session``) with almanac ``alm``.

    ``at_us``: fix epoch (default: the last contact's instant).
    ``deviation_offset``: "auto" (estimate when estimable), True, False.
    ``dut1_us``: UT1 - UTC (default: the session's ``dut1_s``, else 0).
    ``options``: overrides of ``DEFAULTS`` (error model).
    Returns the ``limbclock-fix/1`` dict (see DEVELOPERS.md).  Raises FixError."""
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
    epoch = at_us if at_us is not None else max(c.t_us for c in contacts)
    tr = session.track
    dr_lat, dr_lon = tr.position_at(epoch)
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

    # the usable contacts ("lines"), numbered 0..n-1 in the session's order: their working data are
    # parallel columns (unboxed array('d'): 8 bytes a number, where an object per line with a
    # dozen float attributes took about 900 bytes of a board's heap)
    lc = []                                     # the contact of each line
    t_l = []                                    # instant (int us), reaction delay removed
    dev_l, rate_l, vn_l, ve_l, refr_l, var_l = (_array('d'), _array('d'), _array('d'), _array('d'),
                                                _array('d'), _array('d'))
    reasons = {}
    for c in contacts:
        if c.void:
            reasons[c.index] = "void"
            continue
        if c.image is None:
            reasons[c.index] = "image not identified"
            continue
        t_us = c.t_us - delay_us if delay_us else c.t_us
        dev = session.deviation_of(c.image)
        calibrated = session.image_extra.get(c.image, {}).get("source") == "calibrated"
        yaw_mean, yaw_rms = yaw_sigma_arcmin(dev, opt["yaw_sigma_deg"])
        lat, lon = dr_position(dr_lat, dr_lon, tr.course_deg, tr.speed_kn, t_us - epoch)
        _, rate = sextant_altitude_deg(alm, c.body, c.limb, t_us, lat, lon, obs, dut1_us)
        rate = rate * 60.0                                            # arcmin/s
        zn0 = contact_terms(alm, c.body, c.limb, dev, t_us, lat, lon, obs, dut1_us)[2]
        dt_h = (t_us - epoch) / 3.6e9
        ha = dev - dip_arcmin(obs.eye_height_m) / 60.0
        st2 = opt["sigma_time_s"] ** 2 + c.sigma_s ** 2
        lc.append(c)
        t_l.append(t_us)
        dev_l.append(dev if calibrated else dev - yaw_mean / 60.0)
        rate_l.append(rate)
        vn_l.append(cosd(zn0) * dt_h)                                 # LOP shift per knot of velocity error
        ve_l.append(sind(zn0) * dt_h)
        refr_l.append(refraction_arcmin(ha, obs.temperature_c, obs.pressure_hpa))
        var_l.append(rate * rate * st2 + yaw_rms * yaw_rms + opt["sigma_contact_arcmin"] ** 2)
    n_lines = len(lc)

    sig_img = {}
    for iid, _, s in session.images:
        sig_img[iid] = s if s is not None else opt["sigma_image_arcmin"]

    vel_sigma = 0.0 if tr.known else _num_extra(session.track_extra, "velocity_sigma_kn", opt["velocity_sigma_kn"])

    def cov(a, b, same):
        v = opt["sigma_dip_arcmin"] ** 2 + opt["kappa"] ** 2 * refr_l[a] * refr_l[b] + \
            tb_sigma * tb_sigma * rate_l[a] * rate_l[b] + vel_sigma * vel_sigma * (vn_l[a] * vn_l[b] + ve_l[a] * ve_l[b])
        group = lc[a].image
        if group == lc[b].image:
            v += sig_img[group] ** 2
        if same:
            v += var_l[a]
        return v

    chol_cache = {}

    def factor(use):
        """Cholesky factor of the a-priori covariance of the lines in ``use`` (cached)."""
        key = tuple(use)
        if key not in chol_cache:
            L = _cholesky(use, cov)
            if L is None:
                raise FixError("the error model's covariance is not positive definite")
            chol_cache.clear()
            chol_cache[key] = L
        return chol_cache[key]

    sigma_l = _array('d', [math.sqrt(cov(i, i, True)) for i in range(n_lines)])
    # azimuth and intercept (arcmin) at the last evaluated position: lists, they keep the number
    # type of the model's results (see _like)
    zn_l = [0.0] * n_lines
    p_l = [0.0] * n_lines

    def evaluate(use, lat_e, lon_e, bias):
        for i in use:
            c = lc[i]
            lat, lon = dr_position(lat_e, lon_e, tr.course_deg, tr.speed_kn, t_l[i] - epoch)
            ho, hc, zn = contact_terms(alm, c.body, c.limb, dev_l[i] + bias / 60.0, t_l[i], lat, lon, obs, dut1_us)
            zn_l[i] = zn
            p_l[i] = (ho - hc) * 60.0

    def normal(use, L, with_bias):
        """Whitened design columns At (L^-1 A), whitened intercepts pt, normal matrix N, right side."""
        cols = [[cosd(zn_l[i]) for i in use], [sind(zn_l[i]) for i in use]]
        if with_bias:
            cols.append([-1.0] * len(use))
        At = [_forward(L, col) for col in cols]
        cols = None
        pt = _forward(L, [p_l[i] for i in use])
        N = [[_dot(r, c) for c in At] for r in At]
        return At, pt, N, [_dot(r, pt) for r in At]

    def solve(use, lat_e, lon_e, bias, with_bias, huber=False):
        """Gauss-Newton to convergence; with ``huber`` iteratively reweighted
        (diagonal model, Huber weights) for the robust first pass."""
        L = None if huber else factor(use)
        its = 0
        converged = False
        prev_quad = 1e30
        for its in range(1, MAX_ITERATIONS + 1):
            evaluate(use, lat_e, lon_e, bias)
            if huber:
                L = _huber_factor(use, sigma_l, p_l)
            At, pt, N, rhs = normal(use, L, with_bias)
            At = pt = None
            Ninv = invert(N)
            if Ninv is None:
                raise FixError("the lines of position do not cross (azimuths too alike): no fix")
            dx = _mat_vec(Ninv, rhs)
            step = math.sqrt(dx[0] ** 2 + dx[1] ** 2)
            if step > MAX_STEP_NM:
                dx = [v * MAX_STEP_NM / step for v in dx]
            lat_e, lon_e = move_nm(lat_e, lon_e, dx[0], dx[1])
            if lat_e > MAX_LAT_DEG or lat_e < -MAX_LAT_DEG:
                raise FixError("the fix ran off toward a pole: the contacts do not fit the track")
            if with_bias:
                bias += dx[2]
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
        evaluate(use, lat_e, lon_e, bias)
        if huber:
            L = _huber_factor(use, sigma_l, p_l)
        At, pt, N, rhs = normal(use, L, with_bias)
        Ninv = invert(N)
        if Ninv is None:
            raise FixError("the lines of position do not cross (azimuths too alike): no fix")
        return lat_e, lon_e, bias, L, At, pt, Ninv, its

    def offset_estimable(use, keep=True):
        """Whether the offset is estimable with the lines ``use``; ``keep``: the factor stays
        cached (not in the robust pass, which does not use it: its heap goes back meanwhile)."""
        if deviation_offset is False or len(use) < 4:
            return False
        if deviation_offset is True:
            return True
        if held[0] is not None:
            return False
        evaluate(use, dr_lat, dr_lon, 0.0)
        _, _, N, _ = normal(use, factor(use), True)
        if not keep:
            chol_cache.clear()
        Ninv = invert(N)
        return Ninv is not None and Ninv[2][2] * N[2][2] <= MAX_OFFSET_VIF

    held = [None]                               # why an estimable offset was held at zero (auto mode)
    use = list(range(n_lines))                  # the lines in use (indices)
    if len(use) < 2:
        raise FixError("%d usable contact(s): a fix needs at least two lines of position" % len(use))
    rejected_w = {}                             # line -> its rejection statistic
    lat_e, lon_e, bias = dr_lat, dr_lon, 0.0
    iterations = 0
    # robust first pass: Huber IRLS, dropping gross blunders (> PRESCREEN_K robust sigma) one at a time
    while len(use) > 3:
        with_bias = offset_estimable(use, False)
        lat_e, lon_e, bias, _, _, _, _, its = solve(use, lat_e, lon_e, bias if with_bias else 0.0, with_bias, True)
        iterations += its
        ratios = [abs(p_l[i]) / sigma_l[i] for i in use]
        scale = max(1.0, 1.4826 * _median(ratios))
        worst = max(range(len(use)), key=lambda i: ratios[i])
        if ratios[worst] <= PRESCREEN_K * scale:
            break
        bad = use.pop(worst)
        rejected_w[bad] = ratios[worst] / scale
    ratios = None
    # least squares with the full error model, then Baarda's data snooping
    while True:
        with_bias = offset_estimable(use)
        if not with_bias:
            bias = 0.0
        lat_e, lon_e, bias, L, At, pt, Ninv, its = solve(use, lat_e, lon_e, bias, with_bias)
        iterations += its
        n, u = len(use), len(Ninv)
        dof = n - u
        s0 = math.sqrt(_dot(pt, pt) / dof) if dof > 0 else 0.0      # e' S^-1 e = |L^-1 e|^2
        if u == 3 and deviation_offset == "auto" and dof >= 1:
            # t test of the extra unknown: an offset the data do not show is held at zero (the common
            # terms of the error model carry it), so noise in b does not move the fix
            sb = s0 * math.sqrt(Ninv[2][2])
            if sb > 0.0 and abs(bias) < OFFSET_T * sb:
                held[0] = ("deviation offset %+.1f' +- %.1f' is not significant (below %.0f sigma): held at 0"
                           % (bias, sb, OFFSET_T))
                bias = 0.0
                continue
        if dof < 1:
            break
        g = _backward(L, pt)                                      # S^-1 e
        pt = None
        B = [_backward(L, col) for col in At]                    # columns of S^-1 A
        At = None
        sinv_diag = _inverse_diagonal(L)
        worst, worst_w = -1, 0.0
        for i in range(n):
            bi = [B[r][i] for r in range(u)]
            m_ii = sinv_diag[i] - sum(bi[r] * sum(Ninv[r][c] * bi[c] for c in range(u)) for r in range(u))
            if m_ii <= 1e-9 * sinv_diag[i]:
                continue
            w = g[i] / math.sqrt(m_ii)
            if abs(w) > abs(worst_w):
                worst, worst_w = i, w
        g = B = sinv_diag = bi = None
        if worst < 0 or abs(worst_w) <= REJECT_W or n - 1 < 2:
            break
        bad = use.pop(worst)
        rejected_w[bad] = worst_w

    cnn, cne, cee = Ninv[0][0], Ninv[0][1], Ninv[1][1]
    k2 = ellipse_k2(s0, dof)
    major, minor, axis = ellipse(cnn, cne, cee, k2)
    if dof < 1:
        warnings.append("no redundancy (%d contacts for %d unknowns): the ellipse rests on the a-priori "
                        "error model alone and blunders cannot be detected" % (len(use), u))
    if held[0] is not None and u == 2:
        warnings.append(held[0])
    elif deviation_offset == "auto" and u == 2 and n_lines >= 4:
        warnings.append("deviation offset not estimable from these azimuths: held at 0 "
                        "(contacts on both sides of the meridian make it estimable)")
    spread = _azimuth_spread([zn_l[i] for i in use])
    if spread < 30.0:
        warnings.append("poor geometry: the lines of position span only %.0f deg of azimuth" % spread)
    run_h = (max(t_l[i] for i in use) - min(t_l[i] for i in use)) / 3.6e9
    if run_h > 0.5 and not tr.known:
        warnings.append("running fix over %.1f h: it assumes the DR course %.0f deg and speed %.1f kn held"
                        % (run_h, tr.course_deg, tr.speed_kn))

    # per-contact report: the working matrices go first (a board's heap holds one or the other)
    L = At = pt = g = B = sinv_diag = None
    chol_cache.clear()
    zn_l = p_l = None
    used = _zeros(n_lines)                      # 1.0 for a line in use
    for i in use:
        used[i] = 1.0
    contacts_used = len(use)
    use = None
    out_contacts = []
    rejected = []
    k = 0                                       # the next line (lines are in the contacts' order)
    for c in contacts:
        entry = {"index": c.index, "utc": format_utc(c.t_us), "body": c.body, "limb": c.limb, "image": c.image,
                 "deviation_deg": None, "ho_deg": None, "hc_deg": None, "zn_deg": None, "intercept_nm": None,
                 "residual_nm": None, "sigma_nm": None, "used": False, "reason": reasons.get(c.index),
                 "direction": None, "suggest": None}
        if k < n_lines and lc[k] is c:
            # the line at the fix (rejected ones too), and its intercept at the DR
            t_us = t_l[k]
            dev = dev_l[k] + bias / 60.0
            lat, lon = dr_position(lat_e, lon_e, tr.course_deg, tr.speed_kn, t_us - epoch)
            ho, hc, zn = contact_terms(alm, c.body, c.limb, dev, t_us, lat, lon, obs, dut1_us)
            dlat, dlon = dr_position(dr_lat, dr_lon, tr.course_deg, tr.speed_kn, t_us - epoch)
            ho_dr, hc_dr, _ = contact_terms(alm, c.body, c.limb, dev, t_us, dlat, dlon, obs, dut1_us)
            p = (ho - hc) * 60.0
            entry["deviation_deg"] = session.deviation_of(c.image)
            entry["ho_deg"] = ho
            entry["hc_deg"] = hc
            entry["zn_deg"] = zn
            entry["intercept_nm"] = (ho_dr - hc_dr) * 60.0
            entry["residual_nm"] = p
            entry["sigma_nm"] = sigma_l[k]
            entry["direction"] = "rising" if rate_l[k] >= 0.0 else "setting"
            entry["used"] = used[k] != 0.0
            if k in rejected_w:
                entry["reason"], entry["suggest"] = _reject_reason(session, alm, c, t_us, dev_l[k], lat, lon, p,
                                                                   sigma_l[k], rejected_w[k], bias, obs, dut1_us,
                                                                   opt)
            k += 1
        if not entry["used"]:
            rejected.append(c.index)
        out_contacts.append(entry)

    if rejected_w:
        warnings.append("%d contact(s) rejected as blunders: %s"
                        % (len(rejected_w), ", ".join(str(i) for i in sorted([lc[j].index for j in rejected_w]))))
    return {"format": FORMAT, "utc": format_utc(epoch), "lat_deg": lat_e, "lon_deg": lon_e,
            "ellipse_95": {"major_nm": major, "minor_nm": minor, "major_axis_deg": axis},
            "contacts_used": contacts_used, "rejected": rejected, "images": [c.image for c in contacts],
            "deviation_offset_arcmin": bias if u == 3 else None, "deviation_offset_estimated": u == 3,
            "sigma0": s0, "dr": {"lat_deg": dr_lat, "lon_deg": dr_lon}, "iterations": iterations,
            "warnings": warnings, "contacts": out_contacts}


def _azimuth_spread(zns):
    """Spread (deg) of azimuths as lines: the largest angle between two LOP directions, 0..90*2."""
    best = 0.0
    for a in zns:
        for b in zns:
            d = abs(a - b) % 180.0
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

