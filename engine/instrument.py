"""The instrument: image ladder from plate angles, Fresnel brightness, instrument files.

Optical model
-------------
The instrument is a stack of N thin glass plates whose planes share one hinge
direction (their line of intersection), separated by small fixed angles
``plate_angles_deg = [a1, a2, ...]`` (a1 between plates 0 and 1, a2 between
plates 1 and 2, ...).  Light from the body enters in front of plate 0, the eye
is behind the last plate.  Besides the direct image (all plates crossed), a
ray can make *excursions*: reflect backwards off plate j, then forwards off an
earlier plate i < j, and go on.  The next excursion must turn back at a plate
j' > i (the ray has just left plate i going forwards).  An image of order k
has k excursions = 2k reflections.

Two reflections in one medium off surfaces at angle A turn every ray lying in
the principal plane by 2A whatever its incidence (the sextant principle), so
an excursion (i, j) deviates the ray by 2 (a_{i+1} + ... + a_j) and an image
deviates by 2 sum_k c_k a_k, with non-negative integer coefficients c (for two
angles X, Y: 2(mX + nY), c = (m, n)).  Paths with the same coefficients land
on the same deviation and are counted together (``paths``).

Limits of the model (say them to the user, they are real):
- Each plate acts as one reflector: its two parallel faces give images at the
  same deviation and are summed incoherently (Stokes' formulas for a plate:
  R_plate = 2R/(1+R), T_plate = (1-R)/(1+R) for a non-absorbing plate; Hecht,
  *Optics*, multiple-beam section [from memory]).  A ray that reflects *inside*
  a glass wedge and leaves through a tilted face picks up a deviation of about
  2nX that depends on incidence and colour (derived for this project by ray
  tracing a wedge: 3.04X at normal incidence, 3.65X at 45 deg): the plates
  must be air-spaced with parallel faces for the ladder to hold.
- Brightness assumes every reflection and transmission happens at one angle
  of incidence ``incidence_deg`` (default 45 deg); the plate angles change the
  true incidence by a few degrees between reflections, which changes the
  reflectances by a few percent of themselves.  Sunlight is unpolarised: the s
  and p intensities are propagated separately (the plane of incidence is the
  same for every reflection when the ray lies in the principal plane) and
  averaged at the end.  Glass absorption is neglected; an absorbing shade
  glass multiplies every image by 10**-OD.
- A ray out of the principal plane, or an instrument held turned (yawed) by
  psi away from the body's azimuth, makes contact when the body is lower:
  tan h = cos(psi) tan(2X) (``yaw_contact_deg``; 0.91' low at 30 deg for
  psi = 2 deg; derived for this project, checked by a 3-D ray trace in
  ``tests/test_instrument.py``).  Calibration at a known position absorbs
  what is systematic; ``yaw_loss_arcmin`` lets the error model carry the rest.

Flags.  An image is *faint* when its brightness is below ``faint_ratio``
(default 1e-3, 7.5 magnitudes) times the brightest reflected image's: the eye
adapted to the bright images will not pick it out, or below ``min_fraction``
(default 1e-11) of the body's own surface brightness after the shade glass
(about 0.02 cd/m2 for the Sun, 1.6e9 cd/m2 [from memory]: night-time levels).
An image is *unsafe* for the Sun when it passes more than 3.2e-5 of the
Sun's light (the visible-band limit of solar viewing filters, ISO 12312-2
[from memory]).  Two images closer than ``confuse_deg`` (default 0.25 deg)
form a *confusable pair*: the eye may time the wrong one.

Instrument file ``limbclock-instrument/1`` (JSON, our own design)::

    {"format": "limbclock-instrument/1", "name": "three-plate stack",
     "plate_angles_deg": [2.7, 4.05],            # or null when unknown
     "images": [{"id": "i01", "deviation_deg": 5.4, "sigma_arcmin": 2.0,
                 "source": "nominal" | "calibrated", "calibrated_utc": null,
                 "coef": [1, 0]}, ...],          # coef optional: multiples of each plate angle
     "reaction_delay_s": null, "reaction_delay_sigma_s": null}

Extra keys are kept.  The ``images`` list has the same shape as a session's
``instrument.images``, so an instrument file can be pasted into a session.
"""
import json
import math

