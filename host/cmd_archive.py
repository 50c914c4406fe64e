"""Commands on the archive: ``session`` (list, attach conditions, write a session file),
``archive fix|plan|calibrate`` (run the engine straight from the archive) and ``export``.

    limbclock session --db FILE                       # list the sessions
    limbclock session --db FILE --session ID --eye-height 2.4 --instrument FILE \\
        --track "2031-05-14T06:00:00Z,41.2,-9.7,135,6" [--label SEQ=IMAGE ...] [--out FILE]
    limbclock archive fix --db FILE --session ID [--at UTC] [--plot DIR]
    limbclock archive plan --db FILE --session ID --from UTC --to UTC
    limbclock archive calibrate --db FILE --session ID
    limbclock export --db FILE [--json] [--csv DIR] [--gpx FILE] [--geojson FILE]

Listing sessions, ``archive plan`` and ``export`` open the archive read-only (a snapshot:
they never write to it).  ``archive fix`` and ``archive calibrate`` store their result; on a
read-only archive (file mode, directory, medium) they compute from a snapshot and say that
nothing was stored.  Attaching conditions needs a writable archive.
"""
import json
import os
import sys

from engine import timescale
from engine.angles import fmt_lat, fmt_lon
from host import archive
from host.cautions import CAUTION_TEXT
from host.errors import UserError


def _db_arg(p):
    p.add_argument("--db", default=None, help="archive file (default: %s)" % archive.default_path())
    p.add_argument("--json", action="store_true", help="machine-readable output")


def register(sub):
    p = sub.add_parser("session", help="list archived sessions; attach conditions; write a session file")
    _db_arg(p)
    p.add_argument("--session", type=int, default=None, metavar="ID", help="session id (see the list)")
    p.add_argument("--device", default=None, help="with --number: pick the session by timer and its number")
    p.add_argument("--number", type=int, default=None, help="the timer's session number")
    p.add_argument("--eye-height", type=float, default=None, metavar="M", help="height of eye, metres")
    p.add_argument("--temperature", type=float, default=None, metavar="C", help="air temperature, deg C (10)")
    p.add_argument("--pressure", type=float, default=None, metavar="HPA", help="pressure, hPa (1010)")
    p.add_argument("--instrument", default=None, metavar="FILE", help="instrument file (limbclock-instrument/1)")
    p.add_argument("--track", default=None, metavar="UTC,LAT,LON,COURSE,SPEED",
                   help="DR track: position (decimal degrees, east +) at UTC, course true, speed kn")
    p.add_argument("--known", action="store_true", help="the track is truth (GPS): a calibration session")
    p.add_argument("--label", action="append", default=[], metavar="SEQ=IMAGE",
                   help="give contact SEQ the image IMAGE (repeatable; IMAGE '-' clears)")
    p.add_argument("--out", default=None, metavar="FILE", help="write the limbclock-session/1 file here")
    p.set_defaults(func=run_session)

    p = sub.add_parser("archive", help="run fix / plan / calibrate on an archived session")
    asub = p.add_subparsers(dest="action", metavar="ACTION")
    a = asub.add_parser("fix", help="fix from an archived session; the result is stored")
    _db_arg(a)
    a.add_argument("--session", type=int, required=True, metavar="ID")
    a.add_argument("--at", default=None, metavar="UTC", help="fix epoch (default: the last contact)")
    a.add_argument("--plot", default=None, metavar="DIR", help="write the plotting sheet and timeline here")
    a.set_defaults(func=run_fix)
    a = asub.add_parser("plan", help="predicted contacts at an archived session's track")
    _db_arg(a)
    a.add_argument("--session", type=int, required=True, metavar="ID")
    a.add_argument("--from", dest="t_from", required=True, metavar="UTC")
    a.add_argument("--to", dest="t_to", required=True, metavar="UTC")
    a.set_defaults(func=run_plan)
    a = asub.add_parser("calibrate", help="calibrate the instrument from an archived session (track known)")
    _db_arg(a)
    a.add_argument("--session", type=int, required=True, metavar="ID")
    a.set_defaults(func=run_calibrate)
    p.set_defaults(func=lambda args: (p.print_help(), 1)[1])

    p = sub.add_parser("export", help="export the archive: JSON, CSV, GPX 1.1, GeoJSON")
    _db_arg(p)
    p.add_argument("--csv", default=None, metavar="DIR", help="write contacts.csv and fixes.csv here")
    p.add_argument("--gpx", default=None, metavar="FILE", help="GPX 1.1: fixes as waypoints, DR tracks")
    p.add_argument("--geojson", default=None, metavar="FILE", help="GeoJSON: fixes, LOPs, 95%% ellipses, DR")
    p.add_argument("--sessions", default=None, metavar="DIR",
                   help="one limbclock-session/1 file per session with conditions attached")
    p.add_argument("--plots", default=None, metavar="DIR",
                   help="plotting sheet and contact timeline (PNG) of every stored fix")
    p.set_defaults(func=run_export)


