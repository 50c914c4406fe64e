"""``limbclock fix SESSION [--at UTC] [--json]``: the fix from a session's timed contacts.

The computation is ``engine.reduce_session`` (one implementation); this module
only reads the file and prints the result: the doubts (``"doubts"``) above the
fix, the cautions at the end.  ``--json`` prints the dict and exits 0 whatever
its doubts; when no consistent fix exists (``engine.doubts.NoConsistentFix``)
the command prints one line and no position, and exits 2.
"""
import json

from host.cautions import CAUTION_LINES


def register(sub):
    p = sub.add_parser("fix", help="compute the fix and its 95%% ellipse from a session's timed contacts")
    p.add_argument("session", help="limbclock-session/1 JSON file ('-' for standard input)")
    p.add_argument("--at", metavar="UTC", help="fix epoch (ISO 8601 UTC; default: the last contact used)")
    p.add_argument("--offset", choices=("auto", "on", "off"), default="auto",
                   help="estimate a common deviation offset: auto (when the geometry determines it), on, off")
    p.add_argument("--keep-labels", action="store_true",
                   help="never read a rejected contact as the image or limb it fits (default: do, and say so)")
    p.add_argument("--json", action="store_true", help="machine-readable output (limbclock-fix/1)")
    p.set_defaults(func=run)


def _read(path):
    from host.inputs import read_file
    return read_file(path, "session")          # '-' for standard input; refused above the size limit


def compute(text, at=None, offset="auto", relabel=True):
    """The fix dict for a session text (``--at`` text or None)."""
    import engine
    from engine import timescale
    at_us = timescale.parse_utc(at) if at else None
    mode = {"auto": "auto", "on": True, "off": False}[offset]
    return engine.reduce_session(text, at_us=at_us, deviation_offset=mode, relabel=relabel)


def format_doubts(r):
    """The doubts of a fix dict, as lines to print above the fix (none when it has none)."""
    doubts = r.get("doubts") or []
    if not doubts:
        return []
    out = ["DOUBTS about this fix (%d): read them before you use it" % len(doubts)]
    for d in doubts:
        out.append("  DOUBT [%s]: %s" % (d["code"], d["message"]))
    out.append("")
    return out


def format_fix(r):
    """Human text of a fix dict (lines): its doubts first, the cautions last."""
    from engine.angles import fmt_lat, fmt_lon
    e = r["ellipse_95"]
    out = format_doubts(r)
    out += ["Fix at %s:  %s  %s" % (r["utc"], fmt_lat(r["lat_deg"]), fmt_lon(r["lon_deg"])),
           "  95%% ellipse: semi-axes %.1f x %.1f nmi, major axis %03.0f deg true"
           % (e["major_nm"], e["minor_nm"], e["major_axis_deg"]),
           "  DR then:     %s  %s   (fix is %.1f nmi from DR)"
           % (fmt_lat(r["dr"]["lat_deg"]), fmt_lon(r["dr"]["lon_deg"]), _dist(r)),
           "  contacts used %d of %d, unit weight s0 %.2f, %d iterations"
           % (r["contacts_used"], len(r["contacts"]), r["sigma0"], r["iterations"])]
    if r["deviation_offset_estimated"]:
        out.append("  deviation offset (estimated, common to all images): %+.1f' +- %.1f'"
                   % (r["deviation_offset_arcmin"], r.get("deviation_offset_sigma_arcmin") or 0.0))
    else:
        out.append("  deviation offset: not estimated (held at 0)")
    out.append("")
    out.append("  %3s %-12s %-4s %-5s %-5s %8s %8s %6s %8s %8s %5s  %s"
               % ("#", "time UTC", "body", "limb", "image", "Ho", "Hc", "Zn", "icpt nm", "resid nm", "sigma",
                  "status"))
    for c in r["contacts"]:
        t = c["utc"][11:23]
        if c["ho_deg"] is None:
            out.append("  %3d %-12s %-4s %-5s %-5s %8s %8s %6s %8s %8s %5s  not used: %s"
                       % (c["index"], t, c["body"], c["limb"], c["image"] or "?", "-", "-", "-", "-", "-", "-",
                          c["reason"]))
            continue
        if c["used"]:
            status = "used" if not c.get("labelled") else "used, %s" % c["reason"]
        else:
            status = "REJECTED: %s" % c["reason"]
        out.append("  %3d %-12s %-4s %-5s %-5s %8s %8s %6.1f %+8.2f %+8.2f %5.2f  %s %s"
                   % (c["index"], t, c["body"], c["limb"], c["image"], _dm(c["ho_deg"]), _dm(c["hc_deg"]),
                      c["zn_deg"], _r2(c["intercept_nm"]), _r2(c["residual_nm"]), c["sigma_nm"], c["direction"],
                      status))
    if r["warnings"]:
        out.append("")
        for w in r["warnings"]:
            out.append("warning: %s" % w)
    out.append("")
    out.extend(CAUTION_LINES)
    return out


def _r2(x):
    return round(x, 2) + 0.0      # no "-0.00"


def _dm(a_deg):
    from engine.angles import fmt_dm
    return fmt_dm(a_deg, "", "-", 2, 1)


def _dist(r):
    from engine.sphere import distance_nm
    return distance_nm(r["lat_deg"], r["lon_deg"], r["dr"]["lat_deg"], r["dr"]["lon_deg"])


def run(args):
    r = compute(_read(args.session), args.at, args.offset, relabel=not args.keep_labels)
    if args.json:
        print(json.dumps(r, indent=1))
    else:
        print("\n".join(format_fix(r)))
    return 0
