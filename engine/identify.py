"""Image identification: which image made each timed contact?

A contact whose ``image`` is null was timed but not identified (the navigator
counted the images wrongly, or did not try).  Every image of the instrument
is a candidate; the question is answered by the one position that must
explain all contacts together.

Method (one scheme for a good and a poor DR):

1. Hypotheses.  A grid of offsets (north, east, nmi) of the whole DR track is
   searched within ``radius_nm`` of the DR (default 4 sigma_DR + 60 nmi).  At
   each offset the forward model (``model.sextant_altitude_deg``, THE model the
   fix inverts) gives the sextant altitude Hs_i of every contact at the
   position the ship had at t_i; the nearest image (by deviation) is that
   contact's assignment there, and labelled contacts keep their label.  The
   grid step is a third of the smallest image spacing (5..30 nmi), so every
   assignment a position in the search area can produce is met.  The pattern
   of the contacts (their intervals, rising/setting order, several bodies or
   azimuths) is what makes one position fit them all; the DR enters as a
   prior (offset / sigma_DR)^2.
2. Each distinct assignment is scored at its best grid point,
   cost = sum (Hs_i - D_i)^2 / (sigma_i^2 + (step/2)^2) + |offset|^2 / sigma_DR^2
   (the half step allows for the grid point's distance from the assignment's
   best position), and the best
   few are refined by Gauss-Newton in position (intercepts and azimuths of
   ``model.contact_residual_arcmin``: a small least-squares fix with the DR
   prior), then re-assigned to the nearest images at the refined position and
   refined again until the assignment is stable (at most three rounds: the
   grid is capped at 1600 points, so for closely spaced images it can be
   coarser than a third of the spacing).
3. Ranking by the refined cost.  Relative weights exp(-cost/2) give each
   assignment a probability; a contact is assigned when the assignments that
   together hold ``confidence`` (default 0.99) agree on it.  Otherwise it is
   left unassigned and flagged ambiguous, with the alternatives, instead of a
   guess.

sigma_i: the image's sigma (default 2') and the timing scatter (0.25 s) times
the contact's rate, combined.  sigma_DR: ``dr_sigma_nm`` at the top level of
the session (an extra key) or 30 nmi; 1 nmi when the track is known.

Cold start (``cold_start``): with no usable DR (> 200 nmi off, or none), the
globe is searched coarse-to-fine (a 4 deg grid of positions, then the best
cells at 1 deg and the grid search above at each) and candidate positions
with their assignments are returned ranked; the result says how many distinct
candidates fit.  Several fit more often than not with only a few contacts:
report, do not choose.
"""
import math
from array import array as _array

from engine.almanac import Position
from engine.angles import cosd
from engine.model import contact_residual_arcmin, sextant_altitude_deg
from engine.sphere import move_nm

DEFAULT_DR_SIGMA_NM = 30.0
DEFAULT_IMAGE_SIGMA_ARCMIN = 2.0
DEFAULT_TIME_SIGMA_S = 0.25
DEFAULT_CONFIDENCE = 0.99
MAX_GRID_POINTS = 1600
REFINE_TOP = 8
KEEP_HYPOTHESES = 2 * REFINE_TOP      # grid-search assignments kept when pruning (>= REFINE_TOP)


class IdentifyError(ValueError):
    """The session cannot be identified (no images, no contacts)."""


class _CachedAlmanac:
    """Memoises ``position(body, t_us, dut1_us)``: the grid search asks for the same instants
    at many positions.  The numbers of a place are kept unboxed in a small array('d') (a
    Position object took about 400 bytes of a board's heap; one array for all places would be
    a block that a fragmented heap cannot find) and a Position is made again on each call;
    another number type than float (an emulation of single precision) is kept as the
    almanac's object."""
    __slots__ = ("alm", "cache")

    def __init__(self, alm):
        self.alm = alm
        self.cache = {}                 # key -> array('d') of the place's numbers, or the Position

    def position(self, body, t_us, dut1_us=0):
        key = (body, t_us, dut1_us)
        v = self.cache.get(key)
        if v is None:
            p = self.alm.position(body, t_us, dut1_us)
            if type(p.gha_deg) is not float:
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
    """The contacts to identify.  An assignment (of an image to every contact) is a sequence of
    indices into ``images`` (sorted by deviation): ``bytes`` (a tuple past 255 images), whose
    entries cost a byte each where a tuple of image ids costs a pointer."""
    __slots__ = ("session", "alm", "contacts", "images", "sig", "dr", "dr_sigma", "labels", "label_idx", "pack")