def open_db(args, must_exist=True, write=True, fallback=False):
    """The archive of ``--db``: for writing (``write``), else a read-only snapshot; with
    ``fallback``, a read-only archive is opened as a snapshot instead (``conn.readonly``)."""
    path = args.db or archive.default_path()
    if must_exist and not os.path.exists(path):
        raise UserError("no archive at %s (sync a timer first, or give --db)" % path)
    try:
        if not write:
            return archive.connect(path, mode="read")
        try:
            return archive.connect(path)
        except archive.ArchiveReadOnly:
            if not fallback:
                raise
            return archive.connect(path, mode="read")
    except sqlite3_error() as exc:
        raise archive.ArchiveDamaged("archive %s cannot be read (SQLite: %s): restore a backup" % (path, exc))


def sqlite3_error():
    import sqlite3
    return sqlite3.DatabaseError


def not_stored_note(conn, what):
    if getattr(conn, "readonly", False):
        print("note: archive %s is read-only: %s was computed but not stored" % (conn.path, what), file=sys.stderr)


def guarded(func):
    """Run a command; a SQLite error met on the way (a damaged page read late) becomes one line."""
    def run(args):
        try:
            return func(args)
        except sqlite3_error() as exc:
            raise archive.ArchiveDamaged("archive %s: SQLite says %s (a damaged file: restore a backup)"
                                         % (args.db or archive.default_path(), exc))
    run.__name__ = func.__name__
    run.__doc__ = func.__doc__
    return run


def parse_track(text, known=False):
    """``UTC,LAT,LON,COURSE,SPEED`` -> session-file track dict."""
    parts = [p.strip() for p in text.split(",")]
    if len(parts) not in (3, 5):
        raise UserError("--track: expected UTC,LAT,LON[,COURSE,SPEED], got %r" % text)
    timescale.parse_utc(parts[0])
    try:
        nums = [float(x) for x in parts[1:]]
    except ValueError:
        raise UserError("--track: LAT, LON, COURSE and SPEED must be decimal numbers, got %r" % text)
    if not -89.0 <= nums[0] <= 89.0:
        raise UserError("--track: latitude %r outside -89..89" % nums[0])
    if not -180.0 <= nums[1] <= 360.0:
        raise UserError("--track: longitude %r outside -180..360 (east positive)" % nums[1])
    course, speed = (nums[2], nums[3]) if len(nums) == 4 else (0.0, 0.0)
    if not 0.0 <= course <= 360.0 or not 0.0 <= speed <= 60.0:
        raise UserError("--track: course must be 0..360 and speed 0..60 kn, got %r, %r" % (course, speed))
    return {"utc": parts[0], "lat_deg": nums[0], "lon_deg": nums[1], "course_deg": course, "speed_kn": speed,
            "known": bool(known)}


def read_instrument(path):
    """Instrument file -> dict with ``images`` (validated by ``engine.instrument``)."""
    try:
        with open(path, "rb") as f:
            data = f.read()
    except OSError as exc:
        raise UserError("--instrument %s: %s" % (path, exc.strerror or exc))
    from engine import instrument
    try:
        inst = instrument.parse_instrument(data)
    except ValueError as exc:
        raise UserError("instrument file %s: %s" % (path, exc))
    return inst.to_dict()


def _pick_session(conn, args):
    archive.refresh_sessions(conn)
    if args.session is not None:
        return archive.get_session(conn, args.session)
    if args.device is not None and args.number is not None:
        return archive.find_session(conn, args.device, args.number)
    return None


