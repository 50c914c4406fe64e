"""Reader of ``limbclock-session/1`` files (JSON), with validation.

Bounded input (``engine.limits``, stated for users in ``docs/formats.md``): at most 4 MiB of
text, 32 levels of nesting, 10 000 contacts and 512 images; every number anywhere in the file
finite, and each number the engine uses checked for type (a bool is not a number) and range
BEFORE any arithmetic; times are ASCII ISO 8601.  Contacts of the same body, limb and image
within 0.5 s are one contact timed twice: the later ones get ``dup_of`` and a warning in
``Session.warnings``, and are not used a second time.

A session holds the observer (height of eye, weather), the instrument's images
(id and deviation), the ship's dead-reckoning track and the timed contacts;
see DEVELOPERS.md ("Session file limbclock-session/1", "Sight reduction") and docs/formats.md for the format.  Every
problem raises ``SessionError`` whose message starts with the path of the field
(``contacts[3].utc: ...``).  Keys this reader does not know are kept
(``Session.extra`` at the top level, ``Contact.extra`` per contact) and written
back by ``to_dict``.

Optional keys with defaults: ``observer.temperature_c`` (10), ``observer.pressure_hpa``
(1010), ``instrument.images[].sigma_arcmin`` (none: the fix's default),
``track.course_deg`` and ``track.speed_kn`` (0), ``track.known`` (false),
``contacts[].image`` (null), ``contacts[].sigma_s`` (stamp uncertainty, s; 0),
``contacts[].void`` (false: a void contact is kept but never used),
``observer.yaw_sigma_deg`` (how far, 1 sigma, the observer holds the instrument
turned off the body's azimuth; default 0: swinging the arc, or calibrated away),
``observer.contact_sigma_arcmin`` (independent altitude scatter of each contact;
default 0.3', see engine/fix.py),
``instrument.reaction_delay_s`` and ``instrument.reaction_delay_sigma_s`` (the
calibrated personal equation, as in ``limbclock-instrument/1`` files; null = not
calibrated), ``track.velocity_sigma_kn`` (uncertainty of the DR's course and speed,
per component; the fix's default 0.3 kn), ``dut1_s`` (UT1 - UTC, |DUT1| <= 0.9 s as
broadcast with time signals; default 0, which can cost up to 0.23' of longitude).
"""
from engine import limits
from engine.model import Observer, Track, BODIES, LIMBS
from engine.timescale import parse_utc, format_utc

FORMAT = "limbclock-session/1"
_TOP_KEYS = ("format", "observer", "instrument", "track", "contacts")
_CONTACT_KEYS = ("utc", "body", "limb", "image", "sigma_s", "void")
DUPLICATE_US = limits.DUPLICATE_US   # same body, limb and image this close: one contact timed twice


class SessionError(ValueError):
    """A malformed session; the message names the field path and the problem."""


class Contact:
    """One timed contact: instant, body, limb, image id (or None) and its index in the file.

    ``dup_of``: None, or the index of an earlier contact this one repeats (same body, limb and
    image within ``DUPLICATE_US``, see ``mark_duplicates``): it is reported and not used a second time."""
    __slots__ = ("t_us", "body", "limb", "image", "index", "sigma_s", "void", "extra", "dup_of")

    def __init__(self, t_us, body, limb, image=None, index=0, sigma_s=0.0, void=False, extra=None):
        self.t_us = int(t_us)
        self.body = body
        self.limb = limb
        self.image = image
        self.index = index
        self.sigma_s = float(sigma_s)
        self.void = bool(void)
        self.extra = extra if extra is not None else {}
        self.dup_of = None

    def to_dict(self):
        d = {"utc": format_utc(self.t_us, 6), "body": self.body, "limb": self.limb, "image": self.image}
        if self.sigma_s:
            d["sigma_s"] = self.sigma_s
        if self.void:
            d["void"] = True
        for k in self.extra:
            d[k] = self.extra[k]
        return d