def _setup(session, alm, dr_sigma_nm):
    p = _Problem()
    p.session = session
    p.alm = alm if isinstance(alm, _CachedAlmanac) else _CachedAlmanac(alm)
    p.contacts = [c for c in session.contacts if not c.void]
    if not p.contacts:
        raise IdentifyError("contacts: none to identify")
    p.images = sorted([(iid, dev, s) for iid, dev, s in session.images], key=lambda im: im[1])
    if not p.images:
        raise IdentifyError("instrument.images: none")
    p.dr = [session.track.position_at(c.t_us) for c in p.contacts]
    if dr_sigma_nm is None:
        dr_sigma_nm = session.extra.get("dr_sigma_nm", DEFAULT_DR_SIGMA_NM)
        if session.track.known:
            dr_sigma_nm = 1.0
    p.dr_sigma = float(dr_sigma_nm)
    p.labels = [c.image for c in p.contacts]
    ids = [im[0] for im in p.images]
    p.label_idx = [None if iid is None else ids.index(iid) for iid in p.labels]
    p.pack = bytes if len(ids) < 256 else tuple
    sig_img = dict((iid, s if s is not None else DEFAULT_IMAGE_SIGMA_ARCMIN) for iid, _d, s in p.images)
    p.sig = []
    for c, (lat, lon) in zip(p.contacts, p.dr):
        _hs, rate = sextant_altitude_deg(p.alm, c.body, c.limb, c.t_us, lat, lon, session.observer)
        s_img = sig_img.get(c.image, DEFAULT_IMAGE_SIGMA_ARCMIN) if c.image else max(sig_img.values())
        p.sig.append(math.sqrt(s_img ** 2 + (rate * 60.0 * (DEFAULT_TIME_SIGMA_S + c.sigma_s)) ** 2))
    return p


def _assign_at(p, positions, slack_nm=0.0):
    """(assignment, cost without prior) for contacts at the given positions (an iterable of
    (lat, lon), one per contact); ``slack_nm`` (half the grid step) is added in quadrature to
    each sigma, so that a grid point a few miles from an assignment's best position does not
    score it out."""
    devs = [im[1] for im in p.images]
    assign = bytearray(len(p.contacts)) if p.pack is bytes else [0] * len(p.contacts)
    cost = 0.0
    k = 0
    for lat, lon in positions:
        c = p.contacts[k]
        hs = sextant_altitude_deg(p.alm, c.body, c.limb, c.t_us, lat, lon, p.session.observer)[0]
        j = p.label_idx[k]
        if j is not None:
            dev = p.session.deviation_of(p.labels[k])
        else:
            j = _nearest(devs, hs)
            dev = devs[j]
        assign[k] = j
        e = (hs - dev) * 60.0
        cost += e * e / (p.sig[k] * p.sig[k] + slack_nm * slack_nm)
        k += 1
    return p.pack(assign), cost


def _ids(p, assign):
    """The image ids of an assignment."""
    return [p.images[j][0] for j in assign]


def _nearest(devs, x):
    best = 0
    for j in range(1, len(devs)):
        if abs(devs[j] - x) < abs(devs[best] - x):
            best = j
    return best


def _offset_positions(p, north, east):
    """The DR positions moved by (north, east) nmi, one at a time."""
    for lat, lon in p.dr:
        yield move_nm(lat, lon, north, east)


