"""Image identification: which image made each timed contact?

A contact whose ``image`` is null was timed but not identified (the navigator
counted the images wrongly, or did not try).  Every image of the instrument
is a candidate; the question is answered by the one position that must
explain all contacts together.  A hypothesis is an assignment of an image to
every contact together with the position (at the last contact, the DR's
course and speed held) where that assignment fits best.

Search (complete, bounded)
--------------------------
Contact k read as image a puts the ship on a circle of equal altitude: centre
the body's geographical position at t_k, radius 90 deg - Ho(k, a), Ho from the
forward model's corrections (``model.observed_altitude_deg``: dip,
refraction, semi-diameter, parallax; they depend on the altitude, not on the
position).  The ship's run between two contacts is carried as a change of
the later circle's radius by the run's component toward its body (first
order: d^2 / (2 R tan z), below 0.2 nmi for an 80-nmi run).

* Seeds.  (a) Pairwise intersections: for anchor pairs of contacts and every
  pair of images (a labelled contact keeps its label), the two circles meet in
  up to two points (circles that miss by less than ``TANGENT_TOL_DEG`` give their
  point of closest approach, for near-parallel lines of position).  Whatever
  the DR, the position of every assignment that fits a well-crossing anchor
  pair is among these points, so the search is complete: a 6-contact session
  with the DR 600 nmi off is found like a 30-contact one.  The anchors are the
  pairs whose geographical positions are farthest apart (short of opposite),
  disjoint where they can be, so that a blunder spoils one anchor only.
  (b) The DR, and the DR carried onto each circle of each search contact (for
  sessions whose lines of position are nearly parallel, where intersections
  are ill-conditioned, and for one or two contacts).
* Screening.  At each seed every other search contact is read as the nearest
  image (or its label) with the table model below; score = sum min(x^2, cap)
  (x = residual / sigma; the cap is where a contact is more likely a blunder
  than a good contact, see below), stopped early once it exceeds the worst
  entry kept.  Two tables of at most ``KEEP`` assignments each are kept: by
  the score alone and by the score plus the DR's Gaussian prior (so the best
  fits anywhere and the best fits near the DR are both refined).  Seeds with
  the same assignment within ``SEED_SAME_NM`` keep the best (an assignment
  that fits all along lines of position that hardly cross takes one place).
* Refinement.  Each kept assignment is refined by iteratively reweighted
  Gauss-Newton in position (Zn from the table model; weights = the
  probability that the contact is not a blunder), then read again as the
  nearest images and refined again, first on the search contacts (two
  rounds) and scored on the refinement contacts; the best ``REFINE_FAR``
  by that score and the best ``REFINE_NEAR`` with the DR's Gaussian prior
  are refined on all the refinement contacts (three rounds).  A family that
  only the search contacts cannot tell apart (near a pole the Sun keeps its
  altitude: every contact one image) is dropped there.  Of hypotheses at one
  position (0.5 nmi), or of one assignment within ``SAME_NM``, the best is
  kept.
* The whole globe is always searched: the DR only weighs the hypotheses (below),
  so a DR hundreds of miles off, or with a slipped sign, does not hide the
  ship ("cold start" inside every identification).  ``radius_nm`` limits the
  search to that distance from the DR (``searched``: "dr").

Bounds (time and memory do not grow with the session beyond one pass)
---------------------------------------------------------------------
* the search works on ``SEARCH_CONTACTS`` (8) contacts well spread over time and
  bodies, with at most ``MAX_ANCHORS`` (4) anchor pairs (6 when there are 4
  contacts or fewer): at most 4 x 2 m^2 intersection seeds + 8 m + 1 DR seeds
  (m images), each screened on at most 6 contacts;
* refinement and ranking use ``REFINE_CONTACTS`` (24) contacts (the search
  contacts and others spread among the rest): at most 2 x ``KEEP`` (32) seeds
  refined on the search contacts, 16 of them on all 24, at most
  ``MAX_HYPOTHESES`` (6) carried to the end;
* every other contact is read at the most probable hypothesis with the forward
  model (once: its sextant altitude there gives the image and the residual),
  and at the others until they fall e^-8 below it: O(n) time; memory n bytes
  and n floats per carried hypothesis and an array of labels (the almanac
  cache holds ``CACHE_PLACES`` instants);
* the tables (geographical position, run, Ho of every image) of the refinement
  contacts are ``array('d')`` columns (Ho one small array per contact: a
  fragmented heap finds those), 24 x (m + 9) numbers; the seeds are streamed,
  never stored.  ``coop.tick()`` is called at each anchor image pair, each
  refinement step and each evaluation of the forward model.

Measured (``python -m bench identify``): the search and refinement cost about
1 000 ticks (``engine.coop.ticks``) whatever the size, and each further contact
about 1.3 ticks and 120 bytes (CPython) more (``tests/test_identify_bounds.py``).

Table model (for the search and refinement only; the fix uses THE forward
model): Hc of the body's centre by the spherical formula from the almanac's
GHA and declination at t_k, Ho(k, a) from the corrections without the Earth's
flattening term (below 0.2' for the Moon).

Probabilities (what "confidence" means)
---------------------------------------
sigma_k: the image's sigma (default 2', more than the fix's 1': nominal
deviations, a dip anomaly), ``EXTRA_SIGMA_ARCMIN`` (0.7': the contact's own
scatter, the table model, refraction) and the timing scatter (0.25 s and the
stamp's ``sigma_s``) times the contact's rate (at the DR for the search
contacts, at the hypothesis for the others), combined.  Contact times are
taken less the instrument's ``reaction_delay_s``, as the fix does.

A contact is a blunder (a stray press, a wrong body or limb) with prior
probability ``BLUNDER_P``; a blunder's residual is uniform over an image
spacing W (median spacing of the instrument).  The cost of a contact is
rho(x) = -2 ln((exp(-x^2/2) + beta) / (1 + beta)), beta = P/(1-P) sqrt(2 pi) sigma/W:
x^2 for a good contact, a cap for a blunder.  The DR's prior on the position
is a mixture: with probability 1 - ``DR_TAIL_P`` - ``DR_GLOBE_P`` the DR is right
within sigma_DR (Gaussian, per axis); with ``DR_TAIL_P`` it is off by anything
up to ``DR_TAIL_NM`` (as likely 50 as 500 nmi: uniform in distance, with a soft
edge; a log left unkept for a day or two, a current unknown); with
``DR_GLOBE_P`` it is anything on the globe (a sign or a date slipped).
``DR_TAIL_P`` = 0.6 was chosen on 2 400 calibration sessions of the trials below
(seeds 11-18): 0.4 let one session through with a wrong label at confidence
0.99, 0.5 to 0.7 none, and the share of labels given is the same (82 %).  The
weight of a hypothesis is its marginal likelihood, the Laplace approximation
of the integral of exp(-cost/2) times the prior over the position (its
normal matrix N, regularised over ``L_REG_NM`` for lines that do not cross):
Gaussian part exp(-d'Md/2)/sqrt(det(I + sigma_DR^2 N)), M = N (I + sigma_DR^2 N)^-1,
flat part u 2 pi / sqrt(det N).  So the number of hypotheses the globe
offers (look-elsewhere), the geometry and a DR that may be wrong all enter.
A contact's confidence is the total weight of the hypotheses that give it the
same image, times the probability that it is not a blunder there.  A contact
is assigned when its confidence reaches ``confidence`` (default 0.99);
otherwise it is left null and flagged ambiguous, with the alternatives.
The calibration is checked by a reliability table (``bench/bench_identify.py``)
on sessions made outside the engine (DE421 + ERFA) with DR errors of 0-600
nmi, and by ``tests/test_identify_calibration.py`` (300 seeded sessions: no
wrong label at confidence >= 0.99).

A hypothesis "fits" when it has at least three good contacts and its cost
(chi-square of the good contacts plus the cap of each blunder) is within the
chi-square quantile at 0.999 with n - 2 degrees of freedom (``chi2_quantile``).
Every distinct position that fits with a probability of at least
``CANDIDATE_P`` is reported (``candidates``): more than one is a doubt.

sigma_DR: ``dr_sigma_nm`` at the top level of the session (an extra key) or 30
nmi; 1 nmi when the track is known.
"""
import math
from array import array as _array