class Session:
    """A validated session: ``observer`` (Observer), ``images`` (list of
    ``(id, deviation_deg, sigma_arcmin or None)``), ``track`` (Track),
    ``contacts`` (list of Contact), ``extra`` (unknown top-level keys), ``warnings`` (texts the
    reader reports without refusing: repeated contacts)."""
    __slots__ = ("observer", "images", "track", "contacts", "extra", "instrument_extra", "image_extra",
                 "observer_extra", "track_extra", "warnings")

    def __init__(self, observer, images, track, contacts, extra=None, instrument_extra=None, image_extra=None,
                 observer_extra=None, track_extra=None):
        self.observer = observer
        self.images = images
        self.track = track
        self.contacts = contacts
        self.extra = extra if extra is not None else {}
        self.instrument_extra = instrument_extra if instrument_extra is not None else {}
        self.image_extra = image_extra if image_extra is not None else {}   # id -> unknown keys
        self.observer_extra = observer_extra if observer_extra is not None else {}
        self.track_extra = track_extra if track_extra is not None else {}
        self.warnings = []

    def deviation_of(self, image_id):
        """Deviation (deg) of an image id; SessionError if the instrument lacks it."""
        for i, dev, _ in self.images:
            if i == image_id:
                return dev
        raise SessionError("image %r is not in the instrument" % (image_id,))

    def sigma_of(self, image_id):
        """The image's own sigma (arcmin) or None."""
        for i, _, s in self.images:
            if i == image_id:
                return s
        return None

    def to_dict(self):
        images = []
        for i, dev, s in self.images:
            d = {"id": i, "deviation_deg": dev}
            if s is not None:
                d["sigma_arcmin"] = s
            ex = self.image_extra.get(i, {})
            for k in ex:
                d[k] = ex[k]
            images.append(d)
        inst = {"images": images}
        for k in self.instrument_extra:
            inst[k] = self.instrument_extra[k]
        ob = self.observer.to_dict()
        for k in self.observer_extra:
            ob[k] = self.observer_extra[k]
        tr = self.track.to_dict()
        for k in self.track_extra:
            tr[k] = self.track_extra[k]
        out = {"format": FORMAT, "observer": ob, "instrument": inst,
               "track": tr, "contacts": [c.to_dict() for c in self.contacts]}
        for k in self.extra:
            out[k] = self.extra[k]
        return out


def _number(obj, key, path, default=None, required=True, name=None):
    """A number of ``obj`` within its range (``engine.limits.RANGES``), checked before any arithmetic."""
    return limits.field(obj, key, path, SessionError, default, required, name)


_show = limits.show


def _obj(parent, key):
    if key not in parent:
        raise SessionError("%s: missing (an object is required)" % key)
    v = parent[key]
    if not isinstance(v, dict):
        raise SessionError("%s: must be an object, got %s" % (key, _show(v)))
    return v


def _time(obj, key, path):
    if key not in obj:
        raise SessionError("%s.%s: missing (ISO 8601 UTC text is required)" % (path, key))
    v = obj[key]
    if not isinstance(v, str):
        raise SessionError("%s.%s: must be ISO 8601 UTC text like 2029-08-03T06:41:12.250Z, got %s"
                           % (path, key, _show(v)))
    try:
        return parse_utc(v)
    except ValueError as e:
        raise SessionError("%s.%s: %s" % (path, key, e))


def _choice(obj, key, path, choices):
    if key not in obj:
        raise SessionError("%s.%s: missing (one of %s)" % (path, key, ", ".join(choices)))
    v = obj[key]
    if not isinstance(v, str) or v not in choices:
        raise SessionError("%s.%s: must be one of %s, got %s" % (path, key, ", ".join(choices), _show(v)))
    return v


def parse_session(text, alm=None, need_contacts=True):
    """Validate ``limbclock-session/1`` JSON text (str or bytes) and return a Session.

    With ``alm`` (an almanac with ``span_us()``), contacts and the track epoch
    must lie within the almanac's span.  ``need_contacts=False`` accepts an
    empty contact list (planning needs only the track and the instrument).
    The limits of ``engine.limits`` apply (size, nesting, counts, ranges).
    Raises SessionError."""
    return session_from_dict(limits.load_json(text, "session", SessionError), alm, need_contacts)


