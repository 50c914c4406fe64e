"""``limbclock identify``: which image made each unlabelled contact (and which labels do not fit)."""
import json

from engine import identify
from host.cautions import CAUTION_TEXT


def register(sub):
    p = sub.add_parser("identify", help="assign images to contacts timed without one",
                       description="Find which image made each contact whose image is null: the whole globe "
                                   "is searched for the positions that explain the contacts, ranked with the "
                                   "DR as a prior that may be wrong.  An image is given only at confidence "
                                   "0.99 or more; the others are reported with their alternatives, not "
                                   "guessed.  --cold-start ignores the DR.")
    p.add_argument("session", help="limbclock-session/1 file ('-' for standard input)")
    p.add_argument("--dr-sigma", type=float, help="DR uncertainty, nmi (default: session key dr_sigma_nm or 30)")
    p.add_argument("--cold-start", action="store_true", help="no usable DR: search the whole globe")
    p.add_argument("--json", action="store_true", help="machine-readable output")
    p.set_defaults(func=run)


def run(args):
    from engine import almanac
    from engine.session import parse_session
    from engine.timescale import format_utc
    from engine.angles import fmt_lat, fmt_lon
    alm = almanac.load()
    from host.inputs import read_file, option
    s = parse_session(read_file(args.session, "session"), alm)
    if args.dr_sigma is not None:
        args.dr_sigma = option(args.dr_sigma, "--dr-sigma", "dr_sigma_nm")
    if args.cold_start:
        cands = identify.cold_start(s, alm)
        if args.json:
            print(json.dumps({"format": "limbclock-identify/1", "cold_start": True, "candidates": cands}, indent=1))
            return 0
        print("Cold start: positions (at the last contact) that explain the contacts best, without the DR")
        for k, c in enumerate(cands):
            print("  %d. %s %s  %s  p %.2f  rms %.2f'  images %s" % (
                k + 1, fmt_lat(c["lat_deg"]), fmt_lon(c["lon_deg"]), "fits       " if c["fits"] else "DOES NOT FIT",
                c["probability"], c["rms_arcmin"], " ".join(c["images"])))
        print("More than one position that fits: take more sights, or judge by the DR.")
        print()
        print(CAUTION_TEXT)
        return 0
    r = identify.identify(s, alm, args.dr_sigma)
    if args.json:
        print(json.dumps(dict(r, format="limbclock-identify/1", cold_start=False), indent=1))
        return 0
    by_index = dict((c.index, c) for c in s.contacts)
    print("Image identification (DR sigma %.0f nmi; searched: %s)"
          % (r["dr_sigma_nm"], "the whole globe" if r["searched"] == "globe" else "near the DR"))
    if not r["consistent"]:
        print("NO position explains every contact: check the instrument, the times and the bodies")
    elif not r["dr_explains"]:
        print("The DR does NOT explain the contacts: the positions below were found without it")
    cands = r["candidates"]
    if cands:
        print("Position%s (at %s) that fit the contacts:" % ("s" if len(cands) > 1 else "", cands[0]["utc"]))
        for c in cands:
            print("  %s %s  probability %.2f, %.0f nmi from the DR" % (fmt_lat(c["lat_deg"]), fmt_lon(c["lon_deg"]),
                                                                    c["probability"], c["dr_distance_nm"]))
        if len(cands) > 1:
            print("More than one position fits: images they disagree on are left unidentified; take more sights.")
    print()
    print("  #    UTC                     body  limb   image  confidence  note")
    for c in r["contacts"]:
        sc = by_index[c["index"]]
        note = "given" if c["given"] else ""
        if c["ambiguous"]:
            note = "AMBIGUOUS: %s" % " or ".join(c["alternatives"])
        print("  %-3d  %s  %-4s  %-5s  %-5s  %10.2f  %s" % (c["index"], format_utc(sc.t_us, 2), sc.body, sc.limb,
                                                           c["image"] or "-", c["confidence"], note))
    for w in r["warnings"]:
        print("warning: " + w)
    print()
    print(CAUTION_TEXT)
    return 0
