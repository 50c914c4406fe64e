"""``limbclock plan``: the contact schedule for the DR track (what to watch for, and when)."""
import json

from engine import plan, timescale
from engine.model import Observer, Track
from host.cautions import CAUTION_LINES, CAUTION_TEXT
from host.errors import UserError
from host.inputs import option, read_file

HOURS_DEFAULT = 24


def register(sub):
    p = sub.add_parser("plan", help="predict when each image of the Sun or Moon will touch the horizon",
                       description="Predict every contact of an image of the Sun or Moon with the sea horizon "
                                   "for the moving DR position, in time order, with the same forward model the "
                                   "fix inverts.  Give a session (its track, observer and instrument; its "
                                   "contacts are ignored), or --lat/--lon with --instrument.")
    p.add_argument("session", nargs="?", help="limbclock-session/1 file")
    p.add_argument("--from", dest="t_from", required=True, metavar="UTC", help="start, ISO 8601 UTC")
    p.add_argument("--to", dest="t_to", metavar="UTC", help="end, ISO 8601 UTC (default: start + 24 h)")
    p.add_argument("--lat", type=float, help="DR latitude, degrees (N+)")
    p.add_argument("--lon", type=float, help="DR longitude, degrees (E+)")
    p.add_argument("--at", metavar="UTC", help="time of the DR position (default: --from)")
    p.add_argument("--course", type=float, default=0.0, help="course over ground, degrees true (default 0)")
    p.add_argument("--speed", type=float, default=0.0, help="speed over ground, knots (default 0)")
    p.add_argument("--instrument", metavar="FILE", help="limbclock-instrument/1 file (images)")
    p.add_argument("--eye-height", type=float, default=2.0, help="height of eye, m (default 2.0)")
    p.add_argument("--temperature", type=float, default=10.0, help="air temperature, C (default 10)")
    p.add_argument("--pressure", type=float, default=1010.0, help="pressure, hPa (default 1010)")
    p.add_argument("--body", choices=("sun", "moon", "both"), default="both")
    p.add_argument("--limb", choices=("lower", "upper", "both"), default="both")
    p.add_argument("--min-deviation", type=float, default=plan.DEFAULT_MIN_DEVIATION_DEG,
                   help="leave out images below this deviation, degrees (default %(default)s)")
    p.add_argument("--step", type=int, default=plan.DEFAULT_STEP_S, help="scan step, s (default %(default)s)")
    p.add_argument("--zone", help="local time offset from UTC, e.g. +01 or -02:30 (default: from longitude)")
    p.add_argument("--card", metavar="FILE", help="write a printable card (.txt, or .png/.pdf via matplotlib)")
    p.add_argument("--json", action="store_true", help="machine-readable output")
    p.set_defaults(func=run)


def parse_zone(text):
    """'+01', '-02:30', '0' -> offset in minutes."""
    t = text.strip()
    sign = 1
    if t[:1] in "+-":
        sign = -1 if t[0] == "-" else 1
        t = t[1:]
    parts = t.split(":")
    try:
        h = int(parts[0])
        m = int(parts[1]) if len(parts) > 1 else 0
    except ValueError:
        raise UserError("--zone: %r is not an offset like +01 or -02:30" % text)
    if not (0 <= h <= 14 and 0 <= m < 60) or len(parts) > 2:
        raise UserError("--zone: %r is not an offset within -14..+14 hours" % text)
    return sign * (h * 60 + m)


def zone_from_longitude(lon_deg):
    """Nautical time zone of a longitude: offset (minutes) = 60 x round(lon / 15)."""
    return 60 * int(round(lon_deg / 15.0))


def _inputs(args):
    from engine import almanac
    alm = almanac.load()
    t_from = timescale.parse_utc(args.t_from)
    t_to = timescale.parse_utc(args.t_to) if args.t_to else t_from + HOURS_DEFAULT * 3600 * 1000000
    option(args.min_deviation, "--min-deviation", lo=0.0, hi=90.0)
    notes = []
    if args.session:
        if args.lat is not None or args.lon is not None or args.instrument:
            raise UserError("give either a SESSION or --lat/--lon/--instrument, not both")
        from engine.session import parse_session
        s = parse_session(read_file(args.session, "session"), need_contacts=False)
        images, track, observer = s.images, s.track, s.observer
    else:
        if args.lat is None or args.lon is None or not args.instrument:
            raise UserError("without a SESSION, --lat, --lon and --instrument are required")
        lat = option(args.lat, "--lat", "lat_deg")
        lon = option(args.lon, "--lon", lo=-180.0, hi=180.0)
        course = option(args.course, "--course", "course_deg")
        speed = option(args.speed, "--speed", "speed_kn")
        observer = Observer(option(args.eye_height, "--eye-height", "eye_height_m"),
                            option(args.temperature, "--temperature", "temperature_c"),
                            option(args.pressure, "--pressure", "pressure_hpa"))
        from engine.instrument import parse_instrument
        inst = parse_instrument(read_file(args.instrument, "instrument"))
        images = inst.image_tuples()
        t0 = timescale.parse_utc(args.at) if args.at else t_from
        track = Track(t0, lat, lon, course % 360.0, speed)
        notes.append("observer: eye %.1f m, %.0f C, %.0f hPa (defaults 2.0 m, 10 C, 1010 hPa unless given)"
                     % (observer.eye_height_m, observer.temperature_c, observer.pressure_hpa))
    return alm, images, track, observer, t_from, t_to, notes