def session_from_dict(data, alm=None, need_contacts=True):
    """Validate an already decoded session (a dict) and return a Session."""
    if not isinstance(data, dict):
        raise SessionError("session: must be a JSON object, got %s" % _show(data))
    limits.check_tree(data, SessionError)
    if data.get("format") != FORMAT:
        if "format" not in data:
            raise SessionError("format: missing (expected %r)" % FORMAT)
        raise SessionError("format: expected %r, got %s" % (FORMAT, _show(data["format"])))

    o = _obj(data, "observer")
    observer = Observer(_number(o, "eye_height_m", "observer"),
                        _number(o, "temperature_c", "observer", 10.0, False),
                        _number(o, "pressure_hpa", "observer", 1010.0, False))
    observer_extra = {}
    for key in o:
        if key not in ("eye_height_m", "temperature_c", "pressure_hpa"):
            observer_extra[key] = o[key]
    if "yaw_sigma_deg" in o:
        observer_extra["yaw_sigma_deg"] = _number(o, "yaw_sigma_deg", "observer")
    if "contact_sigma_arcmin" in o:
        observer_extra["contact_sigma_arcmin"] = _number(o, "contact_sigma_arcmin", "observer")

    inst = _obj(data, "instrument")
    images, image_extra, seen = _images(inst)

    tr = _obj(data, "track")
    known = tr.get("known", False)
    if not isinstance(known, bool):
        raise SessionError("track.known: must be true or false, got %s" % _show(known))
    track = Track(_time(tr, "utc", "track"), _number(tr, "lat_deg", "track"), _number(tr, "lon_deg", "track"),
                  _number(tr, "course_deg", "track", 0.0, False), _number(tr, "speed_kn", "track", 0.0, False),
                  known)
    if track.lon_deg >= 180.0:
        track.lon_deg -= 360.0
    track_extra = {}
    for key in tr:
        if key not in ("utc", "lat_deg", "lon_deg", "course_deg", "speed_kn", "known"):
            track_extra[key] = tr[key]
    if tr.get("velocity_sigma_kn") is not None:
        track_extra["velocity_sigma_kn"] = _number(tr, "velocity_sigma_kn", "track")

    if "contacts" not in data:
        raise SessionError("contacts: missing (a list of contacts is required)")
    raw_contacts = data["contacts"]
    if not isinstance(raw_contacts, list):
        raise SessionError("contacts: must be a list, got %s" % _show(raw_contacts))
    if not raw_contacts and need_contacts:
        raise SessionError("contacts: empty (a session needs at least one contact)")
    if len(raw_contacts) > limits.MAX_CONTACTS:
        raise SessionError("contacts: %d contacts; at most %d per session (split the file)"
                           % (len(raw_contacts), limits.MAX_CONTACTS))
    span = _span(alm)
    contacts = []
    for k, c in enumerate(raw_contacts):
        p = "contacts[%d]" % k
        if not isinstance(c, dict):
            raise SessionError("%s: must be an object, got %s" % (p, _show(c)))
        t = _time(c, "utc", p)
        if span is not None and not span[0] <= t < span[1]:
            raise SessionError("%s.utc: %s is outside the almanac's span %s .. %s"
                               % (p, format_utc(t), format_utc(span[0], 0), format_utc(span[1] - 1000000, 0)))
        body = _choice(c, "body", p, BODIES)
        limb = _choice(c, "limb", p, LIMBS)
        image = c.get("image")
        if image is not None:
            if not isinstance(image, str):
                raise SessionError("%s.image: must be an image id text or null, got %s" % (p, _show(image)))
            if image not in seen:
                raise SessionError("%s.image: %r is not in the instrument (have %s)"
                                   % (p, image if len(image) <= 40 else image[:37] + "...", _ids(images)))
        sigma_s = _number(c, "sigma_s", p, 0.0, False)
        void = c.get("void", False)
        if not isinstance(void, bool):
            raise SessionError("%s.void: must be true or false, got %s" % (p, _show(void)))
        extra = {}
        for key in c:
            if key not in _CONTACT_KEYS:
                extra[key] = c[key]
        contacts.append(Contact(t, body, limb, image, k, sigma_s, void, extra))
    extra = {}
    for key in data:
        if key not in _TOP_KEYS:
            extra[key] = data[key]
    if data.get("dut1_s") is not None:
        extra["dut1_s"] = _number(data, "dut1_s", "session")
    if data.get("dr_sigma_nm") is not None:
        extra["dr_sigma_nm"] = _number(data, "dr_sigma_nm", "session")
    inst_extra = {}
    for key in inst:
        if key != "images":
            inst_extra[key] = inst[key]
    if inst.get("reaction_delay_s") is not None:
        inst_extra["reaction_delay_s"] = _number(inst, "reaction_delay_s", "instrument")
    if inst.get("reaction_delay_sigma_s") is not None:
        inst_extra["reaction_delay_sigma_s"] = _number(inst, "reaction_delay_sigma_s", "instrument")
    if inst.get("plate_angles_deg") is not None:
        inst_extra["plate_angles_deg"] = _plate_angles(inst["plate_angles_deg"], "instrument.plate_angles_deg")
    s = Session(observer, images, track, contacts, extra, inst_extra, image_extra, observer_extra, track_extra)
    s.warnings = mark_duplicates(contacts)
    return s


def _ids(images):
    ids = ", ".join(i for i, _, _ in images[:8])
    return ids + (", ... %d in all" % len(images) if len(images) > 8 else "")


