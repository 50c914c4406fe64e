"""Calibration of the instrument at a known position.

In a calibration session the track is truth (``"known": true``: a GPS
track, or a berth).  Each contact then says what the image's deviation really
is: the forward model (``engine.model``, the one the fix inverts) gives the
residual F_i = Ho(D_k + c_k, t_i - tau) - Hc(t_i - tau) at the known position
of contact i of image k, which must vanish for the image's true offset c_k
(arcmin) and the observer's reaction delay tau (s; the press comes tau after the
real contact, so the true contact instant is t_i - tau).

Linearised, F_i ~ F_i0 + g_i c_k - r_i tau with g_i = dHo/dD (~1) and r_i the
rate of the altitude (arcmin/s).  A late stamp makes a rising image seem to
touch when the body is already higher (the residual goes negative), a setting
one when it is lower, so with contacts of the same image rising and setting
the per-image offsets and one common delay separate.  When no image has
contacts in both directions the delay cannot be told from the offsets: it is
held at 0 (or at the value given) and a warning says so; the offsets then
carry the mean delay of that direction.

Solution: weighted Gauss-Newton, the partial derivatives by central
differences of the forward model itself (0.5' and 0.5 s), each contact
weighted by its timing scatter sigma_t (default 0.25 s) times its rate, plus a
floor of 0.1'.  Contacts over ``reject_sigma`` (4) standardised residuals are
dropped one at a time (worst first).  The sigma of each deviation comes from
the normal matrix scaled by the a-posteriori unit weight (never below 1).

Then the plate angles: each calibrated deviation is 2 sum c_j a_j with the
image's coefficient vector (``coef``, stored in instrument files made from
plate angles), so the angles follow by least squares
(``instrument.fit_plate_angles``); the rms misfit (arcmin) shows whether the
plates act as the ladder model says (a large misfit: wedge-shaped plates,
confused images, or a wrong coefficient vector).
"""
import math

from engine.instrument import Instrument, InstrumentImage, fit_plate_angles, invert
from engine.model import contact_residual_arcmin
from engine.timescale import format_utc

FORMAT = "limbclock-calibration/1"
D_ARCMIN = 0.5            # step of the numerical derivative in deviation
D_S = 0.5                 # step of the numerical derivative in time
FLOOR_ARCMIN = 0.1        # weight floor per contact, chosen for this project: above the model (0.002') and almanac (0.01') errors
MAX_DELAY_S = 2.0


class CalibrationError(ValueError):
    """A session that cannot calibrate the instrument; the message says why."""


def _residual(alm, session, c, dev_deg, tau_s):
    t = c.t_us - int(round(tau_s * 1e6))
    lat, lon = session.track.position_at(t)
    return contact_residual_arcmin(alm, c.body, c.limb, dev_deg, t, lat, lon, session.observer)[0]