from engine.angles import asind, atan2d, cosd, sind

FORMAT = "limbclock-instrument/1"
GLASS_N = 1.52                 # crown glass, typical (Hecht, Optics [from memory])
DEFAULT_INCIDENCE_DEG = 45.0
DEFAULT_FAINT_RATIO = 1e-3
DEFAULT_MIN_FRACTION = 1e-11
SUN_SAFE_FRACTION = 3.2e-5     # ISO 12312-2 visible transmittance limit [from memory]
DEFAULT_CONFUSE_DEG = 0.25
DEFAULT_PLATE_SIGMA_ARCMIN = 1.0   # nominal tolerance of a plate angle when unknown (common practice)
MAX_ORDER = 4


class InstrumentError(ValueError):
    """A malformed instrument description or ladder request; the message names the field."""


# ---------------------------------------------------------------------------
# Fresnel reflection (Hecht, Optics, ch. 4; Born & Wolf, Principles of Optics 1.5)

def fresnel_rs_rp(incidence_deg, n1=1.0, n2=GLASS_N):
    """Intensity reflectances (Rs, Rp) of one interface from medium n1 into n2.

    r_s = (n1 cos i - n2 cos t)/(n1 cos i + n2 cos t), r_p = (n2 cos i - n1 cos t)/(n2 cos i + n1 cos t),
    n1 sin i = n2 sin t.  Total internal reflection gives (1, 1).
    """
    if not 0.0 <= incidence_deg <= 90.0:
        raise InstrumentError("incidence_deg: %r not within 0..90" % (incidence_deg,))
    s_t = n1 * sind(incidence_deg) / n2
    if s_t >= 1.0:
        return 1.0, 1.0
    ci = cosd(incidence_deg)
    ct = math.sqrt(1.0 - s_t * s_t)
    rs = (n1 * ci - n2 * ct) / (n1 * ci + n2 * ct)
    rp = (n2 * ci - n1 * ct) / (n2 * ci + n1 * ct)
    return rs * rs, rp * rp


def plate_rt(incidence_deg, n=GLASS_N):
    """(Rs, Rp, Ts, Tp) of a thin non-absorbing plate with parallel faces, multiple
    reflections summed incoherently (Stokes): R = 2r/(1+r), T = (1-r)/(1+r)."""
    rs, rp = fresnel_rs_rp(incidence_deg, 1.0, n)
    return (2.0 * rs / (1.0 + rs), 2.0 * rp / (1.0 + rp), (1.0 - rs) / (1.0 + rs), (1.0 - rp) / (1.0 + rp))


def brewster_deg(n=GLASS_N):
    """Brewster angle in degrees, tan B = n (air to glass)."""
    return atan2d(n, 1.0)


# ---------------------------------------------------------------------------
# Yaw (instrument turned away from the body's azimuth)

def yaw_contact_deg(deviation_deg, yaw_deg):
    """Altitude at which an image of deviation D touches the horizon when the hinge is
    yawed by psi from the perpendicular to the body's azimuth: atan(cos psi tan D)."""
    return atan2d(cosd(yaw_deg) * sind(deviation_deg), cosd(deviation_deg))


def yaw_loss_arcmin(deviation_deg, yaw_deg):
    """How much lower (arcmin, >= 0) the contact happens for a yaw of ``yaw_deg``."""
    return (deviation_deg - yaw_contact_deg(deviation_deg, yaw_deg)) * 60.0


def yaw_sigma_arcmin(deviation_deg, yaw_sigma_deg):
    """Mean and rms spread of the yaw loss for a yaw that is normal with sigma psi
    (small angles: loss ~ sin(2D)/4 * psi^2 rad, so mean = k s^2, rms about it = sqrt(2) k s^2)."""
    k = sind(2.0 * deviation_deg) / 4.0 * (math.pi / 180.0) * 60.0   # arcmin per deg^2
    m = k * yaw_sigma_deg * yaw_sigma_deg
    return m, math.sqrt(2.0) * m


# ---------------------------------------------------------------------------
# The ladder