from engine import coop
from engine.almanac import Position
from engine.model import contact_residual_arcmin, observed_altitude_deg, sextant_altitude_deg
from engine.sphere import distance_nm, dr_position, offset_nm
from engine.timescale import format_utc

DEFAULT_DR_SIGMA_NM = 30.0
DEFAULT_IMAGE_SIGMA_ARCMIN = 2.0
DEFAULT_TIME_SIGMA_S = 0.25
EXTRA_SIGMA_ARCMIN = 0.7       # what the table model and the a-priori sigmas leave out (see the docstring)
DEFAULT_CONFIDENCE = 0.99
SEARCH_CONTACTS = 8            # contacts screened at every seed
REFINE_CONTACTS = 24           # contacts of the refinement and the ranking (the search contacts among them)
MAX_ANCHORS = 4                # anchor pairs of the pairwise intersections
KEEP = 16                      # assignments kept per table of the screening (two tables)
REFINE_FAR = 10                # of those, refined on every refinement contact: the best overall ...
REFINE_NEAR = 6                # ... and the best near the DR
MAX_HYPOTHESES = 6             # hypotheses carried to every contact
CACHE_PLACES = 2 * REFINE_CONTACTS
CANDIDATE_P = 0.01             # a position that fits is a candidate from this probability
SAME_NM = 30.0                 # hypotheses of one assignment closer than this are one
SEED_SAME_NM = 300.0           # seeds of one assignment closer than this take one place in a table
TANGENT_TOL_DEG = 0.15         # circles missing each other by less than this give a seed (9 nmi)
TANGENT_TOL = TANGENT_TOL_DEG * math.pi / 180.0
BLUNDER_P = 0.02               # prior probability that a contact is a blunder
DR_TAIL_P = 0.6                # prior probability that the DR is off by up to DR_TAIL_NM ...
DR_TAIL_NM = 600.0
DR_GLOBE_P = 0.01              # ... or anywhere on the globe
L_REG_NM = 300.0               # extent of a family of positions along lines that do not cross
MAHALANOBIS2_DR = 13.8         # chi2_2(0.999): the DR explains a position within this (dr_explains)
EARTH_AREA_NM2 = 4.0 * math.pi * 3437.747 ** 2
NM_RAD = 1.0 / 3437.747        # radians per nautical mile (arcminute)
RAD_ARCMIN = 3437.747
DEG = math.pi / 180.0
BIG = 1e30                     # "no bound": finite in single precision too (a board's floats)


class IdentifyError(ValueError):
    """The session cannot be identified (no images, no contacts)."""


def chi2_quantile(dof, p=0.999):
    """Quantile of the chi-square distribution with ``dof`` degrees of freedom: exact for one
    (z^2) and two (-2 ln(1 - p)), else Wilson and Hilferty 1931, "The distribution of
    chi-square", PNAS 17: (1 - 2/9v + z sqrt(2/9v))^3 v, within 1 % for v >= 3.  p is 0.95, 0.99
    or 0.999."""
    z = {0.95: 1.6449, 0.99: 2.3263, 0.999: 3.0902}[p]
    if dof <= 1:
        return z * z
    if dof == 2:
        return -2.0 * math.log(1.0 - p)
    v = float(dof)
    a = 2.0 / (9.0 * v)
    return v * (1.0 - a + z * math.sqrt(a)) ** 3


class _CachedAlmanac:
    """Memoises ``position(body, t_us, dut1_us)`` for ``CACHE_PLACES`` instants (the refinement
    contacts', asked at every seed and step; the others are read a few times): the numbers
    of a place unboxed in a small array('d') (a Position object took about 400 bytes of a
    board's heap) and a Position made again on each call; another number type than float (an
    emulation of single precision) is kept as the almanac's object."""
    __slots__ = ("alm", "cache")

    def __init__(self, alm):
        self.alm = alm
        # the table sized once, before the search fragments the heap: growing it on the way left the
        # old tables as holes, and a board's heap failed to find 592 bytes with 28 KB free.  Keys
        # deleted leave their slots to new keys (MicroPython's map and CPython's dict alike).
        cache = {}
        for k in range(CACHE_PLACES):
            cache[k] = None
        for k in range(CACHE_PLACES):
            del cache[k]
        self.cache = cache

    def position(self, body, t_us, dut1_us=0):
        key = (body, t_us, dut1_us)
        v = self.cache.get(key)
        if v is None:
            p = self.alm.position(body, t_us, dut1_us)
            if len(self.cache) >= CACHE_PLACES:
                pass                            # the search's instants are in; the others are read once or twice
            elif type(p.gha_deg) is not float:
                self.cache[key] = p
            else:
                self.cache[key] = _array('d', (p.gha_deg, p.dec_deg, p.sd_arcmin, p.hp_arcmin,
                                               p.gha_rate_deg_per_s, p.dec_rate_deg_per_s))
            return p
        if not isinstance(v, _array):
            return v
        return Position(body, t_us, v[0], v[1], v[2], v[3], v[4], v[5])

    def span_us(self):
        return self.alm.span_us()


class _Problem:
    """The contacts to identify and the tables of the refinement contacts.  Per contact: ``lab``
    (image index or -1) as an array column; images sorted by deviation.  Tables (rows = the refinement contacts, the search contacts first): ``rows``
    (contact numbers), geographical position ``gha``, ``sdec``, ``cdec`` (radians, sin, cos),
    unit vector ``gx, gy, gz``, run to the reference instant ``dn, de`` (nmi), and ``ho``
    (a list of rows, each an array of Ho in radians per image)."""
    pass


