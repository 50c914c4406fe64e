"""On-board planning and reduction: the timer tells the next contact and, on request, the fix.

The timer holds three files pushed by the host (``device/PROTOCOL.md``, slots):

* ``instrument`` - a ``limbclock-instrument/1`` file (``engine.instrument.parse_instrument``);
* ``track``      - a ``limbclock-track/1`` file: the DR track (``utc, lat_deg, lon_deg,
  course_deg, speed_kn``, optional ``known``, ``velocity_sigma_kn``) and the ``observer``
  (``eye_height_m``, optional ``temperature_c``, ``pressure_hpa``), the same keys as a session
  file's ``track`` and ``observer``.  A bare session ``track`` object (no ``format``, no
  ``observer``) is accepted too: the planner then assumes ``PLAN_EYE_HEIGHT_M`` and the fix
  refuses (the dip depends on the height of eye);
* ``almanac``    - one ``.lca`` year file; the other years come from the shipped
  ``engine/data`` (read one year at a time: ``SlotAlmanac``).

``Onboard.update`` keeps the next predicted contact (``engine.plan.next_contact``, the code
``limbclock plan`` uses) for the limb selected on the timer, recomputing only when the files
change, the body/limb changes, the predicted contact has passed, or every ``PLAN_EVERY_US``.
``Onboard.reduce`` builds a ``limbclock-session/1`` text from the current session's contacts
in the log (voided ones left out; a contact logged before the clock had time takes the UTC of
the later STAMP record that names it, and is left out without one) and the files, and calls
``engine.reduce_session``; the result is cut down to ``Onboard.fix`` (a small dict, also in
the timer's status).  Every problem becomes a short display message, never an exception out
of the main loop.  Between its phases (each record read, after the text, after parsing) it
calls ``engine.coop.tick()`` as the engine does at every model evaluation, so the timer's
hook keeps serving its inputs through the whole reduction (``device/firmware.py``).

Memory: the engine modules are imported lazily (a board freezes them into flash, where their
bytecode takes no heap), the session text is dropped once parsed, and only the summary of a
fix is kept.  Figures: ``python -m bench onboard``.
"""
import json

from engine.timescale import format_utc

TRACK_FORMAT = "limbclock-track/1"
PLAN_EVERY_US = 5 * 60 * 1000000      # recompute the next contact at least this often
PLAN_RETRY_US = 60 * 1000000          # after an error (no files yet), look again this often
PLAN_HORIZON_S = 6 * 3600             # how far ahead the next contact is sought
PASSED_US = 5 * 1000000               # a predicted contact this far in the past is replanned
PLAN_EYE_HEIGHT_M = 2.0               # for planning only, when the track file has no observer
MIN_CONTACTS = 3                      # the fewest contacts the timer tries to reduce
MAX_SIGMA_S = 60.0                    # a stamp less certain than this is left out (session limit)
UNC_UNKNOWN = 0xFFFFFFFF


class OnboardError(ValueError):
    """A file or request the on-board planner/reducer cannot use; the message is short
    enough for the display's last line (and names the file or field)."""


def _load_json(data, what):
    from engine.limits import MAX_FILE_BYTES, MAX_DEPTH
    if isinstance(data, (bytes, bytearray, str)) and len(data) > MAX_FILE_BYTES:
        raise OnboardError("%s: %d bytes; at most %d" % (what, len(data), MAX_FILE_BYTES))
    if isinstance(data, (bytes, bytearray)):
        try:
            data = bytes(data).decode("utf-8")
        except UnicodeError:
            raise OnboardError("%s: not UTF-8 text" % what)
    try:
        return json.loads(data)
    except RuntimeError:      # nested too deep for the decoder (CPython's RecursionError)
        raise OnboardError("%s: nested deeper than %d levels" % (what, MAX_DEPTH))
    except ValueError:
        raise OnboardError("%s: not JSON" % what)


def parse_track(data):
    """Read a ``limbclock-track/1`` file (bytes, text or dict) -> ``(track_dict, observer_dict or
    None)``, validated by the session reader (``engine.session``) so the rules are the session's."""
    d = data if isinstance(data, dict) else _load_json(data, "track file")
    if not isinstance(d, dict):
        raise OnboardError("track file: expected a JSON object")
    fmt = d.get("format")
    if fmt is not None and fmt != TRACK_FORMAT:
        raise OnboardError("track file: format %r, expected %r" % (fmt, TRACK_FORMAT))
    track = {}
    for k in d:
        if k not in ("format", "observer"):
            track[k] = d[k]
    observer = d.get("observer")
    if observer is not None and not isinstance(observer, dict):
        raise OnboardError("track file: observer must be an object")
    from engine.session import session_from_dict, FORMAT
    probe = {"format": FORMAT, "observer": observer if observer is not None else {"eye_height_m": 0.0},
             "instrument": {"images": [{"id": "x", "deviation_deg": 10.0}]}, "track": track, "contacts": []}
    try:
        session_from_dict(probe, None, False)
    except ValueError as e:
        raise OnboardError("track file: %s" % e)
    return track, observer