class LadderImage:
    """One image of the ladder (coincident paths merged)."""
    __slots__ = ("id", "deviation_deg", "coef", "order", "paths", "fraction", "rel_brightness",
                 "sigma_arcmin", "faint", "unsafe", "alt_coefs")

    def __init__(self, deviation_deg, coef, order):
        self.id = None
        self.deviation_deg = deviation_deg
        self.coef = coef
        self.order = order
        self.paths = 0
        self.fraction = 0.0          # of the body's light reaching the eye, shade glass included
        self.rel_brightness = 0.0    # relative to the brightest reflected image
        self.sigma_arcmin = 0.0
        self.faint = False
        self.unsafe = False
        self.alt_coefs = []          # other coefficient vectors landing on the same deviation

    def magnitude(self):
        """Brightness in magnitudes below the unattenuated body."""
        return -2.5 * math.log10(self.fraction) if self.fraction > 0 else 99.0

    def to_dict(self):
        return {"id": self.id, "deviation_deg": round(self.deviation_deg, 6), "coef": list(self.coef),
                "order": self.order, "paths": self.paths, "fraction": self.fraction,
                "rel_brightness": self.rel_brightness, "magnitude": round(self.magnitude(), 2),
                "sigma_arcmin": round(self.sigma_arcmin, 3), "faint": self.faint, "unsafe": self.unsafe}


class Ladder:
    """The images of a plate stack: ``images`` (reflected, by deviation), ``direct`` (order 0),
    ``pairs`` (confusable (id_a, id_b, separation_deg)), and the settings used."""
    __slots__ = ("plate_angles_deg", "max_order", "incidence_deg", "shade_od", "n", "images", "direct",
                 "pairs", "confuse_deg", "faint_ratio", "min_fraction")

    def by_id(self, image_id):
        for im in self.images:
            if im.id == image_id:
                return im
        raise KeyError(image_id)

    def visible(self):
        return [im for im in self.images if not im.faint]

    def to_dict(self):
        return {"plate_angles_deg": list(self.plate_angles_deg), "max_order": self.max_order,
                "incidence_deg": self.incidence_deg, "shade_od": self.shade_od, "glass_n": self.n,
                "direct": self.direct.to_dict(), "images": [im.to_dict() for im in self.images],
                "confusable_pairs": [{"a": a, "b": b, "separation_deg": round(s, 6)} for a, b, s in self.pairs],
                "confuse_deg": self.confuse_deg, "faint_ratio": self.faint_ratio,
                "min_fraction": self.min_fraction}


def _excursion_paths(n_plates, max_order):
    """Yield (excursions, transmissions) for every path with 1..max_order excursions.

    excursions: list of (i, j), back off plate j then forward off plate i < j;
    transmissions: number of plates crossed (entry in front of plate 0, exit behind the last).
    """
    last = n_plates - 1
    # stack of (excursions, transmissions so far, plate of the last forward reflection)
    stack = [([], 0, -1)]
    while stack:
        exc, trans, prev_i = stack.pop()
        if exc:
            yield exc, trans + (last - prev_i)
        if len(exc) >= max_order:
            continue
        for j in range(max(prev_i + 1, 1), n_plates):
            for i in range(0, j):
                # forward from prev_i (or entry) to j: crosses prev_i+1 .. j-1; back to i: crosses i+1 .. j-1
                t = trans + (j - prev_i - 1) + (j - i - 1)
                stack.append((exc + [(i, j)], t, i))