def calibrate_session(session, alm=None, instrument=None, delay="auto", sigma_time_s=0.25, reject_sigma=4.0,
                      require_known=True):
    """Calibrate from a session (``engine.session.Session`` or its JSON text).

    ``instrument``: optional ``engine.instrument.Instrument`` giving coefficient
    vectors and plate angles (otherwise taken from the session's instrument
    keys ``coef`` / ``plate_angles_deg`` when present).  ``delay``: "auto"
    (estimate when separable), a number of seconds to hold, or None/0 to hold 0.
    Returns the ``limbclock calibrate --json`` dict."""
    if isinstance(session, (str, bytes, bytearray)):
        from engine.session import parse_session
        session = parse_session(session)
    if alm is None:
        from engine import almanac
        alm = almanac.load()
    warnings = []
    if not session.track.known:
        if require_known:
            raise CalibrationError("track.known: the session's track is not marked known "
                                   "(calibration needs the true position)")
        warnings.append("track not marked known: calibrating against the DR")
    contacts = [c for c in session.contacts if not c.void and getattr(c, "dup_of", None) is None]
    unlabelled = [c for c in contacts if c.image is None]
    if unlabelled:
        _label_at_known_position(session, alm, unlabelled, warnings)
    contacts = [c for c in contacts if c.image is not None]
    if not contacts:
        raise CalibrationError("contacts: none usable (all void or unidentified)")
    nominal = {}
    for iid, dev, _s in session.images:
        nominal[iid] = dev
    ids = []
    for c in contacts:
        if c.image not in ids:
            ids.append(c.image)
    ids.sort(key=lambda i: nominal[i])
    col = dict((iid, k) for k, iid in enumerate(ids))

    # directions per image from the forward model's rate at the nominal deviation
    rates = []
    for c in contacts:
        a = _residual(alm, session, c, nominal[c.image], -D_S)
        b = _residual(alm, session, c, nominal[c.image], D_S)
        rates.append((a - b) / (2.0 * D_S))       # dF/dtau = -rate
    both = set()
    dirs = {}
    for c, r in zip(contacts, rates):
        dirs.setdefault(c.image, set()).add(r > 0)
    for iid, s in dirs.items():
        if len(s) == 2:
            both.add(iid)
    if delay == "auto":
        estimate_delay = bool(both)
        fixed_delay = 0.0
        if not both:
            warnings.append("no image was timed both rising and setting: the reaction delay cannot be "
                            "separated from the image offsets; held at 0 s (the offsets include it)")
    else:
        estimate_delay = False
        fixed_delay = float(delay or 0.0)
        if abs(fixed_delay) > MAX_DELAY_S:
            raise CalibrationError("delay: %r s is not within -2..2 s" % (delay,))

    used = list(range(len(contacts)))
    rejected = []
    while True:
        sol = _solve(alm, session, contacts, used, ids, col, nominal, estimate_delay, fixed_delay, sigma_time_s)
        if sol is None:
            raise CalibrationError("contacts: the offsets and the delay cannot be solved from these contacts")
        x, cov, s0, res = sol
        worst = None
        for i, r, sg in res:
            w = abs(r) / (sg * max(s0, 1.0))
            if w > reject_sigma and (worst is None or w > worst[1]):
                worst = (i, w)
        n_img = sum(1 for i in used if contacts[i].image == contacts[worst[0]].image) if worst else 0
        if worst is None or n_img <= 1 or len(used) <= len(ids) + (1 if estimate_delay else 0) + 1:
            break
        used.remove(worst[0])
        rejected.append(contacts[worst[0]].index)
        warnings.append("contact %d rejected: %.1f sigma from the calibration" % (contacts[worst[0]].index,
                                                                                  worst[1]))
    tau = x[len(ids)] if estimate_delay else fixed_delay
    tau_sigma = math.sqrt(cov[len(ids)][len(ids)]) * max(s0, 1.0) if estimate_delay else None
    out_images = []
    res_by_contact = dict((i, r) for i, r, _sg in res)
    for iid in ids:
        k = col[iid]
        n = sum(1 for i in used if contacts[i].image == iid)
        rising = sum(1 for i in used if contacts[i].image == iid and rates[i] > 0)
        out_images.append({"id": iid, "deviation_deg": round(nominal[iid] + x[k] / 60.0, 7),
                           "sigma_arcmin": round(math.sqrt(cov[k][k]) * max(s0, 1.0), 4), "contacts": n,
                           "nominal_deg": nominal[iid], "offset_arcmin": round(x[k], 4),
                           "rising": rising, "setting": n - rising})
    uncalibrated = [iid for iid, _d, _s in session.images if iid not in col]

    coefs = _coefficients(session, instrument)
    plate = None
    if coefs:
        have = [im for im in out_images if coefs.get(im["id"])]
        if have and len(set(len(coefs[im["id"]]) for im in have)) == 1:
            plate = fit_plate_angles([im["deviation_deg"] for im in have], [coefs[im["id"]] for im in have],
                                     [max(im["sigma_arcmin"], 0.01) for im in have])
        if plate is None:
            warnings.append("plate angles not determined: the calibrated images do not involve every plate angle")
    else:
        warnings.append("plate angles not fitted: the images carry no coefficient vectors (coef)")
    last = max(contacts[i].t_us for i in used)
    return {"format": FORMAT, "calibrated_utc": format_utc(last, 0),
            "images": out_images, "uncalibrated": uncalibrated,
            "reaction_delay_s": round(tau, 4),
            "reaction_delay_sigma_s": None if tau_sigma is None else round(tau_sigma, 4),
            "reaction_delay_estimated": estimate_delay,
            "plate_angles_deg": None if plate is None else [round(a, 6) for a in plate[0]],
            "plate_angles_sigma_arcmin": None if plate is None else [round(s, 4) for s in plate[1]],
            "plate_fit_rms_arcmin": None if plate is None else round(plate[2], 4),
            "sigma0": round(s0, 3), "contacts_used": len(used), "rejected": rejected,
            "contacts": [{"index": contacts[i].index, "image": contacts[i].image,
                          "direction": "rising" if rates[i] > 0 else "setting",
                          "residual_arcmin": round(res_by_contact[i], 4) if i in res_by_contact else None,
                          "used": i in used} for i in range(len(contacts))],
            "warnings": warnings}