def _images(inst):
    """``instrument.images`` -> (images, image_extra, {id: index})."""
    if "images" not in inst:
        raise SessionError("instrument.images: missing (a list of images is required)")
    raw_images = inst["images"]
    if not isinstance(raw_images, list) or not raw_images:
        raise SessionError("instrument.images: must be a non-empty list, got %s" % _show(raw_images))
    if len(raw_images) > limits.MAX_IMAGES:
        raise SessionError("instrument.images: %d images; at most %d" % (len(raw_images), limits.MAX_IMAGES))
    images = []
    image_extra = {}
    seen = {}
    for k, im in enumerate(raw_images):
        p = "instrument.images[%d]" % k
        if not isinstance(im, dict):
            raise SessionError("%s: must be an object, got %s" % (p, _show(im)))
        if "id" not in im:
            raise SessionError("%s.id: missing (an image id text is required)" % p)
        iid = limits.text(im["id"], p + ".id", SessionError, limits.MAX_ID_CHARS, "image id text")
        if iid in seen:
            raise SessionError("%s.id: %r repeats instrument.images[%d]" % (p, iid, seen[iid]))
        seen[iid] = k
        dev = _number(im, "deviation_deg", p)
        sig = _number(im, "sigma_arcmin", p, None, False)
        if sig is not None and sig <= 0.0:
            raise SessionError("%s.sigma_arcmin: must be > 0, got %r" % (p, sig))
        images.append((iid, dev, sig))
        ex = {}
        for key in im:
            if key not in ("id", "deviation_deg", "sigma_arcmin"):
                ex[key] = im[key]
        src = im.get("source")
        if src is not None and src not in ("nominal", "calibrated"):
            raise SessionError("%s.source: must be \"nominal\" or \"calibrated\", got %s" % (p, _show(src)))
        if im.get("coef") is not None:
            _coef(im["coef"], p + ".coef")
        image_extra[iid] = ex
    return images, image_extra, seen


def _coef(coef, path):
    """An image's coefficient vector: 1..MAX_PLATES integers within RANGES["coef"]."""
    lo, hi = limits.RANGES["coef"]
    if not isinstance(coef, list) or not 1 <= len(coef) <= limits.MAX_PLATES:
        raise SessionError("%s: must be a list of 1..%d integers, got %s" % (path, limits.MAX_PLATES, _show(coef)))
    for j, c in enumerate(coef):
        if not isinstance(c, int) or isinstance(c, bool) or not lo <= c <= hi:
            raise SessionError("%s[%d]: must be an integer within %d..%d, got %s" % (path, j, lo, hi, _show(c)))


def _plate_angles(angles, path):
    """1..MAX_PLATES plate angles, each strictly within RANGES["plate_angle_deg"] (deg)."""
    lo, hi = limits.RANGES["plate_angle_deg"]
    if not isinstance(angles, list) or not 1 <= len(angles) <= limits.MAX_PLATES:
        raise SessionError("%s: must be a list of 1..%d angles, got %s" % (path, limits.MAX_PLATES, _show(angles)))
    out = []
    for j, a in enumerate(angles):
        a = limits.number(a, "%s[%d]" % (path, j), lo, hi, SessionError)
        if a == lo or a == hi:
            raise SessionError("%s[%d]: %r must lie strictly within %r..%r" % (path, j, a, lo, hi))
        out.append(a)
    return out


def mark_duplicates(contacts, within_us=DUPLICATE_US):
    """Set ``dup_of`` on every contact that repeats an earlier one: the same body, limb and image
    (two nulls are the same) less than ``within_us`` apart, a bounced button or a record synced
    twice.  In time order (file order among equal times) the first of a group is kept, each
    later one points to it; void contacts take no part.  Returns the warnings (one per repeat,
    the first 20, then a count).  O(n log n)."""
    order = sorted([c for c in contacts if not c.void], key=lambda c: (c.t_us, c.index))
    kept = {}
    warnings = []
    n = 0
    for c in order:
        c.dup_of = None
        key = (c.body, c.limb, c.image)
        first = kept.get(key)
        if first is not None and c.t_us - first.t_us <= within_us:
            c.dup_of = first.index
            n += 1
            if n <= 20:
                warnings.append("contacts[%d] repeats contacts[%d] (%s %s %s, %.3f s apart): used once"
                                % (c.index, first.index, c.body, c.limb, c.image or "image null",
                                   (c.t_us - first.t_us) / 1e6))
            continue
        kept[key] = c
    if n > 20:
        warnings.append("%d more repeated contacts (within %.1f s of an earlier one): each used once"
                        % (n - 20, within_us / 1e6))
    return warnings


def _span(alm):
    """(first_us, end_us) the almanac covers (end excluded), or None when unknown."""
    if alm is None:
        return None
    f = getattr(alm, "span_us", None)
    if f is None:
        return None
    s = f() if callable(f) else f
    return int(s[0]), int(s[1])