def ladder(plate_angles_deg, max_order=2, incidence_deg=DEFAULT_INCIDENCE_DEG, shade_od=0.0, n=GLASS_N,
           confuse_deg=DEFAULT_CONFUSE_DEG, faint_ratio=DEFAULT_FAINT_RATIO, min_fraction=DEFAULT_MIN_FRACTION,
           plate_sigma_arcmin=DEFAULT_PLATE_SIGMA_ARCMIN):
    """Enumerate the images of orders 1..``max_order`` of a plate stack (see the module docstring).

    Images are returned by increasing deviation with ids ``i01``, ``i02``, ...;
    ``sigma_arcmin`` is the deviation's uncertainty from plate angles each
    known to ``plate_sigma_arcmin``: 2 sqrt(sum (c_k s)^2).
    """
    angles = _check_angles(plate_angles_deg)
    if not isinstance(max_order, int) or not 1 <= max_order <= MAX_ORDER:
        raise InstrumentError("max_order: %r not an integer within 1..%d" % (max_order, MAX_ORDER))
    if not 0.0 <= incidence_deg < 90.0:
        raise InstrumentError("incidence_deg: %r not within 0..90" % (incidence_deg,))
    if not 0.0 <= shade_od <= 12.0:
        raise InstrumentError("shade_od: %r not within 0..12" % (shade_od,))
    if not 1.0 < n < 3.0:
        raise InstrumentError("glass_n: %r not within 1..3" % (n,))
    n_plates = len(angles) + 1
    r_s, r_p, t_s, t_p = plate_rt(incidence_deg, n)
    shade = 10.0 ** (-shade_od)
    by_coef = {}
    for exc, trans in _excursion_paths(n_plates, max_order):
        coef = [0] * len(angles)
        for i, j in exc:
            for k in range(i, j):
                coef[k] += 1
        key = tuple(coef)
        refl = 2 * len(exc)
        frac = 0.5 * (r_s ** refl * t_s ** trans + r_p ** refl * t_p ** trans) * shade
        im = by_coef.get(key)
        if im is None:
            dev = 2.0 * sum(c * a for c, a in zip(coef, angles))
            im = by_coef[key] = LadderImage(dev, coef, len(exc))
        elif len(exc) < im.order:
            im.order = len(exc)
        im.paths += 1
        im.fraction += frac
    # merge different coefficient vectors that land on the same deviation (rational angle ratios)
    merged = []
    for im in sorted(by_coef.values(), key=lambda x: (x.deviation_deg, x.order, x.coef)):
        if merged and abs(im.deviation_deg - merged[-1].deviation_deg) < 1e-9:
            head = merged[-1]
            head.paths += im.paths
            head.fraction += im.fraction
            head.alt_coefs.append(im.coef)
            head.order = min(head.order, im.order)
        else:
            merged.append(im)
    direct = LadderImage(0.0, [0] * len(angles), 0)
    direct.id = "direct"
    direct.paths = 1
    direct.fraction = 0.5 * (t_s ** n_plates + t_p ** n_plates) * shade
    direct.rel_brightness = 1.0
    brightest = max(im.fraction for im in merged)
    for k, im in enumerate(merged):
        im.id = "i%02d" % (k + 1)
        im.rel_brightness = im.fraction / brightest
        im.faint = im.rel_brightness < faint_ratio or im.fraction < min_fraction
        im.unsafe = im.fraction > SUN_SAFE_FRACTION
        im.sigma_arcmin = 2.0 * plate_sigma_arcmin * math.sqrt(sum(c * c for c in im.coef))
    direct.unsafe = direct.fraction > SUN_SAFE_FRACTION
    direct.faint = direct.fraction < min_fraction
    lad = Ladder()
    lad.plate_angles_deg = angles
    lad.max_order = max_order
    lad.incidence_deg = incidence_deg
    lad.shade_od = shade_od
    lad.n = n
    lad.images = merged
    lad.direct = direct
    lad.confuse_deg = confuse_deg
    lad.faint_ratio = faint_ratio
    lad.min_fraction = min_fraction
    lad.pairs = confusable_pairs([(im.id, im.deviation_deg) for im in merged if not im.faint], confuse_deg)
    return lad


def confusable_pairs(images, confuse_deg=DEFAULT_CONFUSE_DEG):
    """Pairs ``(id_a, id_b, separation_deg)`` of images closer than ``confuse_deg``.
    ``images`` is a list of ``(id, deviation_deg)``."""
    ims = sorted(images, key=lambda x: x[1])
    out = []
    for a in range(len(ims)):
        for b in range(a + 1, len(ims)):
            sep = ims[b][1] - ims[a][1]
            if sep >= confuse_deg:
                break
            out.append((ims[a][0], ims[b][0], sep))
    return out


def _check_angles(plate_angles_deg):
    if not isinstance(plate_angles_deg, (list, tuple)) or not plate_angles_deg:
        raise InstrumentError("plate_angles_deg: expected a non-empty list of angles")
    if len(plate_angles_deg) > 6:
        raise InstrumentError("plate_angles_deg: %d angles; at most 6 (7 plates)" % len(plate_angles_deg))
    out = []
    for k, a in enumerate(plate_angles_deg):
        if isinstance(a, bool) or not isinstance(a, (int, float)) or a != a:
            raise InstrumentError("plate_angles_deg[%d]: %r is not a number" % (k, a))
        if not 0.0 < a < 30.0:
            raise InstrumentError("plate_angles_deg[%d]: %r not within 0..30 degrees" % (k, a))
        out.append(float(a))
    return out


