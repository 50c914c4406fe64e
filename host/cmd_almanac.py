"""``limbclock almanac`` (Sun and Moon places, a day's hourly table) and
``limbclock almanac-fit`` (regenerate the shipped ``engine/data/YYYY.lca``)."""
import json
import os
import sys

from engine import almanac, angles, timescale
from engine.constants import US_PER_DAY, US_PER_S
from host.cautions import CAUTION_LINES
from host.errors import UserError


def register(sub):
    p = sub.add_parser("almanac", help="GHA, declination, SD and HP of the Sun or Moon, or a day's hourly table",
                       description="Apparent places from the shipped compact almanac (engine/data). "
                                   "Either --body with one or more --utc, or --day for an hourly table of both bodies.")
    p.add_argument("--body", choices=almanac.BODIES, help="sun or moon (with --utc)")
    p.add_argument("--utc", action="append", default=[], metavar="UTC",
                   help="instant, ISO 8601 with Z (e.g. 2029-08-03T06:41:12.250Z); repeatable")
    p.add_argument("--day", metavar="YYYY-MM-DD", help="hourly table of both bodies for this UTC date")
    p.add_argument("--dut1", type=float, default=0.0, metavar="S",
                   help="UT1 - UTC in seconds (|DUT1| <= 0.9; default 0, costing up to 0.23' of GHA)")
    p.add_argument("--json", action="store_true", help="machine-readable output")
    p.set_defaults(func=run)

    f = sub.add_parser("almanac-fit", help="regenerate the compact almanac files from DE421 (needs the fit extra)",
                       description="Fit Chebyshev series to the reference pipeline (DE421 + ERFA) and write "
                                   "one YYYY.lca file per year, checking each against the reference.")
    f.add_argument("--first-year", type=int, required=True, metavar="Y")
    f.add_argument("--last-year", type=int, required=True, metavar="Y")
    f.add_argument("--out", default=None, metavar="DIR", help="output directory (default: engine/data)")
    f.add_argument("--json", action="store_true", help="print the error report as JSON at the end")
    f.set_defaults(func=run_fit)


def _dut1_us(args):
    if not -0.9 <= args.dut1 <= 0.9:
        raise UserError("--dut1 must lie within -0.9..0.9 s (ITU-R TF.460-6), got %g" % args.dut1)
    return int(round(args.dut1 * US_PER_S))


def fmt_gha(a_deg):
    """GHA as ddd°mm.m' (rounded before splitting)."""
    return angles.fmt_dm(a_deg, "", "-", 3, 1)


def fmt_dec(a_deg):
    """Declination as N dd°mm.m' / S dd°mm.m'."""
    sign, d, m = angles.split_dm(a_deg, 1)
    return "%s%02d\u00b0%04.1f'" % ("N" if sign > 0 or (d == 0 and m == 0) else "S", d, m)


def position_dict(p):
    return {"utc": timescale.format_utc(p.t_us), "body": p.body, "gha_deg": round(p.gha_deg, 6),
            "dec_deg": round(p.dec_deg, 6), "sd_arcmin": round(p.sd_arcmin, 4), "hp_arcmin": round(p.hp_arcmin, 4)}


def _cautions():
    print()
    for line in CAUTION_LINES:
        print(line)


def run(args):
    if args.day and args.utc:
        raise UserError("give either --day or --utc, not both")
    dut1 = _dut1_us(args)
    alm = almanac.load()
    if args.day:
        return _run_day(args, alm, dut1)
    if not args.utc:
        raise UserError("give --body with one or more --utc instants, or --day YYYY-MM-DD")
    if not args.body:
        raise UserError("--body sun|moon is required with --utc")
    positions = [alm.position(args.body, timescale.parse_utc(u), dut1) for u in args.utc]
    if args.json:
        print(json.dumps([position_dict(p) for p in positions]))
        return 0
    print("%-24s %-5s %-12s %-12s %7s %7s" % ("UTC", "body", "GHA", "Dec", "SD", "HP"))
    for p in positions:
        print("%-24s %-5s %-12s %-12s %6.2f' %6.2f'" % (timescale.format_utc(p.t_us), p.body, fmt_gha(p.gha_deg),
                                                       fmt_dec(p.dec_deg), p.sd_arcmin, p.hp_arcmin))
    print("(apparent geocentric places; GHA with DUT1 = %+.1f s)" % args.dut1)
    _cautions()
    return 0


def _run_day(args, alm, dut1):
    if args.body:
        raise UserError("--day prints both bodies; leave out --body")
    day0 = timescale.parse_utc(args.day.strip() + "T00:00:00Z")
    rows = []
    for h in range(25):
        t = day0 + h * 3600 * US_PER_S
        if h == 24 and t >= alm.span_us()[1]:
            break
        rows.append((t, alm.position("sun", t, dut1), alm.position("moon", t, dut1)))
    if args.json:
        print(json.dumps({"format": "limbclock-almanac-day/1", "date": args.day.strip(), "dut1_s": args.dut1,
                          "rows": [{"utc": timescale.format_utc(t, 0), "sun": position_dict(s),
                                    "moon": position_dict(m)} for t, s, m in rows]}))
        return 0
    # noon values for the semi-diameters and the equation of time
    noon = day0 + US_PER_DAY // 2
    sun_noon = alm.position("sun", noon, dut1)
    # equation of time = apparent - mean solar time; the mean Sun's GHA is 0 at 12h UT1
    eot_min = angles.norm180(sun_noon.gha_deg) * 4.0
    print("limbclock almanac  %s  (UTC; apparent geocentric places)" % args.day.strip())
    print()
    print(("  UTC  |%s|%s" % ("SUN".center(22), "MOON".center(36))).rstrip())
    print("  h    |%s|%s" % ("   GHA        Dec".ljust(22), "   GHA        Dec         HP     SD"))
    print("  -----+%s+%s" % ("-" * 22, "-" * 36))
    for t, s, m in rows:
        hh = ((t - day0) // (3600 * US_PER_S))
        print("  %02d   | %s  %s | %s  %s  %5.1f' %5.1f'" % (hh, fmt_gha(s.gha_deg), fmt_dec(s.dec_deg),
                                                            fmt_gha(m.gha_deg), fmt_dec(m.dec_deg),
                                                            m.hp_arcmin, m.sd_arcmin))
        if hh % 6 == 5:
            print("       |%s|" % (" " * 22))
    print()
    print("  Sun at 12h: SD %.1f'  HP %.2f'  equation of time %+.1f min"
          % (sun_noon.sd_arcmin, sun_noon.hp_arcmin, eot_min))
    print("  DUT1 = %+.1f s.  Altitude corrections (dip, refraction, parallax, SD) are not applied here." % args.dut1)
    _cautions()
    return 0


def run_fit(args):
    from host import almanac_fit
    out = args.out or os.path.join(os.path.dirname(os.path.abspath(almanac.__file__)), "data")

    def progress(line):
        print(line, file=sys.stderr if args.json else sys.stdout, flush=True)

    results = almanac_fit.fit_years(args.first_year, args.last_year, out, progress)
    if args.json:
        print(json.dumps({str(y): {"bytes": b, "max_error": rep} for y, (b, rep) in results.items()}, indent=1))
    else:
        worst = {}
        for _, (_, rep) in results.items():
            for body, r in rep.items():
                for k, v in r.items():
                    if k != "points":
                        worst[(body, k)] = max(worst.get((body, k), 0.0), v)
        print("worst over %d year(s): " % len(results)
              + ", ".join("%s %s %.4f'" % (b, k.replace("_arcmin", ""), v) for (b, k), v in sorted(worst.items())))
    return 0