def _solve(alm, session, contacts, used, ids, col, nominal, estimate_delay, fixed_delay, sigma_time_s):
    m = len(ids) + (1 if estimate_delay else 0)
    x = [0.0] * m
    cov = None
    for _it in range(4):
        tau = x[len(ids)] if estimate_delay else fixed_delay
        ata = [[0.0] * m for _ in range(m)]
        atb = [0.0] * m
        rows = []
        for i in used:
            c = contacts[i]
            k = col[c.image]
            dev = nominal[c.image] + x[k] / 60.0
            f0 = _residual(alm, session, c, dev, tau)
            g = (_residual(alm, session, c, dev + D_ARCMIN / 60.0, tau)
                 - _residual(alm, session, c, dev - D_ARCMIN / 60.0, tau)) / (2.0 * D_ARCMIN)
            dt = (_residual(alm, session, c, dev, tau + D_S) - _residual(alm, session, c, dev, tau - D_S)) / (2.0 * D_S)
            sg = math.sqrt((dt * sigma_time_s) ** 2 + FLOOR_ARCMIN ** 2)
            row = [0.0] * m
            row[k] = g
            if estimate_delay:
                row[len(ids)] = dt
            w = 1.0 / (sg * sg)
            for a in range(m):
                if row[a] == 0.0:
                    continue
                atb[a] -= w * row[a] * f0
                for b in range(m):
                    ata[a][b] += w * row[a] * row[b]
            rows.append((i, f0, sg, row))
        cov = invert(ata)
        if cov is None:
            return None
        step = [sum(cov[a][b] * atb[b] for b in range(m)) for a in range(m)]
        x = [xa + sa for xa, sa in zip(x, step)]
        if estimate_delay and abs(x[len(ids)]) > 10.0:
            return None
        if max(abs(s) for s in step[:len(ids)]) < 1e-4 and (not estimate_delay or abs(step[-1]) < 1e-4):
            break
    # residuals at the solution
    tau = x[len(ids)] if estimate_delay else fixed_delay
    res = []
    chi2 = 0.0
    for i, _f0, sg, _row in rows:
        c = contacts[i]
        r = _residual(alm, session, c, nominal[c.image] + x[col[c.image]] / 60.0, tau)
        res.append((i, r, sg))
        chi2 += (r / sg) ** 2
    dof = len(rows) - m
    s0 = math.sqrt(chi2 / dof) if dof > 0 else 1.0
    return x, cov, s0, res


def _coefficients(session, instrument):
    out = {}
    if instrument is not None:
        for im in instrument.images:
            if im.coef:
                out[im.id] = list(im.coef)
    extra = getattr(session, "image_extra", None) or {}
    for iid in extra:
        coef = extra[iid].get("coef") if isinstance(extra[iid], dict) else None
        if iid not in out and isinstance(coef, list) and coef and all(isinstance(v, int) for v in coef):
            out[iid] = coef
    return out


def _label_at_known_position(session, alm, unlabelled, warnings):
    """Contacts with no image: the image whose deviation best fits at the known position
    (``engine.identify`` when the session's track is known)."""
    from engine import identify
    notes = identify.identify_session(session, alm) or []
    warnings.extend(notes)
    for c in unlabelled:
        if c.image is None:
            warnings.append("contact %d: image not identified; left out" % c.index)


def calibrated_instrument(result, session=None, instrument=None, name=None):
    """A ``limbclock-instrument/1`` ``Instrument`` with the calibration applied: calibrated
    images get ``source`` "calibrated" and the time; the others keep their nominal values."""
    cal = dict((im["id"], im) for im in result["images"])
    images = []
    if instrument is not None:
        base = [(im.id, im.deviation_deg, im.sigma_arcmin, im.coef) for im in instrument.images]
    else:
        extra = getattr(session, "image_extra", None) or {}
        base = [(iid, d, s, (extra.get(iid) or {}).get("coef")) for iid, d, s in session.images]
    for iid, dev, sig, coef in base:
        c = cal.get(iid)
        if c:
            images.append(InstrumentImage(iid, c["deviation_deg"], c["sigma_arcmin"], "calibrated",
                                          result["calibrated_utc"], coef, {"contacts": c["contacts"]}))
        else:
            images.append(InstrumentImage(iid, dev, sig, "nominal", None, coef))
    plate = result.get("plate_angles_deg")
    if plate is None and instrument is not None:
        plate = instrument.plate_angles_deg
    extra = {"calibration": {"plate_fit_rms_arcmin": result.get("plate_fit_rms_arcmin"),
                             "sigma0": result.get("sigma0"), "contacts_used": result.get("contacts_used")}}
    # a delay held at 0 because it could not be separated is not a measurement: leave it unknown
    estimated = result.get("reaction_delay_estimated")
    return Instrument(images, name or (instrument.name if instrument is not None else "calibrated instrument"),
                      plate, result.get("reaction_delay_s") if estimated else None,
                      result.get("reaction_delay_sigma_s") if estimated else None, extra)