# ---------------------------------------------------------------------------
# Plate angles from image deviations (least squares on D = 2 sum c_k a_k)

def fit_plate_angles(deviations_deg, coefs, sigmas_arcmin=None):
    """Weighted least squares of plate angles from image deviations and their coefficient vectors.

    Returns ``(angles_deg, sigmas_arcmin_of_angles, rms_misfit_arcmin)``; ``None`` when the
    design is singular (an angle no image depends on).  Plain normal equations (few unknowns).
    """
    if not coefs:
        return None
    m = len(coefs[0])
    ata = [[0.0] * m for _ in range(m)]
    atb = [0.0] * m
    for k, (d, c) in enumerate(zip(deviations_deg, coefs)):
        w = 1.0 / (sigmas_arcmin[k] ** 2) if sigmas_arcmin else 1.0
        for a in range(m):
            atb[a] += w * 2.0 * c[a] * d
            for b in range(m):
                ata[a][b] += w * 4.0 * c[a] * c[b]
    inv = invert(ata)
    if inv is None:
        return None
    x = [sum(inv[a][b] * atb[b] for b in range(m)) for a in range(m)]
    res = [(d - 2.0 * sum(ci * xi for ci, xi in zip(c, x))) * 60.0 for d, c in zip(deviations_deg, coefs)]
    rms = math.sqrt(sum(r * r for r in res) / len(res))
    dof = len(res) - m
    if sigmas_arcmin:
        s0 = math.sqrt(sum((r / s) ** 2 for r, s in zip(res, sigmas_arcmin)) / dof) if dof > 0 else 1.0
        s0 = max(s0, 1.0)
    else:
        s0 = rms * math.sqrt(len(res) / dof) if dof > 0 else 0.0
    sig = [math.sqrt(max(inv[a][a], 0.0)) * s0 for a in range(m)]   # arcmin: the weights are per arcmin^2
    return x, sig, rms


def invert(a):
    """Inverse of a small square matrix (list of lists) by Gauss-Jordan with partial pivoting;
    ``None`` when singular."""
    n = len(a)
    m = [list(row) + [1.0 if i == j else 0.0 for j in range(n)] for i, row in enumerate(a)]
    scale = max([abs(v) for row in a for v in row] + [0.0])
    if scale == 0.0:
        return None
    for col in range(n):
        piv = max(range(col, n), key=lambda r: abs(m[r][col]))
        if abs(m[piv][col]) <= 1e-12 * scale:
            return None
        m[col], m[piv] = m[piv], m[col]
        p = m[col][col]
        m[col] = [v / p for v in m[col]]
        for r in range(n):
            if r != col and m[r][col] != 0.0:
                f = m[r][col]
                m[r] = [v - f * w for v, w in zip(m[r], m[col])]
    return [row[n:] for row in m]


# ---------------------------------------------------------------------------
# Instrument files

class InstrumentImage:
    __slots__ = ("id", "deviation_deg", "sigma_arcmin", "source", "calibrated_utc", "coef", "extra")

    def __init__(self, image_id, deviation_deg, sigma_arcmin=None, source="nominal", calibrated_utc=None,
                 coef=None, extra=None):
        self.id = image_id
        self.deviation_deg = deviation_deg
        self.sigma_arcmin = sigma_arcmin
        self.source = source
        self.calibrated_utc = calibrated_utc
        self.coef = coef
        self.extra = extra or {}

    def to_dict(self):
        d = dict(self.extra)
        d.update({"id": self.id, "deviation_deg": round(self.deviation_deg, 7),
                  "sigma_arcmin": None if self.sigma_arcmin is None else round(self.sigma_arcmin, 4),
                  "source": self.source, "calibrated_utc": self.calibrated_utc})
        if self.coef is not None:
            d["coef"] = list(self.coef)
        return d