def track_file(track, observer=None):
    """The bytes of a ``limbclock-track/1`` file from a session's ``track`` and ``observer`` dicts."""
    d = {"format": TRACK_FORMAT}
    for k in track:
        d[k] = track[k]
    if observer is not None:
        d["observer"] = observer
    return json.dumps(d).encode()


def _almanac_class():
    from engine import almanac

    class SlotAlmanac(almanac.Almanac):
        """The shipped almanac, with the year of a pushed ``.lca`` file served from the store.
        One parsed year is kept (``keep_years=1``, about 3 KB)."""

        def __init__(self, path, years, store, slot_name, slot_year):
            almanac.Almanac.__init__(self, path, years, 1)
            self.store = store
            self.slot_name = slot_name
            self.slot_year = slot_year

        def year(self, y):
            if y != self.slot_year:
                return almanac.Almanac.year(self, y)
            for yy, a in self._cache:
                if yy == y:
                    return a
            a = almanac.parse(self.store.read(self.slot_name), "almanac slot")
            self._cache = [(y, a)]
            return a

    return almanac, SlotAlmanac


def load_almanac(store, slot_name="slot_almanac", data_dir=None):
    """The almanac the timer uses: shipped year files, the pushed year file taking precedence.
    Raises ``engine.almanac.AlmanacError`` when there is neither."""
    almanac, SlotAlmanac = _almanac_class()
    slot_year = None
    if store.size(slot_name) > 0:
        slot_year = almanac.parse(store.read(slot_name), "almanac slot").year
    try:
        shipped = almanac.load(data_dir, keep_years=1)
        path, years = shipped.path, list(shipped.years)
    except almanac.AlmanacError:
        if slot_year is None:
            raise
        path, years = "", []
    if slot_year is not None and slot_year not in years:
        years.append(slot_year)
        years.sort()
        if years[-1] - years[0] + 1 != len(years):       # not contiguous: the pushed year alone
            years = [slot_year]
    return SlotAlmanac(path, years, store, slot_name, slot_year)


def fmt_position(lat_deg, lon_deg):
    """``47°12.3'N 019°28.9'W`` (``engine.angles``: rounded before splitting)."""
    from engine.angles import fmt_lat, fmt_lon
    return "%s %s" % (fmt_lat(lat_deg), fmt_lon(lon_deg))


def iter_records(log, chunk=16):
    """The log's records one by one, read ``chunk`` at a time (the whole log never sits in the heap;
    damaged records are skipped: ``Log.read_raw`` leaves them out)."""
    from device.log import unpack_records
    s = log.base_seq
    while s < log.next_seq:
        batch = unpack_records(log.read_raw(s, chunk))
        if not batch:
            return
        for r in batch:
            yield r
        s = batch[-1].seq + 1


def _tick():
    """A safe point between phases of the on-board work (``engine.coop``): the timer's hook serves
    its inputs here too, not only inside the engine's model evaluations."""
    from engine import coop
    coop.tick()