def run(args):
    alm, images, track, observer, t_from, t_to, notes = _inputs(args)
    bodies = ("sun", "moon") if args.body == "both" else (args.body,)
    limbs = ("lower", "upper") if args.limb == "both" else (args.limb,)
    span = alm.span_us()
    if t_from < span[0] or t_to > span[1]:
        raise UserError("--from/--to: window outside the shipped almanac (%s .. %s)"
                        % (timescale.format_utc(span[0], 0), timescale.format_utc(span[1], 0)))
    contacts = plan.schedule(alm, images, track, observer, t_from, t_to, bodies, limbs, step_s=args.step,
                             min_deviation_deg=args.min_deviation)
    zone_min = parse_zone(args.zone) if args.zone else zone_from_longitude(track.position_at(t_from)[1])
    if args.card:
        write_card(args.card, contacts, track, observer, t_from, t_to, zone_min)
    if args.json:
        print(json.dumps(plan.to_json_dict(contacts, track, observer,
                                           {"from": timescale.format_utc(t_from, 0),
                                            "to": timescale.format_utc(t_to, 0),
                                            "zone_minutes": zone_min}), indent=1))
        return 0
    print("\n".join(render(contacts, track, t_from, t_to, zone_min, notes)))
    if args.card:
        print("card: %s" % args.card)
    print()
    print(CAUTION_TEXT)
    return 0


def _zone_label(zone_min):
    sign = "+" if zone_min >= 0 else "-"
    z = abs(zone_min)
    return "UTC%s%02d:%02d" % (sign, z // 60, z % 60)


def _hms(t_us, zone_min=0):
    s = timescale.format_utc(t_us + zone_min * 60 * 1000000, 0)
    return s[11:19]


def _gap(dt_us):
    s = int(round(dt_us / 1e6))
    if s >= 3600:
        return "%dh%02dm" % (s // 3600, (s % 3600) // 60)
    return "%dm%02ds" % (s // 60, s % 60)


def render(contacts, track, t_from, t_to, zone_min, notes=()):
    from engine.angles import fmt_lat, fmt_lon
    lat, lon = track.position_at(t_from)
    lines = ["Contact schedule %s .. %s UTC" % (timescale.format_utc(t_from, 0), timescale.format_utc(t_to, 0)),
             "DR %s %s at %s, course %03.0f, %.1f kn%s" % (
                 fmt_lat(lat), fmt_lon(lon), timescale.format_utc(t_from, 0), track.course_deg, track.speed_kn,
                 " (known track)" if track.known else ""),
             "local time %s" % _zone_label(zone_min)]
    lines.extend(notes)
    lines.append("")
    if not contacts:
        lines.append("no contacts in the window (images too high or too low for the bodies' altitudes)")
        return lines
    lines.append("  local     UTC       image  deviation  body  limb   motion    face  next    note")
    lines.append("  --------  --------  -----  ---------  ----  -----  -------  -----  ------  ----")
    day = None
    for k, c in enumerate(contacts):
        d = timescale.format_utc(c.t_us + zone_min * 60000000, 0)[:10]
        if d != day:
            lines.append("  %s (local date)" % d)
            day = d
        nxt = _gap(contacts[k + 1].t_us - c.t_us) if k + 1 < len(contacts) else ""
        note = []
        if c.low:
            note.append("low: refraction uncertain")
        if c.dark:
            note.append("dark: horizon?")
        lines.append("  %s  %s  %-5s  %8.4f\u00b0  %-4s  %-5s  %-7s  %03.0f\u00b0  %-6s  %s" % (
            _hms(c.t_us, zone_min), _hms(c.t_us), c.image, c.deviation_deg, c.body, c.limb, c.direction,
            c.zn_deg, nxt, ", ".join(note)))
    lines.append("")
    lines.append("%d contacts. 'face': bearing of the body (true) - face it squarely, the hinge level." % len(contacts))
    return lines


def write_card(path, contacts, track, observer, t_from, t_to, zone_min):
    """A printable paper backup of the schedule: plain text (.txt) or a matplotlib page (.png/.pdf/.svg)."""
    lines = render(contacts, track, t_from, t_to, zone_min,
                   ["eye %.1f m, %.0f C, %.0f hPa" % (observer.eye_height_m, observer.temperature_c,
                                                      observer.pressure_hpa)])
    if path.lower().endswith(".txt"):
        with open(path, "w") as f:
            f.write("\n".join(lines + [""] + list(CAUTION_LINES)) + "\n")
        return path
    per_page = 70
    if len(lines) > per_page:
        lines = lines[:per_page] + ["... %d more lines: write a .txt card for the full list" % (len(lines) - per_page)]
    lines = lines + [""] + list(CAUTION_LINES)
    import matplotlib
    matplotlib.use("Agg")
    from matplotlib.figure import Figure
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    height = 0.6 + 0.108 * len(lines)     # 6.5 pt monospace: about 0.1 in per line
    fig = Figure(figsize=(8.27, max(height, 3.0)))
    FigureCanvasAgg(fig)
    fig.text(0.03, 0.98, "\n".join(lines), family="monospace", fontsize=6.5, va="top")
    fig.savefig(path, dpi=150)
    return path