class Instrument:
    __slots__ = ("name", "plate_angles_deg", "images", "reaction_delay_s", "reaction_delay_sigma_s", "extra")

    def __init__(self, images, name="", plate_angles_deg=None, reaction_delay_s=None,
                 reaction_delay_sigma_s=None, extra=None):
        self.name = name
        self.plate_angles_deg = plate_angles_deg
        self.images = images
        self.reaction_delay_s = reaction_delay_s
        self.reaction_delay_sigma_s = reaction_delay_sigma_s
        self.extra = extra or {}

    def image_tuples(self):
        """``[(id, deviation_deg, sigma_arcmin or None)]``, the shape ``Session.images`` has."""
        return [(im.id, im.deviation_deg, im.sigma_arcmin) for im in self.images]

    def session_instrument(self):
        """The ``instrument`` object of a ``limbclock-session/1`` file: the images (id,
        deviation, sigma when known, source when calibrated) and the calibrated reaction
        delay with its sigma when the file holds one.  One mapping for every writer of
        sessions (the archive, the timer)."""
        images = []
        for im in self.images:
            d = {"id": im.id, "deviation_deg": im.deviation_deg}
            if im.sigma_arcmin is not None:
                d["sigma_arcmin"] = im.sigma_arcmin
            if im.source == "calibrated":
                d["source"] = im.source
            images.append(d)
        out = {"images": images}
        if self.reaction_delay_s is not None:
            out["reaction_delay_s"] = self.reaction_delay_s
            if self.reaction_delay_sigma_s is not None:
                out["reaction_delay_sigma_s"] = self.reaction_delay_sigma_s
        return out

    def coef_of(self, image_id):
        for im in self.images:
            if im.id == image_id:
                return im.coef
        return None

    def to_dict(self):
        d = {"format": FORMAT}
        d.update(self.extra)
        d.update({"name": self.name,
                  "plate_angles_deg": None if self.plate_angles_deg is None else list(self.plate_angles_deg),
                  "images": [im.to_dict() for im in self.images],
                  "reaction_delay_s": self.reaction_delay_s,
                  "reaction_delay_sigma_s": self.reaction_delay_sigma_s})
        return d

    def dumps(self):
        try:
            return json.dumps(self.to_dict(), indent=1) + "\n"
        except TypeError:      # MicroPython's json has no indent
            return json.dumps(self.to_dict()) + "\n"


def from_ladder(lad, name="", include_faint=False):
    """A nominal ``Instrument`` from a ``Ladder`` (faint images left out unless asked)."""
    ims = []
    for im in lad.images:
        if im.faint and not include_faint:
            continue
        ims.append(InstrumentImage(im.id, im.deviation_deg, im.sigma_arcmin, "nominal", None, list(im.coef)))
    return Instrument(ims, name, list(lad.plate_angles_deg),
                      extra={"ladder": {"max_order": lad.max_order, "incidence_deg": lad.incidence_deg,
                                        "shade_od": lad.shade_od}})


def _num(v, path, lo, hi, allow_none=False):
    if v is None and allow_none:
        return None
    from engine.limits import number
    return number(v, path, lo, hi, InstrumentError)