def _refine(p, assign, north, east, iterations=5):
    """Least-squares offset for a fixed assignment, with the DR prior. Returns (cost, north, east)."""
    w0 = 1.0 / (p.dr_sigma * p.dr_sigma)
    for _ in range(iterations):
        a11 = a12 = a22 = w0
        b1 = -w0 * north
        b2 = -w0 * east
        for k, c in enumerate(p.contacts):
            lat, lon = move_nm(p.dr[k][0], p.dr[k][1], north, east)
            dev = p.images[assign[k]][1]
            r, zn = contact_residual_arcmin(p.alm, c.body, c.limb, dev, c.t_us, lat, lon, p.session.observer)
            w = 1.0 / (p.sig[k] * p.sig[k])
            cz, sz = cosd(zn), math.sin(zn * math.pi / 180.0)
            # r = Ho - Hc; moving dN toward the body raises Hc: r changes by -(cz dN + sz dE)
            a11 += w * cz * cz
            a12 += w * cz * sz
            a22 += w * sz * sz
            b1 += w * cz * r
            b2 += w * sz * r
        det = a11 * a22 - a12 * a12
        dn = (a22 * b1 - a12 * b2) / det
        de = (a11 * b2 - a12 * b1) / det
        step = math.sqrt(dn * dn + de * de)
        if step > 60.0:
            dn, de = dn * 60.0 / step, de * 60.0 / step
        north += dn
        east += de
        if step < 0.01:
            break
    cost = (north * north + east * east) * w0
    for k, c in enumerate(p.contacts):
        lat, lon = move_nm(p.dr[k][0], p.dr[k][1], north, east)
        r, _zn = contact_residual_arcmin(p.alm, c.body, c.limb, p.images[assign[k]][1], c.t_us,
                                         lat, lon, p.session.observer)
        cost += (r / p.sig[k]) ** 2
    return cost, north, east


def _grid(radius_nm, step_nm):
    """(n, step_nm): half-width in steps and the step of the search grid (at most
    ``MAX_GRID_POINTS`` points in its square)."""
    n = int(radius_nm / step_nm)
    while (2 * n + 1) ** 2 > MAX_GRID_POINTS:
        step_nm *= 1.25
        n = int(radius_nm / step_nm)
    return n, step_nm


def _grid_points(n, step_nm, radius_nm):
    """The grid points (north, east) within ``radius_nm``, one at a time: a list of them
    would be the largest object of a reduction on a board's heap."""
    for i in range(-n, n + 1):
        for j in range(-n, n + 1):
            if (i * i + j * j) * step_nm * step_nm <= radius_nm * radius_nm * 1.0001:
                yield (i * step_nm, j * step_nm)


def _min_spacing_arcmin(images):
    devs = [im[1] for im in images]
    if len(devs) < 2:
        return 600.0
    return min(devs[k + 1] - devs[k] for k in range(len(devs) - 1)) * 60.0


def _hypotheses(p, radius_nm, step_nm=None):
    """{assignment: (cost, north, east)} of the grid search, at most ``KEEP_HYPOTHESES`` +
    ``REFINE_TOP`` of them (see ``_prune``), in the order they were first met (pruning reorders
    by cost).  While searching the table is two short lists, pruned in place: a dict growing
    and made again at each pruning churns a board's heap with tables of a few hundred bytes."""
    spacing = _min_spacing_arcmin(p.images)
    if step_nm is None:
        step_nm = min(30.0, max(5.0, spacing / 3.0))
    n, step_nm = _grid(radius_nm, step_nm)
    w0 = 1.0 / (p.dr_sigma * p.dr_sigma)
    keys = []
    vals = []                                   # (cost, north, east)
    for north, east in _grid_points(n, step_nm, radius_nm):
        assign, cost = _assign_at(p, _offset_positions(p, north, east), 0.5 * step_nm)
        cost += (north * north + east * east) * w0
        k = 0
        while k < len(keys) and keys[k] != assign:
            k += 1
        if k == len(keys):
            keys.append(assign)
            vals.append((cost, north, east))
            if len(keys) > KEEP_HYPOTHESES + REFINE_TOP:
                _prune(keys, vals)
        elif cost < vals[k][0]:
            vals[k] = (cost, north, east)
    best = {}
    for k in range(len(keys)):
        best[keys[k]] = vals[k]
    return best


def _prune(keys, vals):
    """Keep the ``KEEP_HYPOTHESES`` cheapest entries (ties in their order), in place.  Only the
    ``REFINE_TOP`` cheapest are used, and an assignment dropped here is outranked by at least
    ``KEEP_HYPOTHESES`` others for good (their costs only fall), so the result is the same with a
    bounded heap."""
    order = sorted(range(len(keys)), key=lambda k: vals[k][0])[:KEEP_HYPOTHESES]
    kk = [keys[k] for k in order]
    vv = [vals[k] for k in order]
    del keys[len(kk):]
    del vals[len(vv):]
    for k in range(len(kk)):
        keys[k] = kk[k]
        vals[k] = vv[k]


