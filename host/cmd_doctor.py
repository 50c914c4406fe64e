"""``limbclock doctor``: versions, data files and how far the shipped almanac reaches."""
import json
import os
import platform
import sys


def register(sub):
    p = sub.add_parser("doctor", help="print versions, data file locations and the almanac's reach")
    p.add_argument("--json", action="store_true", help="machine-readable output")
    p.set_defaults(func=run)


def gather():
    import engine
    from engine import timescale
    info = {"python": sys.version.split()[0], "platform": platform.platform(),
            "engine_dir": os.path.dirname(os.path.abspath(engine.__file__)),
            "leap_table_checked": timescale.LEAP_TABLE_CHECKED,
            "leap_table_valid_until": timescale.LEAP_TABLE_VALID_UNTIL}
    for mod in ("numpy", "serial", "matplotlib", "erfa", "jplephem"):
        try:
            m = __import__(mod)
            info[mod] = getattr(m, "__version__", getattr(m, "VERSION", "?"))
        except ImportError:
            info[mod] = None
    try:
        from engine import almanac
        info["almanac"] = almanac.describe_shipped()
    except (ImportError, AttributeError, ValueError) as exc:
        info["almanac"] = "unavailable: %s" % exc
    return info


def run(args):
    info = gather()
    if args.json:
        print(json.dumps(info, indent=2))
        return 0
    alm = info.pop("almanac")
    for k, v in info.items():
        print("%-24s %s" % (k, v if v is not None else "not installed"))
    if isinstance(alm, dict):
        sizes = [f["bytes"] for f in alm.get("files", [])]
        print("%-24s %s" % ("almanac files", alm.get("dir")))
        print("%-24s %s .. %s (years %s)" % ("almanac reaches", alm.get("first_utc"), alm.get("last_utc"),
                                             alm.get("years")))
        if sizes:
            print("%-24s %d files, %d bytes (%d..%d per year)" % ("almanac size", len(sizes), sum(sizes),
                                                                 min(sizes), max(sizes)))
    else:
        print("%-24s %s" % ("almanac", alm))
    return 0