class Onboard:
    """The timer's planner and reducer (see the module docstring).  ``store`` is the firmware's
    file store; ``data_dir`` the shipped almanac directory (default ``engine/data``)."""
    __slots__ = ("store", "data_dir", "alm", "images", "inst_session", "track", "observer", "problem",
                 "next", "plan_key", "plan_due", "fix", "fix_error", "loaded")

    def __init__(self, store, data_dir=None):
        self.store = store
        self.data_dir = data_dir
        self.loaded = False
        self.alm = None
        self.images = None          # [(id, deviation_deg, sigma_arcmin or None)]
        self.inst_session = None    # the session's "instrument" object (Instrument.session_instrument)
        self.track = None
        self.observer = None
        self.problem = None         # why there is no plan (short text)
        self.next = None            # the next predicted contact as a small dict
        self.plan_key = None
        self.plan_due = 0
        self.fix = None             # summary of the last on-board fix
        self.fix_error = None

    # -- files ------------------------------------------------------------------
    def files_changed(self):
        """Forget the files read so far: they are read again when next needed."""
        self.loaded = False
        self.plan_due = 0
        self.plan_key = None

    def _load(self):
        if self.loaded:
            return
        self.loaded = True
        self.alm = self.images = self.track = self.observer = self.inst_session = None
        problems = []
        try:
            self.alm = load_almanac(self.store, "slot_almanac", self.data_dir)
        except ValueError as e:
            problems.append("almanac: %s" % e)
        raw = self.store.read("slot_instrument")
        if not raw:
            problems.append("no instrument: push it")
        else:
            try:
                from engine.instrument import parse_instrument
                inst = parse_instrument(raw)
                self.images = inst.image_tuples()
                self.inst_session = inst.session_instrument()
            except ValueError as e:
                problems.append("instrument: %s" % e)
        raw = self.store.read("slot_track")
        if not raw:
            problems.append("no track: push it")
        else:
            try:
                self.track, self.observer = parse_track(raw)
            except ValueError as e:
                problems.append(str(e))
        self.problem = problems[0] if problems else None

    # -- the next contact ---------------------------------------------------------
    def update(self, utc_us, body_limb, limb):
        """Recompute the next contact after ``utc_us`` when needed.  ``body_limb`` is any value that
        changes with the timer's body/limb setting; ``limb`` the limb to plan ('lower'/'upper').
        Returns True when ``next`` or ``problem`` changed."""
        key = (body_limb, self.loaded)
        nxt = self.next
        if key == self.plan_key and utc_us < self.plan_due and \
                (nxt is None or utc_us < nxt["t_us"] + PASSED_US):
            return False
        self._load()
        self.plan_key = (body_limb, self.loaded)
        before = (nxt, self.problem)
        self.next = None
        if self.problem is not None:
            self.plan_due = utc_us + PLAN_RETRY_US
            return before != (None, self.problem)
        try:
            from engine import plan
            from engine.model import Track, Observer
            from engine.timescale import parse_utc
            tr = self.track
            track = Track(parse_utc(tr["utc"]), tr["lat_deg"], tr["lon_deg"], tr.get("course_deg", 0.0),
                          tr.get("speed_kn", 0.0))
            ob = self.observer
            observer = Observer(PLAN_EYE_HEIGHT_M) if ob is None else \
                Observer(ob["eye_height_m"], ob.get("temperature_c", 10.0), ob.get("pressure_hpa", 1010.0))
            c = plan.next_contact(self.alm, self.images, track, observer, utc_us, PLAN_HORIZON_S,
                                  limbs=(limb,))
        except ValueError as e:
            self.problem = "plan: %s" % e
            self.plan_due = utc_us + PLAN_RETRY_US
            return True
        except MemoryError:
            self.problem = "no memory for the plan"
            self.plan_due = utc_us + PLAN_RETRY_US
            return True
        except Exception as e:          # a fault in the planner must not stop the timer's loop
            self.problem = "plan: internal error (%s)" % type(e).__name__
            self.plan_due = utc_us + PLAN_RETRY_US
            return True
        if c is not None:
            self.next = {"utc": format_utc(c.t_us, 1), "t_us": c.t_us, "body": c.body, "limb": c.limb,
                         "image": c.image, "direction": c.direction, "zn_deg": round(c.zn_deg, 1),
                         "deviation_deg": c.deviation_deg, "low": c.low, "dark": c.dark}
        self.plan_due = utc_us + PLAN_EVERY_US
        return True

    def plan_lines(self, utc_us):
        """Two display lines: the next contact and its countdown, or why there is none
        (``utc_us`` None: the timer has no time yet)."""
        if utc_us is None:
            return ["NEXT: -", "no time yet"]
        if self.problem is not None:
            return ["NEXT: -", self.problem[:40]]
        c = self.next
        if c is None:
            return ["NEXT: none in %dh" % (PLAN_HORIZON_S // 3600), "(this limb)"]
        left_s = (c["t_us"] - utc_us) // 1000000
        if left_s < 0:
            left_s = 0
        if left_s >= 6000:
            count = "%dh%02d" % (left_s // 3600, left_s % 3600 // 60)
        else:
            count = "%02d:%02d" % (left_s // 60, left_s % 60)
        return ["NEXT %s %s %s %s" % (c["image"], c["body"].upper(), "LL" if c["limb"] == "lower" else "UL",
                                       "rise" if c["direction"] == "rising" else "set"),
                "in %s Zn %03d" % (count, int(c["zn_deg"] + 0.5) % 360)]

    # -- the fix --------------------------------------------------------------------
    def session_text(self, records, session_no):
        """The ``limbclock-session/1`` text of session ``session_no`` from ``records()`` (a callable
        returning an iterator of log records, read twice: voids first): its contacts
        (voided ones and those without a time left out), the instrument, track and observer."""
        from device.log import CONTACT, VOID, STAMP, BODY_NAMES, LIMB_NAMES
        self._load()
        _tick()
        if self.images is None:
            raise OnboardError(self.problem or "no instrument: push it")
        if self.track is None:
            raise OnboardError(self.problem or "no track: push it")
        if self.observer is None:
            raise OnboardError("no eye height: push track+observer")
        voided = []
        stamped = {}                # a contact written before the clock had time -> its late stamp
        for r in records():
            _tick()
            if r.kind == VOID:
                voided.append(r.ref_seq)
            elif r.kind == STAMP and r.time_state != 0:
                stamped[r.ref_seq] = (r.utc_us, r.uncertainty_us)
        parts = []
        for r in records():
            _tick()
            if r.kind != CONTACT or r.session != session_no or r.seq in voided:
                continue
            utc_us, unc = r.utc_us, r.uncertainty_us
            if r.time_state == 0:
                if r.seq not in stamped:
                    continue
                utc_us, unc = stamped[r.seq]
            sig = 0.0 if unc == UNC_UNKNOWN else unc / 1e6
            if unc == UNC_UNKNOWN or sig > MAX_SIGMA_S:
                continue
            # no extra keys: each would cost a dict per contact in the parsed session
            parts.append('{"utc":"%s","body":"%s","limb":"%s","image":null,"sigma_s":%s}'
                         % (format_utc(utc_us, 6), BODY_NAMES[r.body], LIMB_NAMES[r.limb], repr(sig)))
        if len(parts) < MIN_CONTACTS:
            raise OnboardError("%d contact(s): need %d" % (len(parts), MIN_CONTACTS))
        inst = self.inst_session
        head = '{"format":"limbclock-session/1","observer":%s,"instrument":%s,"track":%s,"contacts":[' % (
            json.dumps(self.observer), json.dumps(inst), json.dumps(self.track))
        return head + ",".join(parts) + "]}"

    def reduce(self, records, session_no):
        """Reduce session ``session_no`` on board (``records`` as for ``session_text``).  Returns the
        fix summary (also kept in ``fix``; a failed attempt leaves the previous one there); on any
        problem keeps the short message in ``fix_error`` and returns None."""
        self.fix_error = None
        try:
            from engine.session import parse_session
            text = self.session_text(records, session_no)
            _tick()
            s = parse_session(text, self.alm)
            text = None             # the text is not held during the reduction (a few KB)
            import gc
            gc.collect()            # measured: 64 -> 56 KB of the unix port's heap (layout; bench onboard)
            _tick()
            import engine
            r = engine.reduce_session(s, self.alm)
            s = None
        except MemoryError:
            self.fix_error = "no memory for the fix"
            return None
        except (ValueError, IndexError, KeyError, ZeroDivisionError) as e:
            msg = str(e)
            if "outside the almanac" in msg:
                msg = "almanac: contacts outside it"
            self.fix_error = msg
            return None
        except Exception as e:          # a fault in the reduction must not stop the timer's loop
            self.fix_error = "internal error (%s)" % type(e).__name__
            return None
        e = r["ellipse_95"]
        self.fix = {"utc": r["utc"], "lat_deg": r["lat_deg"], "lon_deg": r["lon_deg"],
                    "ellipse_95": {"major_nm": e["major_nm"], "minor_nm": e["minor_nm"],
                                   "major_axis_deg": e["major_axis_deg"]},
                    "contacts_used": r["contacts_used"], "rejected": len(r["rejected"]),
                    "contacts": len(r["images"]), "warnings": len(r["warnings"]),
                    # the doubts' codes (engine/doubts.py): the display says the first, never a bare fix
                    "doubts": [d["code"] for d in r.get("doubts") or ()]}
        return self.fix

    def fix_lines(self):
        """Two display lines: the fix (degrees-minutes) and its 95 % ellipse, or the error."""
        f = self.fix
        if self.fix_error is not None or f is None:
            return ["FIX failed", (self.fix_error or "no fix")[:40]]
        e = f["ellipse_95"]
        return [fmt_position(f["lat_deg"], f["lon_deg"]),
                "95%% %.1fx%.1fnm %03d" % (e["major_nm"], e["minor_nm"], int(e["major_axis_deg"] + 0.5) % 180)]