def identify(session, alm, dr_sigma_nm=None, radius_nm=None, confidence=DEFAULT_CONFIDENCE):
    """Identify the unlabelled contacts of a session (labels given are kept as constraints).

    Returns a dict: ``contacts`` (per non-void contact: ``index``, ``image`` (assigned or
    given, None when ambiguous), ``given`` (bool), ``confidence``, ``alternatives``
    (other images it may be), ``ambiguous``), ``hypotheses`` (ranked: ``images`` per
    contact, ``cost``, ``probability``, ``offset_nm`` (north, east) from the DR),
    ``misfit_labels`` (labelled contacts that fit another image far better),
    ``warnings``."""
    p = _setup(session, alm, dr_sigma_nm)
    if radius_nm is None:
        radius_nm = 4.0 * p.dr_sigma + 60.0
    cands = _hypotheses(p, radius_nm)
    ranked = sorted(cands.items(), key=lambda kv: kv[1][0])[:REFINE_TOP]
    refined = []
    seen = set()
    for assign, (_c, north, east) in ranked:
        for _round in range(3):
            cost, north, east = _refine(p, assign, north, east)
            # the nearest images at the refined position (the grid may have been coarse)
            again = _assign_at(p, _offset_positions(p, north, east))[0]
            if again == assign:
                break
            assign = again
        if assign in seen:
            continue
        seen.add(assign)
        refined.append((cost, assign, north, east))
    refined.sort(key=lambda r: (r[0], list(r[1])))       # ties: the lower images first
    best_cost = refined[0][0]
    weights = [math.exp(-0.5 * (r[0] - best_cost)) for r in refined]
    total = sum(weights)
    probs = [w / total for w in weights]
    # the set of hypotheses holding `confidence` of the probability
    keep = []
    acc = 0.0
    for k in range(len(refined)):
        keep.append(k)
        acc += probs[k]
        if acc >= confidence:
            break
    out_contacts = []
    warnings = []
    refined = [(r[0], _ids(p, r[1]), r[2], r[3]) for r in refined]
    best_assign = refined[0][1]
    for i, c in enumerate(p.contacts):
        given = p.labels[i] is not None
        options = []
        for k in keep:
            a = refined[k][1][i]
            if a not in options:
                options.append(a)
        conf = sum(probs[k] for k in range(len(refined)) if refined[k][1][i] == best_assign[i])
        ambiguous = (not given) and len(options) > 1
        out_contacts.append({"index": c.index, "image": None if ambiguous else best_assign[i], "given": given,
                             "confidence": round(conf, 4), "alternatives": [o for o in options if o != best_assign[i]],
                             "ambiguous": ambiguous})
        if ambiguous:
            warnings.append("contact %d: image ambiguous (%s); left unidentified"
                            % (c.index, " or ".join(options)))
    # labelled contacts that another image explains far better at the best position
    misfit = []
    n_b, e_b = refined[0][2], refined[0][3]
    devs = [im[1] for im in p.images]
    for i, c in enumerate(p.contacts):
        if p.labels[i] is None:
            continue
        lat, lon = move_nm(p.dr[i][0], p.dr[i][1], n_b, e_b)
        hs = sextant_altitude_deg(p.alm, c.body, c.limb, c.t_us, lat, lon, session.observer)[0]
        j = _nearest(devs, hs)
        own = abs(hs - session.deviation_of(p.labels[i])) * 60.0
        if p.images[j][0] != p.labels[i] and own > 4.0 * p.sig[i] and own > 2.0 * abs(hs - devs[j]) * 60.0:
            misfit.append({"index": c.index, "label": p.labels[i], "fits": p.images[j][0],
                           "label_residual_arcmin": round(own, 2)})
            warnings.append("contact %d: labelled %s but fits %s (%.1f' off its label)"
                            % (c.index, p.labels[i], p.images[j][0], own))
    hyps = [{"images": list(r[1]), "cost": round(r[0], 3), "probability": round(pr, 4),
             "offset_nm": [round(r[2], 2), round(r[3], 2)]} for r, pr in zip(refined, probs)]
    return {"contacts": out_contacts, "hypotheses": hyps, "misfit_labels": misfit, "warnings": warnings,
            "dr_sigma_nm": p.dr_sigma, "radius_nm": radius_nm}