@guarded
def run_session(args):
    attach = [opt for opt, v in (("--eye-height", args.eye_height), ("--temperature", args.temperature),
                                 ("--pressure", args.pressure), ("--instrument", args.instrument),
                                 ("--track", args.track), ("--out", args.out)) if v is not None]
    if args.label or args.known:
        attach.append("--label" if args.label else "--known")
    changes = [a for a in attach if a != "--out"]
    try:
        conn = open_db(args, fallback=not changes)
    except archive.ArchiveReadOnly as exc:
        raise UserError("%s: %s were not attached" % (exc, ", ".join(changes)))
    s = _pick_session(conn, args)
    if s is None and attach:
        raise UserError("%s: say which session (--session ID, or --device ID --number N; "
                        "`limbclock session --db FILE` lists them)" % attach[0])
    if s is None:
        rows = archive.sessions(conn)
        if args.json:
            print(json.dumps([_session_json(r) for r in rows], indent=1))
            return 0
        if not rows:
            print("the archive holds no sessions yet (limbclock sync --port PORT)")
            return 0
        print("%4s  %-12s %-8s %5s  %-20s %-20s %8s  %s" % ("id", "timer", "log", "no.", "first contact",
                                                             "last contact", "contacts", "conditions"))
        for r in rows:
            cond = "+".join(k for k in ("observer", "track", "instrument_id") if r[k] is not None)
            print("%4d  %-12s %-8s %5s  %-20s %-20s %8d  %s%s" % (
                r["session_id"], r["device_id"], archive.log_label(r["log_id"]),
                "-" if r["session_no"] is None else r["session_no"],
                timescale.format_utc(r["first_us"], 0), timescale.format_utc(r["last_us"], 0), r["contacts"],
                cond.replace("instrument_id", "instrument") or "none", ", %d fix(es)" % r["fixes"] if r["fixes"] else ""))
        return 0
    sid = s["session_id"]
    observer = None
    if args.eye_height is not None or args.temperature is not None or args.pressure is not None:
        old = json.loads(s["observer"]) if s["observer"] else {}
        observer = dict(old)
        for key, v in (("eye_height_m", args.eye_height), ("temperature_c", args.temperature),
                       ("pressure_hpa", args.pressure)):
            if v is not None:
                observer[key] = v
        if "eye_height_m" not in observer:
            raise UserError("--eye-height: needed the first time conditions are attached")
    track = parse_track(args.track, args.known) if args.track else None
    iid = None
    if args.instrument:
        doc = read_instrument(args.instrument)
        with archive.transaction(conn):
            iid = archive.add_instrument(conn, doc)
    archive.attach_conditions(conn, sid, observer, track, iid)
    if args.label:
        labels = {}
        for item in args.label:
            seq, _, image = item.partition("=")
            try:
                labels[int(seq)] = None if image in ("-", "") else image
            except ValueError:
                raise UserError("--label: expected SEQ=IMAGE, got %r" % item)
        archive.set_image_labels(conn, s["device_id"], labels, s["log_id"])
    s = archive.get_session(conn, sid)
    ready = all(s[k] is not None for k in ("observer", "track", "instrument_id"))
    if args.out:
        text = archive.session_text(conn, sid)
        from engine.session import parse_session
        parse_session(text)          # what we write, the engine reads
        with open(args.out, "w", encoding="utf-8") as f:
            f.write(text + "\n")
    if args.json:
        out = _session_json(dict(s, contacts=len(archive.session_contacts(conn, s)), fixes=len(archive.fixes(conn, sid))))
        out["ready"] = ready
        out["written"] = args.out
        print(json.dumps(out, indent=1))
        return 0
    print("session %d (timer %s, no. %s): %s" % (sid, s["device_id"], s["session_no"],
                                                "ready for fix" if ready else "conditions incomplete"))
    if args.out:
        print("wrote %s" % args.out)
    return 0


def _session_json(r):
    return {"session_id": r["session_id"], "device": r["device_id"], "log_id": archive.log_label(r["log_id"]),
            "session_no": r["session_no"],
            "first_utc": timescale.format_utc(r["first_us"], 3), "last_utc": timescale.format_utc(r["last_us"], 3),
            "contacts": r.get("contacts"), "fixes": r.get("fixes"),
            "observer": json.loads(r["observer"]) if r["observer"] else None,
            "track": json.loads(r["track"]) if r["track"] else None, "instrument_id": r["instrument_id"]}


def fix_session(conn, session_id, at_utc=None):
    """Reduce an archived session, store the fix, return ``(fix_id, result)``."""
    import engine
    doc = archive.session_document(conn, session_id)
    text = json.dumps(doc)
    result = engine.reduce_session(text, at_us=timescale.parse_utc(at_utc) if at_utc else None)
    # remember the labels identification gave (contacts without one in the archive)
    labels = {}
    for c, img in zip(doc["contacts"], result.get("images") or []):
        if c["image"] is None and img is not None and not c.get("void"):
            labels[c["seq"]] = img
    if labels and not (result.get("identification") or {}).get("fallback"):
        # (a fix resting on the most probable assignment, not on confident images, stores none of them)
        archive.set_image_labels(conn, doc["archive"]["device"], labels, doc["archive"]["log_id"])
    return archive.store_fix(conn, session_id, result), result


