"""``limbclock calibrate``: image deviations and reaction delay from contacts at a known position."""
import json

from engine import calibrate
from host.cautions import CAUTION_TEXT
from host.errors import UserError
from host.inputs import option, read_file


def register(sub):
    p = sub.add_parser("calibrate", help="calibrate the images and the reaction delay at a known position",
                       description="From a session whose track is known (\"known\": true), estimate each image's "
                                   "true deviation with its sigma, the observer's reaction delay (needs an image "
                                   "timed both rising and setting) and the plate angles that best explain them.")
    p.add_argument("session", help="limbclock-session/1 file with \"track\": {\"known\": true}")
    p.add_argument("--instrument", metavar="FILE",
                   help="limbclock-instrument/1 file: coefficient vectors and plate angles, and the base for --write")
    p.add_argument("--delay", default="auto",
                   help="reaction delay: 'auto' (estimate when separable) or seconds to hold (default auto)")
    p.add_argument("--time-sigma", type=float, default=0.25, help="timing scatter per contact, s (default 0.25)")
    p.add_argument("--write", metavar="INSTRUMENT", help="write the calibrated limbclock-instrument/1 file")
    p.add_argument("--name", help="instrument name for --write")
    p.add_argument("--json", action="store_true", help="machine-readable output")
    p.set_defaults(func=run)


def run(args):
    from engine import almanac
    from engine.session import parse_session
    alm = almanac.load()
    session = parse_session(read_file(args.session, "session"), alm)
    inst = None
    if args.instrument:
        from engine.instrument import parse_instrument
        inst = parse_instrument(read_file(args.instrument, "instrument"))
    if args.delay == "auto":
        delay = "auto"
    else:
        try:
            delay = float(args.delay)
        except ValueError:
            raise UserError("--delay: %r is neither 'auto' nor a number of seconds" % args.delay)
        delay = option(delay, "--delay", "reaction_delay_s")
    time_sigma = option(args.time_sigma, "--time-sigma", lo=0.0, hi=5.0)
    if time_sigma == 0.0:
        raise UserError("--time-sigma: must be > 0 s")
    result = calibrate.calibrate_session(session, alm, inst, delay, time_sigma)
    result["warnings"] = list(session.warnings) + result["warnings"]
    if args.write:
        out = calibrate.calibrated_instrument(result, session, inst, args.name)
        with open(args.write, "w") as f:
            f.write(out.dumps())
    if args.json:
        print(json.dumps(result, indent=1))
        return 0
    print("\n".join(render(result)))
    if args.write:
        print("wrote %s" % args.write)
    print()
    print(CAUTION_TEXT)
    return 0


def render(r):
    lines = ["Calibration at the known track (last contact %s)" % r["calibrated_utc"], "",
             "  image  nominal     calibrated  offset'  sigma'  contacts (rising/setting)",
             "  -----  ----------  ----------  -------  ------  -------------------------"]
    for im in r["images"]:
        lines.append("  %-5s  %9.4f\u00b0  %9.4f\u00b0  %+7.2f  %6.2f  %d (%d/%d)" % (
            im["id"], im["nominal_deg"], im["deviation_deg"], im["offset_arcmin"], im["sigma_arcmin"],
            im["contacts"], im["rising"], im["setting"]))
    if r["uncalibrated"]:
        lines.append("  not timed (nominal kept): %s" % ", ".join(r["uncalibrated"]))
    lines.append("")
    if r["reaction_delay_estimated"]:
        lines.append("reaction delay %.2f s +- %.2f s (contacts are stamped this late)" % (
            r["reaction_delay_s"], r["reaction_delay_sigma_s"]))
    else:
        lines.append("reaction delay held at %.2f s (not estimated)" % r["reaction_delay_s"])
    if r["plate_angles_deg"]:
        lines.append("plate angles %s deg (sigma %s'), misfit rms %.2f'" % (
            ", ".join("%.4f" % a for a in r["plate_angles_deg"]),
            ", ".join("%.2f" % s for s in r["plate_angles_sigma_arcmin"]), r["plate_fit_rms_arcmin"]))
    lines.append("a-posteriori unit weight %.2f over %d contacts" % (r["sigma0"], r["contacts_used"]))
    for w in r["warnings"]:
        lines.append("warning: " + w)
    return lines