def identify_session(session, alm, dr_sigma_nm=None):
    """The hook ``engine.reduce_session`` calls before the fix: assign images to the
    contacts whose ``image`` is null, in place, when the assignment is confident;
    return warnings (one line per assignment made and per ambiguity)."""
    todo = [c for c in session.contacts if c.image is None and not c.void]
    if not todo:
        return []
    res = identify(session, alm, dr_sigma_nm)
    by_index = dict((c.index, c) for c in session.contacts)
    notes = []
    for rc in res["contacts"]:
        c = by_index[rc["index"]]
        if c.image is None and rc["image"] is not None:
            c.image = rc["image"]
            notes.append("contact %d identified as %s (confidence %.2f)" % (c.index, rc["image"], rc["confidence"]))
    return notes + res["warnings"]


def cold_start(session, alm, top=5, coarse_deg=4.0):
    """Search the globe for positions (and assignments) that explain every contact, with no DR.

    Returns a ranked list of candidates ``{"utc", "lat_deg", "lon_deg", "images", "rms_arcmin",
    "cost"}``: the position at the last contact (course and speed kept), distinct by
    at least 60 nmi.  Coarse grid of ``coarse_deg``, then the best cells searched
    at 1 deg and refined by the grid search of ``identify``."""
    from engine.model import Track
    from engine.sphere import distance_nm
    from engine.timescale import format_utc
    p = _setup(session, alm, 1e6)
    tr = session.track
    t0 = tr.t0_us
    last = max(range(len(p.contacts)), key=lambda k: p.contacts[k].t_us)
    coarse = []
    lat = -80.0
    while lat <= 80.0:
        step_lon = coarse_deg / max(cosd(lat), 0.2)
        lon = -180.0
        while lon < 180.0:
            coarse.append((lat, lon))
            lon += step_lon
        lat += coarse_deg
    scored = []
    for lat, lon in coarse:
        t = Track(t0, lat, lon, tr.course_deg, tr.speed_kn)
        pos = [t.position_at(c.t_us) for c in p.contacts]
        _a, cost = _assign_at(p, pos)
        scored.append((cost, lat, lon))
    scored.sort()
    cands = []
    for cost0, lat, lon in scored[:4 * top]:
        sub = _Problem()
        sub.session = session
        sub.alm = p.alm
        sub.contacts = p.contacts
        sub.images = p.images
        sub.sig = p.sig
        sub.labels = p.labels
        sub.label_idx = p.label_idx
        sub.pack = p.pack
        sub.dr_sigma = 1e4
        t = Track(t0, lat, lon, tr.course_deg, tr.speed_kn)
        sub.dr = [t.position_at(c.t_us) for c in p.contacts]
        hyp = _hypotheses(sub, coarse_deg * 60.0, step_nm=coarse_deg * 60.0 / 8.0)
        for assign, (_c, north, east) in sorted(hyp.items(), key=lambda kv: kv[1][0])[:2]:
            cost, n2, e2 = _refine(sub, assign, north, east, iterations=8)
            pos = [move_nm(la, lo, n2, e2) for la, lo in sub.dr]
            ss = 0.0
            for k, c in enumerate(p.contacts):
                r, _z = contact_residual_arcmin(p.alm, c.body, c.limb, p.images[assign[k]][1], c.t_us,
                                                pos[k][0], pos[k][1], session.observer)
                ss += r * r
            cands.append((cost, pos[last][0], pos[last][1], _ids(p, assign), math.sqrt(ss / len(pos))))
    cands.sort(key=lambda c: c[0])
    out = []
    for cost, plat, plon, assign, rms in cands:
        if any(distance_nm(plat, plon, o["lat_deg"], o["lon_deg"]) < 60.0 for o in out):
            continue
        out.append({"utc": format_utc(p.contacts[last].t_us, 0), "lat_deg": round(plat, 4),
                    "lon_deg": round(plon, 4), "images": list(assign), "cost": round(cost, 3),
                    "rms_arcmin": round(rms, 3)})
        if len(out) >= top:
            break
    return out