def parse_images(items, path="images"):
    """Validate a list of image objects (instrument file or session ``instrument.images``)."""
    from engine import limits
    if not isinstance(items, list) or not items:
        raise InstrumentError("%s: expected a non-empty list of images" % path)
    if len(items) > limits.MAX_IMAGES:
        raise InstrumentError("%s: %d images; at most %d" % (path, len(items), limits.MAX_IMAGES))
    dev_lo, dev_hi = limits.RANGES["instrument_deviation_deg"]
    sig_lo, sig_hi = limits.RANGES["sigma_arcmin"]
    coef_lo, coef_hi = limits.RANGES["coef"]
    out = []
    seen = set()
    for k, it in enumerate(items):
        p = "%s[%d]" % (path, k)
        if not isinstance(it, dict):
            raise InstrumentError("%s: expected an object" % p)
        iid = it.get("id")
        if not isinstance(iid, str) or not iid:
            raise InstrumentError("%s.id: expected a non-empty string, got %s" % (p, limits.show(iid)))
        limits.text(iid, p + ".id", InstrumentError, limits.MAX_ID_CHARS)
        if iid in seen:
            raise InstrumentError("%s.id: duplicate image id %r" % (p, iid))
        seen.add(iid)
        if "deviation_deg" not in it:
            raise InstrumentError("%s.deviation_deg: missing" % p)
        dev = _num(it["deviation_deg"], p + ".deviation_deg", dev_lo, dev_hi)
        sig = _num(it.get("sigma_arcmin"), p + ".sigma_arcmin", sig_lo, sig_hi, allow_none=True)
        src = it.get("source", "nominal")
        if src not in ("nominal", "calibrated"):
            raise InstrumentError("%s.source: %s is neither \"nominal\" nor \"calibrated\"" % (p, limits.show(src)))
        cal = it.get("calibrated_utc")
        if cal is not None:
            from engine.timescale import parse_utc
            try:
                parse_utc(cal)
            except ValueError as exc:
                raise InstrumentError("%s.calibrated_utc: %s" % (p, exc))
        coef = it.get("coef")
        if coef is not None:
            if (not isinstance(coef, list) or not 1 <= len(coef) <= limits.MAX_PLATES
                    or not all(isinstance(c, int) and not isinstance(c, bool) and coef_lo <= c <= coef_hi
                               for c in coef)):
                raise InstrumentError("%s.coef: expected a list of 1..%d integers within %d..%d, got %s"
                                      % (p, limits.MAX_PLATES, coef_lo, coef_hi, limits.show(coef)))
        extra = {}
        for key in it:
            if key not in ("id", "deviation_deg", "sigma_arcmin", "source", "calibrated_utc", "coef"):
                extra[key] = it[key]
        out.append(InstrumentImage(iid, dev, sig, src, cal, coef, extra))
    return out


def parse_instrument(text):
    """Read a ``limbclock-instrument/1`` file (str, bytes or an already decoded dict), within the
    limits of ``engine.limits`` (size, nesting, counts, ranges).  Raises InstrumentError."""
    from engine import limits
    if isinstance(text, dict):
        d = text
    else:
        d = limits.load_json(text, "instrument file", InstrumentError)
    if not isinstance(d, dict):
        raise InstrumentError("instrument file: expected a JSON object")
    limits.check_tree(d, InstrumentError)
    if d.get("format") != FORMAT:
        raise InstrumentError("format: expected %r, got %s" % (FORMAT, limits.show(d.get("format"))))
    name = d.get("name", "")
    if not isinstance(name, str):
        raise InstrumentError("name: expected a string, got %s" % limits.show(name))
    angles = d.get("plate_angles_deg")
    if angles is not None:
        angles = _check_angles(angles)
    images = parse_images(d.get("images"), "images")
    if angles is not None:
        for k, im in enumerate(images):
            if im.coef is not None and len(im.coef) != len(angles):
                raise InstrumentError("images[%d].coef: %d entries for %d plate angles"
                                      % (k, len(im.coef), len(angles)))
    lo, hi = limits.RANGES["reaction_delay_s"]
    delay = _num(d.get("reaction_delay_s"), "reaction_delay_s", lo, hi, allow_none=True)
    lo, hi = limits.RANGES["reaction_delay_sigma_s"]
    delay_s = _num(d.get("reaction_delay_sigma_s"), "reaction_delay_sigma_s", lo, hi, allow_none=True)
    extra = {}
    for key in d:
        if key not in ("format", "name", "plate_angles_deg", "images", "reaction_delay_s", "reaction_delay_sigma_s"):
            extra[key] = d[key]
    return Instrument(images, name, angles, delay, delay_s, extra)


def nearest_images(images, deviation_deg):
    """Sort ``[(id, deviation_deg, ...)]`` by distance to ``deviation_deg``; helper for labels."""
    return sorted(images, key=lambda im: abs(im[1] - deviation_deg))


def inclined_ray_deviation_deg(pair_angle_deg, beta_deg):
    """Deviation of a ray inclined beta to the principal plane by two reflections off surfaces at
    angle A: sin(d/2) = cos(beta) sin(A) (derived for this project: spherical geometry of two
    reflections; checked by ray tracing in ``tests/test_instrument.py``)."""
    return 2.0 * asind(cosd(beta_deg) * sind(pair_angle_deg))