def print_fix(result, out=None, indent=""):
    out = out or sys.stdout
    e = result.get("ellipse_95") or {}
    from host.cmd_fix import format_doubts
    lines = format_doubts(result)           # the doubts above the fix, as `limbclock fix` prints them
    lines += ["fix at %s  %s  %s" % (result["utc"], fmt_lat(result["lat_deg"], 2), fmt_lon(result["lon_deg"], 2))]
    if e:
        lines.append("95%% ellipse %.2f x %.2f nmi, major axis %03.0f T" % (e["major_nm"], e["minor_nm"],
                                                                         e["major_axis_deg"]))
    lines.append("contacts used %s, rejected %s" % (result.get("contacts_used"),
                                                    ", ".join(str(i) for i in result.get("rejected") or []) or "none"))
    lines += ["warning: %s" % w for w in result.get("warnings") or []]
    for line in lines:
        print(indent + line, file=out)


@guarded
def run_fix(args):
    conn = open_db(args, fallback=True)
    archive.refresh_sessions(conn)
    fix_id, result = fix_session(conn, args.session, args.at)
    not_stored_note(conn, "the fix")
    s = archive.get_session(conn, args.session)
    if args.plot:
        os.makedirs(args.plot, exist_ok=True)
        from host import plots
        track = json.loads(s["track"])
        plots.plotting_sheet(result, os.path.join(args.plot, "sheet-%d.png" % fix_id), track=track)
        plots.contact_timeline(result, os.path.join(args.plot, "timeline-%d.png" % fix_id))
    stored = not getattr(conn, "readonly", False)
    if args.json:
        print(json.dumps(dict(result, fix_id=fix_id if stored else None, session_id=args.session, stored=stored),
                         indent=1))
        return 0
    print("session %d, stored as fix %d" % (args.session, fix_id) if stored else
          "session %d (read-only archive: the fix is not stored)" % args.session)
    print_fix(result)
    print(CAUTION_TEXT)
    return 0


@guarded
def run_plan(args):
    conn = open_db(args, write=False)
    archive.refresh_sessions(conn)
    text = archive.session_text(conn, args.session)
    from engine import almanac, plan, session
    alm = almanac.load()
    s = session.parse_session(text)
    found = plan.schedule(alm, s.images, s.track, s.observer, timescale.parse_utc(args.t_from),
                          timescale.parse_utc(args.t_to))
    result = plan.to_json_dict(found, s.track, s.observer)
    if args.json:
        print(json.dumps(result, indent=1))
        return 0
    for c in result.get("contacts", []):
        print("%s  %-4s %-5s %-6s %s" % (c["utc"], c["body"], c["limb"], c.get("image"), c.get("direction")))
    print(CAUTION_TEXT)
    return 0


@guarded
def run_calibrate(args):
    from engine import almanac, calibrate, instrument
    from engine.session import parse_session
    conn = open_db(args, fallback=True)
    archive.refresh_sessions(conn)
    s = archive.get_session(conn, args.session)
    text = archive.session_text(conn, args.session)
    alm = almanac.load()
    session = parse_session(text, alm)
    if not session.track.known:
        raise UserError("session %d: the track is not known (attach a GPS track with --known to calibrate)"
                        % args.session)
    inst = instrument.parse_instrument(archive.get_instrument(conn, s["instrument_id"]))
    result = calibrate.calibrate_session(session, alm, inst)
    new_inst = calibrate.calibrated_instrument(result, session, inst).to_dict()
    with archive.transaction(conn):
        cid = archive.add_calibration(conn, s["instrument_id"], result)
        new_id = archive.add_instrument(conn, new_inst)
    not_stored_note(conn, "the calibration")
    if args.json:
        print(json.dumps(dict(result, calibration_id=cid, calibrated_instrument_id=new_id), indent=1))
        return 0
    from host.cmd_calibrate import render
    print("\n".join(render(result)))
    print("stored as calibration %d of instrument %d; the calibrated instrument is archive instrument %d"
          % (cid, s["instrument_id"], new_id))
    print()
    print(CAUTION_TEXT)
    return 0


@guarded
def run_export(args):
    from host import exports
    conn = open_db(args, write=False)
    archive.refresh_sessions(conn)
    written = exports.write_all(conn, args.csv, args.gpx, args.geojson, args.sessions, args.plots)
    if args.json:
        print(json.dumps(exports.archive_json(conn), indent=1))
        return 0
    data = exports.archive_json(conn)
    print("archive: %d timer(s), %d contact(s) (%d voided), %d session(s), %d fix(es)" % (
        len(data["devices"]), len(data["contacts"]), sum(1 for c in data["contacts"] if c["void"]),
        len(data["sessions"]), len(data["fixes"])))
    for path in written:
        print("wrote %s" % path)
    if not written:
        print("(give --csv DIR, --gpx FILE, --geojson FILE, --sessions DIR or --plots DIR to write files, "
              "--json for everything)")
    return 0