def _setup(session, alm, dr_sigma_nm):
    p = _Problem()
    p.session = session
    p.obs = session.observer
    p.alm = alm if isinstance(alm, _CachedAlmanac) else _CachedAlmanac(alm)
    p.contacts = [c for c in session.contacts if not c.void and getattr(c, "dup_of", None) is None]
    if not p.contacts:
        raise IdentifyError("contacts: none to identify")
    images = sorted([(iid, dev, s) for iid, dev, s in session.images], key=lambda im: im[1])
    if not images:
        raise IdentifyError("instrument.images: none")
    p.ids = [im[0] for im in images]
    p.devs = _array('d', [im[1] for im in images])
    p.m = len(images)
    if dr_sigma_nm is None:
        from engine.doubts import dr_sigma_of
        dr_sigma_nm = dr_sigma_of(session)
    p.dr_sigma = float(dr_sigma_nm)
    p.tr = session.track
    p.t_ref = max(c.t_us for c in p.contacts)
    p.dr_lat, p.dr_lon = p.tr.position_at(p.t_ref)
    p.lab = _array('h', [-1 if c.image is None else p.ids.index(c.image) for c in p.contacts])
    delay = session.instrument_extra.get("reaction_delay_s")
    ok = isinstance(delay, (int, float)) and not isinstance(delay, bool) and -5.0 < delay < 5.0
    p.delay_us = int(round(delay * 1e6)) if ok else 0
    p.sig_img = dict((iid, s if s is not None else DEFAULT_IMAGE_SIGMA_ARCMIN) for iid, _d, s in images)
    p.sig_worst = max(p.sig_img.values())
    gaps = sorted([(p.devs[k + 1] - p.devs[k]) * 60.0 for k in range(p.m - 1)])
    spacing = gaps[len(gaps) // 2] if gaps else 600.0
    p.beta0 = BLUNDER_P / (1.0 - BLUNDER_P) * math.sqrt(2.0 * math.pi) / max(10.0, spacing)
    return p


def _spread(order, count):
    """``count`` entries of ``order`` evenly spread over it (all when it is not longer)."""
    n = len(order)
    if n <= count:
        return list(order)
    if count == 1:
        return [order[n - 1]]
    return [order[(k * (n - 1) + (count - 1) // 2) // (count - 1)] for k in range(count)]


def _choose(p):
    """The refinement contacts (search contacts first): spread over time within each body,
    each body given a share of the search contacts (at least two when it has them)."""
    groups = {}
    for i, c in enumerate(p.contacts):
        groups.setdefault(c.body, []).append(i)
    for g in groups.values():
        g.sort(key=lambda i: p.contacts[i].t_us)
    n = len(p.contacts)

    def share(total):
        out = []
        bodies = sorted(groups.keys())
        quota = {}
        for b in bodies:
            quota[b] = min(len(groups[b]), max(2, total * len(groups[b]) // n))
        extra = total - sum(quota.values())
        for b in bodies:                                     # what is left, in order
            while extra > 0 and quota[b] < len(groups[b]):
                quota[b] += 1
                extra -= 1
        while sum(quota.values()) > total:                   # too many (small quotas raised to 2)
            b = max(bodies, key=lambda x: quota[x])
            quota[b] -= 1
        for b in bodies:
            out.extend(_spread(groups[b], quota[b]))
        return out
    search = share(min(SEARCH_CONTACTS, n))
    rest = [i for i in range(n) if i not in search]
    more = share(min(REFINE_CONTACTS, n))
    rows = list(search)
    for i in more:
        if i not in rows and len(rows) < REFINE_CONTACTS:
            rows.append(i)
    for i in rest:
        if len(rows) >= min(REFINE_CONTACTS, n):
            break
        if i not in rows:
            rows.append(i)
    return rows, len(search)


def _sigma(p, c, rate_deg_s):
    """sigma (arcmin) of a contact whose altitude changes at ``rate_deg_s`` (module docstring)."""
    s_img = p.sig_img.get(c.image, p.sig_worst) if c.image else p.sig_worst
    return math.sqrt(s_img ** 2 + EXTRA_SIGMA_ARCMIN ** 2 +
                     (rate_deg_s * 60.0 * math.sqrt(DEFAULT_TIME_SIGMA_S ** 2 + c.sigma_s ** 2)) ** 2)


def _tables(p, rows):
    p.rows = rows
    m = p.m
    p.gha, p.sdec, p.cdec = _array('d'), _array('d'), _array('d')
    p.gx, p.gy, p.gz = _array('d'), _array('d'), _array('d')
    p.dn, p.de = _array('d'), _array('d')
    p.ho = []                           # a small array per row: a fragmented heap finds those
    v_kn, c_rad = p.tr.speed_kn, p.tr.course_deg * DEG
    for r, i in enumerate(rows):
        c = p.contacts[i]
        pos = p.alm.position(c.body, c.t_us - p.delay_us)
        gha, dec = pos.gha_deg * DEG, pos.dec_deg * DEG
        p.gha.append(gha)
        p.sdec.append(math.sin(dec))
        p.cdec.append(math.cos(dec))
        p.gx.append(math.cos(dec) * math.cos(-gha))
        p.gy.append(math.cos(dec) * math.sin(-gha))
        p.gz.append(math.sin(dec))
        d_nm = v_kn * (c.t_us - p.t_ref) / 3.6e9
        p.dn.append(d_nm * math.cos(c_rad))
        p.de.append(d_nm * math.sin(c_rad))
        row = _array('d')
        for a in range(m):
            row.append(observed_altitude_deg(p.alm, c.body, c.limb, p.devs[a], c.t_us - p.delay_us, p.obs) * DEG)
        p.ho.append(row)
    p.rsig = _array('d')                # sigma with the rate at the DR (the search's positions are unknown)
    for i in rows:
        c = p.contacts[i]
        lat, lon = p.tr.position_at(c.t_us)
        p.rsig.append(_sigma(p, c, sextant_altitude_deg(p.alm, c.body, c.limb, c.t_us - p.delay_us, lat, lon,
                                                        p.obs)[1]))
    p.rlab = _array('h', [p.lab[i] for i in rows])
    p.rcap = _array('d', [-2.0 * math.log(p.beta0 * s) for s in p.rsig])    # x^2 where a blunder is likelier


def _nearest(row, m, h):
    """Index of the image whose Ho (``row``, ascending) is nearest ``h``."""
    lo, hi = 0, m - 1
    while hi - lo > 1:
        mid = (lo + hi) >> 1
        if row[mid] < h:
            lo = mid
        else:
            hi = mid
    return lo if h - row[lo] <= row[hi] - h else hi


def _rho(x2, beta):
    """Cost of a contact with squared normalised residual x2 (see the module docstring)."""
    return -2.0 * math.log((math.exp(-0.5 * x2) + beta) / (1.0 + beta))


# ----------------------------------------------------------------------------- table model

def _screen(p, rows, lat, lon, buf, bound):
    """Score of a seed (reference position ``lat``, ``lon`` in radians) on the rows ``rows`` (a
    count of the first rows, or a sequence of row numbers): sum min(x^2, cap); the images read
    are written into ``buf``.  Stops above ``bound``."""
    sin, cos, asin = math.sin, math.cos, math.asin
    ho, m = p.ho, p.m
    cl = cos(lat)
    if cl < 0.01:
        cl = 0.01
    score = 0.0
    for r in (range(rows) if isinstance(rows, int) else rows):
        la = lat + p.dn[r] * NM_RAD
        sh = sin(la) * p.sdec[r] + cos(la) * p.cdec[r] * cos(p.gha[r] + lon + p.de[r] * NM_RAD / cl)
        if sh > 1.0:
            sh = 1.0
        elif sh < -1.0:
            sh = -1.0
        hc = asin(sh)
        row = ho[r]
        j = p.rlab[r]
        if j < 0:                               # the nearest image (bisection, Ho ascending)
            lo, hi = 0, m - 1
            while hi - lo > 1:
                mid = (lo + hi) >> 1
                if row[mid] < hc:
                    lo = mid
                else:
                    hi = mid
            j = lo if hc - row[lo] <= row[hi] - hc else hi
        buf[r] = j
        x = (row[j] - hc) * RAD_ARCMIN / p.rsig[r]
        x = x * x
        cap = p.rcap[r]
        score += x if x < cap else cap
        if score > bound:
            return score
    return score


def _refine(p, count, assign, lat, lon, rounds=3, iterations=8):
    """Iteratively reweighted Gauss-Newton on the first ``count`` rows from (``lat``, ``lon``)
    (radians), the images ``assign`` (bytearray, updated: read again as the nearest images
    after each convergence, at most ``rounds`` times).  Returns (lat, lon, cost, nnn, nne, nee,
    n_in, chi2_in)."""
    sin, cos, asin, exp = math.sin, math.cos, math.asin, math.exp
    ho = p.ho
    reg = 1.0 / (L_REG_NM * L_REG_NM)
    for rnd in range(rounds):
        for _it in range(iterations):
            coop.tick()
            a11 = a12 = a22 = b1 = b2 = 0.0
            cl = cos(lat)
            if cl < 0.01:
                cl = 0.01
            for r in range(count):
                la = lat + p.dn[r] * NM_RAD
                lha = p.gha[r] + lon + p.de[r] * NM_RAD / cl
                sl, cla, sd, cd, ct = sin(la), cos(la), p.sdec[r], p.cdec[r], cos(lha)
                sh = sl * sd + cla * cd * ct
                if sh > 1.0:
                    sh = 1.0
                elif sh < -1.0:
                    sh = -1.0
                u1, u2 = _unit(cla * sd - sl * cd * ct, -cd * sin(lha))
                res = (ho[r][assign[r]] - asin(sh)) * RAD_ARCMIN
                s = p.rsig[r]
                x2 = (res / s) ** 2
                e = exp(-0.5 * x2) if x2 < 200.0 else 0.0
                w = e / (e + p.beta0 * s) / (s * s)
                a11 += w * u1 * u1
                a12 += w * u1 * u2
                a22 += w * u2 * u2
                b1 += w * u1 * res
                b2 += w * u2 * res
            a11 += reg
            a22 += reg
            det = a11 * a22 - a12 * a12
            dn = (a22 * b1 - a12 * b2) / det
            de = (a11 * b2 - a12 * b1) / det
            step = math.sqrt(dn * dn + de * de)
            if step > 60.0:
                dn, de = dn * 60.0 / step, de * 60.0 / step
            lat += dn * NM_RAD
            if lat > 1.55:
                lat = 1.55
            elif lat < -1.55:
                lat = -1.55
            lon += de * NM_RAD / cl
            if step < 0.02:
                break
        buf = bytearray(count)
        _screen(p, count, lat, lon, buf, BIG)
        same = True
        for r in range(count):
            if buf[r] != assign[r]:
                same = False
                assign[r] = buf[r]
        if same:
            break
    return _score(p, count, assign, lat, lon)


def _score(p, count, assign, lat, lon):
    """(lat, lon, cost, nnn, nne, nee, n_in, chi2_in) of the images ``assign`` at a position."""
    sin, cos, asin, exp = math.sin, math.cos, math.asin, math.exp
    ho = p.ho
    cost = a11 = a12 = a22 = chi2 = 0.0
    n_in = 0
    cl = max(0.01, cos(lat))
    for r in range(count):
        la = lat + p.dn[r] * NM_RAD
        lha = p.gha[r] + lon + p.de[r] * NM_RAD / cl
        sl, cla, sd, cd, ct = sin(la), cos(la), p.sdec[r], p.cdec[r], cos(lha)
        sh = max(-1.0, min(1.0, sl * sd + cla * cd * ct))
        u1, u2 = _unit(cla * sd - sl * cd * ct, -cd * sin(lha))
        s = p.rsig[r]
        x2 = ((ho[r][assign[r]] - asin(sh)) * RAD_ARCMIN / s) ** 2
        beta = p.beta0 * s
        cost += _rho(x2, beta)
        e = exp(-0.5 * x2) if x2 < 200.0 else 0.0
        w = e / (e + beta)
        if w > 0.5:
            n_in += 1
            chi2 += x2
        w /= s * s
        a11 += w * u1 * u1
        a12 += w * u1 * u2
        a22 += w * u2 * u2
    return lat, lon, cost, a11, a12, a22, n_in, chi2


# ----------------------------------------------------------------------------- seeds

def _anchors(p, count):
    """Anchor pairs of rows among the first ``count``: all pairs up to 4 rows, else the best
    crossing ones (geographical positions far apart but not opposite), disjoint where they can
    be (a blunder spoils one anchor only), at most ``MAX_ANCHORS``."""
    pairs = []
    for i in range(count):
        for j in range(i + 1, count):
            c = p.gx[i] * p.gx[j] + p.gy[i] * p.gy[j] + p.gz[i] * p.gz[j]
            pairs.append((-(1.0 - c * c), i, j))
    pairs.sort()
    if count <= 4:
        return [(i, j) for _q, i, j in pairs][:max(MAX_ANCHORS, 6)]
    used = [0] * count
    out = []
    for most in (1, 2):
        for _q, i, j in pairs:
            if len(out) < MAX_ANCHORS and used[i] < most and used[j] < most and (i, j) not in out:
                out.append((i, j))
                used[i] += 1
                used[j] += 1
    return out


def _unit(x, y):
    """(x, y) / |(x, y)|: cos and sin of an azimuth from its two components."""
    n = math.sqrt(x * x + y * y)
    if n < 1e-30:
        return 1.0, 0.0
    return x / n, y / n


def _meet(p, i, j, zi, zj, c, out, theta=None):
    """Points (lat, lon radians) where the circles of rows i and j (radii zi, zj radians) meet,
    appended to ``out``: none, one (closest approach of circles that miss by less than
    ``TANGENT_TOL_DEG``) or two.  ``c``: cosine of the angle ``theta`` between their centres."""
    s2 = 1.0 - c * c
    if s2 < 1e-10:
        return
    if theta is None:
        theta = math.acos(max(-1.0, min(1.0, c)))
    if zi - zj > theta + TANGENT_TOL or zj - zi > theta + TANGENT_TOL or theta - zi - zj > TANGENT_TOL:
        return
    a, b = math.cos(zi), math.cos(zj)
    al = (a - b * c) / s2
    be = (b - a * c) / s2
    x = al * p.gx[i] + be * p.gx[j]
    y = al * p.gy[i] + be * p.gy[j]
    z = al * p.gz[i] + be * p.gz[j]
    g2 = (1.0 - (al * a + be * b)) / s2
    if g2 <= 0.0:
        n = math.sqrt(x * x + y * y + z * z)
        out.append((math.asin(max(-1.0, min(1.0, z / n))), math.atan2(y, x)))
        return
    g = math.sqrt(g2)
    cx = p.gy[i] * p.gz[j] - p.gz[i] * p.gy[j]
    cy = p.gz[i] * p.gx[j] - p.gx[i] * p.gz[j]
    cz = p.gx[i] * p.gy[j] - p.gy[i] * p.gx[j]
    px, py, pz = x + g * cx, y + g * cy, z + g * cz
    out.append((math.asin(max(-1.0, min(1.0, pz))), math.atan2(py, px)))
    px, py, pz = x - g * cx, y - g * cy, z - g * cz
    out.append((math.asin(max(-1.0, min(1.0, pz))), math.atan2(py, px)))


def _toward(p, r, lat, lon):
    """(cos Zn, sin Zn) of the geographical position of row r seen from (lat, lon) radians."""
    lha = p.gha[r] + lon
    sl, cl = math.sin(lat), math.cos(lat)
    return _unit(cl * p.sdec[r] - sl * p.cdec[r] * math.cos(lha), -p.cdec[r] * math.sin(lha))


def _seeds_pairs(p, count, visit):
    """Call ``visit(lat, lon, rows)`` (radians, reference instant; ``rows``: the rows other than
    the anchor's, the ones to screen) at every pairwise seed; ``p.buf`` holds the anchor's images."""
    m = p.m
    pts = []
    two = []
    for i, j in _anchors(p, count):
        c = p.gx[i] * p.gx[j] + p.gy[i] * p.gy[j] + p.gz[i] * p.gz[j]
        theta = math.acos(max(-1.0, min(1.0, c)))
        others = bytearray([r for r in range(count) if r != i and r != j])
        # the run from t_i to t_j: the position at t_i is the unknown, circle j is carried back by it
        run_n, run_e = p.dn[j] - p.dn[i], p.de[j] - p.de[i]
        moving = run_n * run_n + run_e * run_e > 0.25
        ai = [p.rlab[i]] if p.rlab[i] >= 0 else range(m)
        aj = [p.rlab[j]] if p.rlab[j] >= 0 else range(m)
        for a in ai:
            zi = 0.5 * math.pi - p.ho[i][a]
            p.buf[i] = a
            for b in aj:
                coop.tick()
                zj = 0.5 * math.pi - p.ho[j][b]
                if zi - zj > theta + TANGENT_TOL or zj - zi > theta + TANGENT_TOL or theta - zi - zj > TANGENT_TOL:
                    continue                    # the circles are apart (or one inside the other)
                p.buf[j] = b
                del pts[:]
                _meet(p, i, j, zi, zj, c, pts, theta)
                for lat, lon in pts:
                    if moving:
                        # circle j's radius grows by the run's component toward its body (first order)
                        u, v = _toward(p, j, lat, lon)
                        del two[:]
                        _meet(p, i, j, zi, zj + (run_n * u + run_e * v) * NM_RAD, c, two, theta)
                        best = None
                        for q in two:
                            d = (q[0] - lat) ** 2 + ((q[1] - lon + math.pi) % (2 * math.pi) - math.pi) ** 2
                            if best is None or d < best[0]:
                                best = (d, q)
                        if best is None:
                            continue
                        lat, lon = best[1]
                    # from t_i to the reference instant
                    lat2 = lat - p.dn[i] * NM_RAD
                    visit(lat2, lon - p.de[i] * NM_RAD / max(0.01, math.cos(lat2)), others)


def _seeds_dr(p, count, visit, radius_nm):
    """The DR, and the DR carried onto each circle of the first ``count`` rows (within
    ``radius_nm``)."""
    lat0, lon0 = p.dr_lat * DEG, p.dr_lon * DEG
    visit(lat0, lon0, count)
    m = p.m
    cl = max(0.01, math.cos(lat0))
    for r in range(count):
        coop.tick()
        la = lat0 + p.dn[r] * NM_RAD
        lo = lon0 + p.de[r] * NM_RAD / cl
        sh = math.sin(la) * p.sdec[r] + math.cos(la) * p.cdec[r] * math.cos(p.gha[r] + lo)
        hc = math.asin(max(-1.0, min(1.0, sh)))
        u, v = _toward(p, r, la, lo)
        imgs = [p.rlab[r]] if p.rlab[r] >= 0 else range(m)
        for a in imgs:
            d = (p.ho[r][a] - hc) * RAD_ARCMIN           # toward the body, nmi
            if abs(d) <= radius_nm:
                visit(lat0 + d * u * NM_RAD, lon0 + d * v * NM_RAD / cl, count)


class _Table:
    """At most ``cap`` (assignment, score, lat, lon) entries, the cheapest (pruned in place when
    twice as many gathered); one entry per assignment within ``SEED_SAME_NM`` (an assignment that
    fits all along a line of position, lines that hardly cross, takes one place, not dozens)."""

    def __init__(self, cap):
        # the lists at their full length from the start, pruned in place: a table that grew and was
        # rebuilt at every prune left holes a fragmented board heap could not reuse
        self.cap = cap
        self.n = 0
        self.keys = [None] * (2 * cap)
        self.vals = [None] * (2 * cap)
        self.bound = BIG

    def add(self, assign, score, lat, lon):
        assign = bytes(assign)
        keys, vals = self.keys, self.vals
        for k in range(self.n):
            if keys[k] == assign:
                v = vals[k]
                if (v[1] - lat) ** 2 + ((v[2] - lon + math.pi) % (2 * math.pi) - math.pi) ** 2 * math.cos(lat) ** 2 \
                        < (SEED_SAME_NM * NM_RAD) ** 2:
                    if score < v[0]:
                        vals[k] = (score, lat, lon)
                    return
        keys[self.n] = assign
        vals[self.n] = (score, lat, lon)
        self.n += 1
        if self.n >= 2 * self.cap:
            self.prune()

    def prune(self):
        """Keep the ``cap`` cheapest, in order (a stable insertion sort in place: no allocation)."""
        keys, vals = self.keys, self.vals
        for i in range(1, self.n):
            ki, vi = keys[i], vals[i]
            j = i - 1
            while j >= 0 and vals[j][0] > vi[0]:
                keys[j + 1] = keys[j]
                vals[j + 1] = vals[j]
                j -= 1
            keys[j + 1] = ki
            vals[j + 1] = vi
        n = min(self.n, self.cap)
        for k in range(n, self.n):
            keys[k] = vals[k] = None
        self.n = n
        if n >= self.cap:
            self.bound = vals[n - 1][0]


def _search(p, count, radius_nm, local, use_dr=True):
    """Seeds screened into the two tables; returns the entries to refine [(assign, lat, lon)].
    ``local``: only seeds within ``radius_nm`` of the DR, ranked with the DR's prior too."""
    glob = _Table(KEEP)
    near = _Table(KEEP)
    buf = p.buf = bytearray(count)
    lat0, lon0 = p.dr_lat * DEG, p.dr_lon * DEG
    cl0 = max(0.01, math.cos(lat0))
    w0 = 1.0 / (p.dr_sigma * p.dr_sigma)
    r2 = radius_nm * radius_nm

    def visit(lat, lon, rows):
        dn = (lat - lat0) * RAD_ARCMIN
        de = ((lon - lon0 + math.pi) % (2.0 * math.pi) - math.pi) * RAD_ARCMIN * cl0
        d2 = dn * dn + de * de
        inside = d2 <= r2
        if local and not inside:
            return
        bound = glob.bound
        if inside:
            bound = max(bound, near.bound - d2 * w0)
        score = _screen(p, rows, lat, lon, buf, bound)
        if score < glob.bound:
            glob.add(buf, score, lat, lon)
        if use_dr and inside and score + d2 * w0 < near.bound:
            near.add(buf, score + d2 * w0, lat, lon)

    _seeds_dr(p, count, visit, radius_nm)
    _seeds_pairs(p, count, visit)
    glob.prune()
    near.prune()
    out = []
    for near_dr, t in ((True, near), (False, glob)):
        for k in range(t.n):
            a, lat, lon = t.keys[k], t.vals[k][1], t.vals[k][2]
            if not any(o[0] == a and (o[1] - lat) ** 2 + (o[2] - lon) ** 2 < (0.5 * NM_RAD) ** 2 for o in out):
                out.append((a, lat, lon, near_dr))
    return out


# ----------------------------------------------------------------------------- hypotheses

def _log_prior_mass(p, lat, lon, nnn, nne, nee, use_dr=True):
    """Log of the prior's mass that the hypothesis holds (module docstring)."""
    s2 = p.dr_sigma * p.dr_sigma
    d_nm = distance_nm(p.dr_lat, p.dr_lon, lat / DEG, lon / DEG)
    reg = 1.0 / (L_REG_NM * L_REG_NM)
    det_n = (nnn + reg) * (nee + reg) - nne * nne
    u = DR_GLOBE_P / EARTH_AREA_NM2 + DR_TAIL_P * _tail_density(d_nm, p.dr_sigma)
    if not use_dr:
        u = 1.0 / EARTH_AREA_NM2
    flat = math.log(u * 2.0 * math.pi) - 0.5 * math.log(det_n)
    if not use_dr or d_nm > 12.0 * p.dr_sigma + 100.0:
        return flat
    dn, de = offset_nm(p.dr_lat, p.dr_lon, lat / DEG, lon / DEG)
    d11, d12, d22 = 1.0 + s2 * nnn, s2 * nne, 1.0 + s2 * nee
    det = d11 * d22 - d12 * d12
    # M = N (I + s2 N)^-1
    i11, i12, i22 = d22 / det, -d12 / det, d11 / det
    m11 = nnn * i11 + nne * i12
    m12 = nnn * i12 + nne * i22
    m22 = nne * i12 + nee * i22
    q = m11 * dn * dn + 2.0 * m12 * dn * de + m22 * de * de
    gauss = math.log(1.0 - DR_TAIL_P - DR_GLOBE_P) - 0.5 * q - 0.5 * math.log(det)
    hi = max(gauss, flat)
    return hi + math.log(math.exp(gauss - hi) + math.exp(flat - hi))


def _tail_density(d_nm, sigma_nm):
    """Density (per nmi^2) of the DR's tail at ``d_nm`` from it: a DR that is off is as likely
    off by 50 as by 500 nmi (uniform in distance up to ``DR_TAIL_NM``, i.e. 1 / (2 pi R r) per
    unit area, held at r = sigma_DR nearer), then falling off as a Gaussian of a quarter of that
    radius (no hard edge: a position is found a few miles off the truth); normalised to 1."""
    r0, s = DR_TAIL_NM, 0.25 * DR_TAIL_NM
    sig = min(sigma_nm, 0.5 * r0)
    norm = (r0 - 0.5 * sig) / r0 + (s * s + r0 * s * math.sqrt(0.5 * math.pi)) / (r0 * r0)
    if d_nm <= r0:
        return 1.0 / (2.0 * math.pi * r0 * max(d_nm, sig) * norm)
    x = (d_nm - r0) / s
    return math.exp(-0.5 * x * x) / (2.0 * math.pi * r0 * r0 * norm) if x < 30.0 else 0.0


def _mahalanobis2(p, lat, lon, nnn, nne, nee):
    """Squared Mahalanobis distance of a position from the DR: covariance sigma_DR^2 I + N^-1."""
    dn, de = offset_nm(p.dr_lat, p.dr_lon, lat / DEG, lon / DEG)
    reg = 1.0 / (L_REG_NM * L_REG_NM)
    a, b, c = nnn + reg, nne, nee + reg
    det = a * c - b * b
    s2 = p.dr_sigma * p.dr_sigma
    c11, c12, c22 = c / det + s2, -b / det, a / det + s2
    det2 = c11 * c22 - c12 * c12
    return (c22 * dn * dn - 2.0 * c12 * dn * de + c11 * de * de) / det2


def _fits(cost, n_in, n):
    """A hypothesis fits: at least three good contacts, and its cost (chi-square of the good
    contacts, plus the cap of each blunder) within the chi-square quantile at 0.999 for n - 2."""
    return n_in >= 3 and cost <= chi2_quantile(n - 2)


def _hypotheses(p, count, nrows, entries, use_dr):
    """Refine the entries (first on the search rows, then on all rows of the tables); returns
    [(logz, lat, lon, assign over the rows, cost, nnn, nne, nee, n_in, chi2)] best first,
    distinct: of hypotheses within 0.5 nmi, or of one assignment within ``SAME_NM``, the best."""
    # shortlist: each entry refined on the search rows and scored on every row; the best
    # ``REFINE_NEAR`` near the DR (score + its prior) and ``REFINE_FAR`` overall are refined on all
    lat0, lon0 = p.dr_lat * DEG, p.dr_lon * DEG
    cl0 = max(0.01, math.cos(lat0))
    w0 = 1.0 / (p.dr_sigma * p.dr_sigma)
    short = []
    for assign, lat, lon, near_dr in entries:
        a = bytearray(assign)
        lat, lon = _refine(p, count, a, lat, lon, 2, 4)[:2]
        full = bytearray(nrows)
        score = _screen(p, nrows, lat, lon, full, BIG)
        dn = (lat - lat0) * RAD_ARCMIN
        de = ((lon - lon0 + math.pi) % (2.0 * math.pi) - math.pi) * RAD_ARCMIN * cl0
        short.append((score, score + (dn * dn + de * de) * w0 if near_dr else BIG, bytes(full), lat, lon))
    entries = None
    pick = sorted(range(len(short)), key=lambda k: short[k][0])[:REFINE_FAR]
    for k in sorted(range(len(short)), key=lambda k: short[k][1])[:REFINE_NEAR]:
        if short[k][1] < BIG and k not in pick:
            pick.append(k)
    out = []
    for k in pick:
        full = bytearray(short[k][2])
        h = _refine(p, nrows, full, short[k][3], short[k][4])
        lat, lon = h[0], h[1]
        logz = -0.5 * h[2] + _log_prior_mass(p, lat, lon, h[3], h[4], h[5], use_dr)
        out.append((logz, lat, lon, bytes(full), h[2], h[3], h[4], h[5], h[6], h[7]))
    out.sort(key=lambda h: -h[0])
    kept = []
    for h in out:
        if not any(_same(o, h) for o in kept):
            kept.append(h)
    return kept


def _same(a, b):
    """Two hypotheses are one: within 0.5 nmi, or one assignment within ``SAME_NM``."""
    d2 = ((a[1] - b[1]) ** 2 + ((a[2] - b[2] + math.pi) % (2 * math.pi) - math.pi) ** 2
          * math.cos(b[1]) ** 2) / (NM_RAD * NM_RAD)
    return d2 < 0.25 or (a[3] == b[3] and d2 < SAME_NM * SAME_NM)


def _read_rest(p, lat, lon, lab, wts, stop=BIG):
    """Read the contacts not in the tables at a hypothesis (reference position, radians) with
    the forward model: image index into ``lab``, probability of not being a blunder into
    ``wts``; returns (their cost, how many are good), or None once the cost passes ``stop``."""
    cost = 0.0
    good = 0
    for i in range(len(p.contacts)):
        if p.in_rows[i]:
            continue
        c = p.contacts[i]
        lat_i, lon_i = dr_position(lat / DEG, lon / DEG, p.tr.course_deg, p.tr.speed_kn, c.t_us - p.t_ref)
        j = p.lab[i]
        hs, rate = sextant_altitude_deg(p.alm, c.body, c.limb, c.t_us - p.delay_us, lat_i, lon_i, p.obs)
        if j < 0:
            j = 0
            for k in range(1, p.m):
                if abs(p.devs[k] - hs) < abs(p.devs[j] - hs):
                    j = k
        r = (p.devs[j] - hs) * 60.0           # in sextant altitude: within a tenth of Ho - Hc, one evaluation
        s = _sigma(p, c, rate)
        x2 = (r / s) ** 2
        beta = p.beta0 * s
        cost += _rho(x2, beta)
        if cost > stop:
            return None
        e = math.exp(-0.5 * x2) if x2 < 200.0 else 0.0
        lab[i] = j
        wts[i] = e / (e + beta)
        good += wts[i] >= 0.5
    return cost, good


def _read_rows(p, h, lab, wts):
    """The rows' images and probabilities of not being a blunder at hypothesis ``h``."""
    lat, lon, assign = h[1], h[2], h[3]
    cl = max(0.01, math.cos(lat))
    for r, i in enumerate(p.rows):
        la = lat + p.dn[r] * NM_RAD
        sh = math.sin(la) * p.sdec[r] + math.cos(la) * p.cdec[r] * math.cos(p.gha[r] + lon + p.de[r] * NM_RAD / cl)
        x2 = ((p.ho[r][assign[r]] - math.asin(max(-1.0, min(1.0, sh)))) * RAD_ARCMIN / p.rsig[r]) ** 2
        e = math.exp(-0.5 * x2) if x2 < 200.0 else 0.0
        lab[i] = assign[r]
        wts[i] = e / (e + p.beta0 * p.rsig[r])


def _run(p, radius_nm, use_dr):
    """Search, refine and rank; returns (hypotheses, searched): the whole globe ("globe"), or
    within ``radius_nm`` of the DR when given ("dr")."""
    rows, count = _choose(p)
    _tables(p, rows)
    if radius_nm is not None:
        return _hypotheses(p, count, len(rows), _search(p, count, radius_nm, True, use_dr), use_dr), "dr"
    radius_nm = 4.0 * p.dr_sigma + 60.0              # the near table's reach
    return _hypotheses(p, count, len(rows), _search(p, count, radius_nm, False, use_dr), use_dr), "globe"


def _weigh(session, alm, dr_sigma_nm, radius_nm, use_dr):
    """Search, then read every contact at the best hypotheses (the rest with the forward
    model).  Returns (problem, carried [(logz, hypothesis, images, weights, fits)] best first,
    their probabilities, searched); the problem's tables are dropped."""
    p = _setup(session, alm, dr_sigma_nm)
    hyps, searched = _run(p, radius_nm, use_dr)
    n = len(p.contacts)
    p.in_rows = bytearray(n)
    for i in p.rows:
        p.in_rows[i] = 1
    carried = []
    best_total = None
    least = 0.0                                 # the smallest cost of the other contacts among those read
    for h in hyps[:MAX_HYPOTHESES]:
        if best_total is not None and h[0] < best_total - 16.0:
            break
        lab = bytearray(n) if p.m < 256 else [0] * n
        wts = _array('d', [0.0] * n)
        _read_rows(p, h, lab, wts)
        if best_total is None:
            read = _read_rest(p, h[1], h[2], lab, wts)
        else:                                   # hopeless once 16 below the best: stop reading
            read = _read_rest(p, h[1], h[2], lab, wts, 2.0 * (h[0] - best_total + 16.0))
        if read is None:
            continue
        extra, good = read
        logz = h[0] - 0.5 * extra
        if best_total is None:
            best_total = logz
            least = extra
        least = min(least, extra)
        carried.append((logz, h, lab, wts, _fits(h[4] + extra, h[8] + good, n)))
    # the hypotheses not carried keep their weight in the total, as if they explained the other
    # contacts as well as the best of those carried does, so that they count against every label
    left = [h[0] - 0.5 * least for h in hyps if not any(c[1] is h for c in carried)]
    hyps = None
    p.ho = p.gha = p.sdec = p.cdec = p.gx = p.gy = p.gz = p.dn = p.de = None     # the tables go
    carried.sort(key=lambda c: -c[0])
    top = carried[0][0]
    weights = [math.exp(c[0] - top) for c in carried]
    total = sum(weights) + sum(math.exp(x - top) for x in left if x - top > -50.0)
    return p, carried, [w / total for w in weights], searched


def _verdict(p, carried, probs, i):
    """(image index at the best hypothesis, confidence, fits there, image indices the hypotheses
    of probability >= 0.001 give) of contact number ``i``."""
    best = carried[0][2][i]
    conf = 0.0
    options = []
    for k in range(len(carried)):
        li = carried[k][2][i]
        if li == best:
            conf += probs[k] * carried[k][3][i]
        if probs[k] >= 1e-3 and li not in options:
            options.append(li)
    return best, conf, carried[0][3][i] >= 0.5, options


def _note_ambiguous(p, c, image, conf, fits, options):
    if not fits and len(options) <= 1:
        return "contact %d: fits no image (a blunder?); left unidentified" % c.index
    return "contact %d: image ambiguous (%s, confidence %.2f); left unidentified" % (
        c.index, " or ".join([p.ids[image]] + [p.ids[o] for o in options if o != image]), conf)


def _candidates(p, carried, probs):
    """The distinct positions (at the last contact) that fit, with probability >= CANDIDATE_P."""
    cands = []
    for k in range(len(carried)):
        h, fit = carried[k][1], carried[k][4]
        lat, lon = h[1] / DEG, h[2] / DEG
        if fit and probs[k] >= CANDIDATE_P and \
                not any(distance_nm(lat, lon, o["lat_deg"], o["lon_deg"]) < SAME_NM for o in cands):
            cands.append({"utc": format_utc(p.t_ref, 0), "lat_deg": round(lat, 5), "lon_deg": round(lon, 5),
                          "probability": round(probs[k], 4), "rms_arcmin": round(_rms(h), 3),
                          "dr_distance_nm": round(distance_nm(p.dr_lat, p.dr_lon, lat, lon), 1)})
    return cands


def _dr_explains(p, carried, use_dr=True):
    b = carried[0][1]
    return use_dr and _mahalanobis2(p, b[1], b[2], b[5], b[6], b[7]) <= MAHALANOBIS2_DR


def identify(session, alm, dr_sigma_nm=None, radius_nm=None, confidence=DEFAULT_CONFIDENCE, use_dr=True):
    """Identify the unlabelled contacts of a session (labels given are kept as constraints).

    Returns a dict: ``contacts`` (per usable contact: ``index``, ``image`` (assigned or given,
    None when not confident), ``given`` (bool), ``confidence``, ``alternatives`` (other images it
    may be), ``ambiguous``, ``fits`` (False: it fits no image at the best position: a blunder)),
    ``hypotheses`` (ranked: ``images`` per contact, ``cost`` (-2 ln of the weight, relative),
    ``probability``, ``offset_nm`` (north, east) from the DR, ``lat_deg``, ``lon_deg``, ``fits``),
    ``candidates`` (distinct positions at the last contact that fit the contacts, with a
    probability of at least ``CANDIDATE_P``: ``utc``, ``lat_deg``, ``lon_deg``, ``probability``,
    ``rms_arcmin`` (in sigmas), ``dr_distance_nm``), ``searched`` ("globe", or "dr" when
    ``radius_nm`` limited the search), ``consistent`` (the best hypothesis fits), ``dr_explains``
    (it lies within the DR's uncertainty), ``misfit_labels`` (labelled contacts that fit another
    image far better), ``warnings``, ``dr_sigma_nm``, ``radius_nm``.

    ``radius_nm`` limits the search to that distance from the DR; ``use_dr=False`` ignores the DR
    (a cold start)."""
    p, carried, probs, searched = _weigh(session, alm, dr_sigma_nm, radius_nm, use_dr)
    out_contacts = []
    warnings = []
    for i, c in enumerate(p.contacts):
        given = p.lab[i] >= 0
        best, conf, fits, options = _verdict(p, carried, probs, i)
        ambiguous = (not given) and conf < confidence
        image = p.ids[best]
        out_contacts.append({"index": c.index, "image": None if ambiguous else image, "given": given,
                             "confidence": round(conf, 4), "ambiguous": ambiguous, "fits": fits,
                             "alternatives": [p.ids[o] for o in options if o != best]})
        if ambiguous:
            warnings.append(_note_ambiguous(p, c, best, conf, fits, options))
    misfit = _misfits(p, carried[0][1])
    for mf in misfit:
        warnings.append("contact %d: labelled %s but fits %s (%.1f' off its label)"
                        % (mf["index"], mf["label"], mf["fits"], mf["label_residual_arcmin"]))
    top = carried[0][0]
    hyp_out = []
    for k, (logz, h, lab, wts, fit) in enumerate(carried):
        lat, lon = h[1] / DEG, h[2] / DEG
        north, east = offset_nm(p.dr_lat, p.dr_lon, lat, lon)
        hyp_out.append({"images": [p.ids[j] for j in lab], "cost": round(2.0 * (top - logz), 3),
                        "probability": round(probs[k], 4), "offset_nm": [round(north, 2), round(east, 2)],
                        "lat_deg": round(lat, 5), "lon_deg": round(lon, 5), "fits": fit})
    return {"contacts": out_contacts, "hypotheses": hyp_out, "candidates": _candidates(p, carried, probs),
            "searched": searched, "consistent": carried[0][4], "dr_explains": _dr_explains(p, carried, use_dr),
            "misfit_labels": misfit, "warnings": warnings, "dr_sigma_nm": p.dr_sigma,
            "radius_nm": radius_nm if radius_nm is not None else 4.0 * p.dr_sigma + 60.0}


def identify_for_fix(session, alm, confidence=DEFAULT_CONFIDENCE):
    """What ``engine.reduce_session`` does before the fix, lean on a board's heap (no per-contact
    report, a few note lines whatever the number of contacts): write the confident images into the
    session's unlabelled contacts (and repeats of them); when fewer than three usable contacts then
    carry an image and the most probable assignment fits, write its images for the unlabelled
    contacts that fit it (``fallback``).  Returns (notes, summary): at most three notes (the
    images identified; the contacts left out or read as the most probable assignment, with their
    alternatives); the summary has ``searched``, ``consistent``, ``dr_explains``, ``candidates``,
    ``fallback``, ``best_p`` (the most probable assignment's probability) and ``ambiguous``
    (indices of the contacts whose image could not be told)."""
    p, carried, probs, searched = _weigh(session, alm, None, None, True)
    ambiguous = []
    pending = []
    labelled = 0
    done = []                       # "4 as i05" parts of one note (one string, not one per contact)
    doubtful = []                   # "7: i05 or i06 (0.62)" / "9: fits no image" parts of another
    low = 1.0
    for i, c in enumerate(p.contacts):
        if p.lab[i] >= 0:
            labelled += 1
            continue
        best, conf, fits, options = _verdict(p, carried, probs, i)
        if conf >= confidence:
            c.image = p.ids[best]
            labelled += 1
            done.append("%d as %s" % (c.index, c.image))
            low = min(low, conf)
            continue
        if not fits and len(options) <= 1:
            doubtful.append("%d: fits no image" % c.index)
        else:
            doubtful.append("%d: %s (%.2f)" % (c.index, " or ".join(
                [p.ids[best]] + [p.ids[o] for o in options if o != best]), conf))
            ambiguous.append(c.index)
        if fits:
            pending.append((c, best))
    notes = []
    if done:
        notes.append("contact%s identified (%sconfidence %.4f): %s"
                     % ("s" if len(done) > 1 else "", "lowest " if len(done) > 1 else "", low, ", ".join(done)))
    done = None
    fallback = labelled < 3 and carried[0][4] and bool(pending)
    if doubtful:
        notes.append("image%s not told with confidence 0.99, contact: %s; %s"
                     % ("s" if len(doubtful) > 1 else "", ", ".join(doubtful),
                        "read as the most probable assignment (p %.2f)" % probs[0] if fallback
                        else "left unidentified"))
    doubtful = None
    if fallback:
        for c, best in pending:
            c.image = p.ids[best]
    _repeats(session)
    summary = {"searched": searched, "consistent": carried[0][4], "dr_explains": _dr_explains(p, carried),
               "candidates": _candidates(p, carried, probs), "fallback": fallback, "best_p": round(probs[0], 4),
               "ambiguous": [] if fallback else ambiguous}
    return notes, summary


def _repeats(session):
    """A repeat of a contact (``dup_of``) takes the image of the contact it repeats."""
    by_index = None
    for c in session.contacts:
        d = getattr(c, "dup_of", None)
        if c.image is None and d is not None:
            if by_index is None:
                by_index = dict((x.index, x) for x in session.contacts)
            if d in by_index and by_index[d].image is not None:
                c.image = by_index[d].image


def _rms(h):
    """Rms (in sigmas) of the good contacts of a hypothesis."""
    return math.sqrt(h[9] / max(1, h[8]))


def _misfits(p, h):
    """Labelled contacts that another image explains far better at hypothesis ``h``."""
    out = []
    lat, lon = h[1] / DEG, h[2] / DEG
    for i, c in enumerate(p.contacts):
        if p.lab[i] < 0:
            continue
        lat_i, lon_i = dr_position(lat, lon, p.tr.course_deg, p.tr.speed_kn, c.t_us - p.t_ref)
        hs, rate = sextant_altitude_deg(p.alm, c.body, c.limb, c.t_us - p.delay_us, lat_i, lon_i, p.obs)
        j = 0
        for k in range(1, p.m):
            if abs(p.devs[k] - hs) < abs(p.devs[j] - hs):
                j = k
        own = abs(hs - p.devs[p.lab[i]]) * 60.0
        if j != p.lab[i] and own > 4.0 * _sigma(p, c, rate) and own > 2.0 * abs(hs - p.devs[j]) * 60.0:
            out.append({"index": c.index, "label": p.ids[p.lab[i]], "fits": p.ids[j],
                        "label_residual_arcmin": round(own, 2)})
    return out


def apply(session, result):
    """Write the confident images of an ``identify`` result into the session's unlabelled
    contacts (and into repeats of them); returns one note per image written."""
    by_index = dict((c.index, c) for c in session.contacts)
    notes = []
    for rc in result["contacts"]:
        c = by_index[rc["index"]]
        if c.image is None and rc["image"] is not None:
            c.image = rc["image"]
            notes.append("contact %d identified as %s (confidence %.2f)" % (c.index, rc["image"], rc["confidence"]))
    _repeats(session)
    return notes


def identify_session(session, alm, dr_sigma_nm=None):
    """Assign images to the contacts whose ``image`` is null, in place, where the assignment is
    confident; return warnings (one line per assignment made and per ambiguity)."""
    todo = [c for c in session.contacts if c.image is None and not c.void]
    if not todo:
        return []
    res = identify(session, alm, dr_sigma_nm)
    return apply(session, res) + res["warnings"]


def cold_start(session, alm, top=5):
    """Search the globe for positions (and assignments) that explain every contact, ignoring
    the DR.  Returns ranked candidates ``{"utc", "lat_deg", "lon_deg", "images", "rms_arcmin",
    "cost", "probability", "fits"}``: the position at the last contact (course and speed kept),
    distinct by at least 60 nmi, best first."""
    p = _setup(session, alm, 1e4)
    hyps, _ = _run(p, None, False)
    n = len(p.contacts)
    p.in_rows = bytearray(n)
    for i in p.rows:
        p.in_rows[i] = 1
    out = []
    top_logz = hyps[0][0]
    total = sum(math.exp(h[0] - top_logz) for h in hyps if h[0] - top_logz > -50.0)
    for h in hyps:
        lat, lon = h[1] / DEG, h[2] / DEG
        if any(distance_nm(lat, lon, o["lat_deg"], o["lon_deg"]) < 60.0 for o in out):
            continue
        lab = bytearray(n) if p.m < 256 else [0] * n
        wts = _array('d', [0.0] * n)
        _read_rows(p, h, lab, wts)
        _read_rest(p, h[1], h[2], lab, wts)
        ss = 0.0
        for i, c in enumerate(p.contacts):
            lat_i, lon_i = dr_position(lat, lon, p.tr.course_deg, p.tr.speed_kn, c.t_us - p.t_ref)
            r = contact_residual_arcmin(p.alm, c.body, c.limb, p.devs[lab[i]], c.t_us - p.delay_us, lat_i, lon_i,
                                         p.obs)[0]
            ss += r * r
        out.append({"utc": format_utc(p.t_ref, 0), "lat_deg": round(lat, 4), "lon_deg": round(lon, 4),
                    "images": [p.ids[j] for j in lab], "cost": round(2.0 * (top_logz - h[0]), 3),
                    "probability": round(math.exp(h[0] - top_logz) / total, 4),
                    "rms_arcmin": round(math.sqrt(ss / n), 3), "fits": _fits(h[4], h[8], len(p.rows))})
        if len(out) >= top:
            break
    return out
