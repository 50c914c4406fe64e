"""``limbclock ladder``: the images of a plate stack, their deviations and brightness."""
import json


from engine import instrument
from host.cautions import CAUTION_TEXT


def register(sub):
    p = sub.add_parser("ladder", help="images of a plate stack: deviations, brightness, confusable pairs",
                       description="List the images a stack of glass plates at small fixed angles shows: "
                                   "deviation 2(mX+nY...), number of light paths, brightness from the Fresnel "
                                   "equations, faint images and pairs the eye may confuse.")
    p.add_argument("--plates", type=float, nargs="+", required=True, metavar="DEG",
                   help="angles between successive plates in degrees (two angles for three plates)")
    p.add_argument("--order", type=int, default=2, help="highest order (pairs of reflections), default 2")
    p.add_argument("--shade-od", type=float, default=0.0, help="optical density of a shade glass over all images")
    p.add_argument("--incidence", type=float, default=instrument.DEFAULT_INCIDENCE_DEG,
                   help="angle of incidence on the plates in degrees (default %(default)s)")
    p.add_argument("--glass-n", type=float, default=instrument.GLASS_N, help="refractive index (default %(default)s)")
    p.add_argument("--confuse", type=float, default=instrument.DEFAULT_CONFUSE_DEG,
                   help="flag image pairs closer than this, degrees (default %(default)s)")
    p.add_argument("--faint-ratio", type=float, default=instrument.DEFAULT_FAINT_RATIO,
                   help="faint below this fraction of the brightest image (default %(default)s)")
    p.add_argument("--plate-sigma", type=float, default=instrument.DEFAULT_PLATE_SIGMA_ARCMIN,
                   help="uncertainty of each plate angle in arcmin (default %(default)s)")
    p.add_argument("--name", default="", help="instrument name for --write")
    p.add_argument("--json", action="store_true", help="machine-readable output")
    p.add_argument("--plot", metavar="FILE", help="draw the ladder (PNG/PDF/SVG)")
    p.add_argument("--write", metavar="INSTRUMENT", help="write a nominal limbclock-instrument/1 file")
    p.set_defaults(func=run)


def run(args):
    lad = instrument.ladder(args.plates, args.order, incidence_deg=args.incidence, shade_od=args.shade_od,
                            n=args.glass_n, confuse_deg=args.confuse, faint_ratio=args.faint_ratio,
                            plate_sigma_arcmin=args.plate_sigma)
    if args.write:
        inst = instrument.from_ladder(lad, args.name or "plates " + " ".join("%g" % a for a in args.plates))
        with open(args.write, "w") as f:
            f.write(inst.dumps())
    if args.plot:
        from host.plot_ladder import plot_ladder
        plot_ladder(lad, args.plot)
    if args.json:
        d = lad.to_dict()
        d["format"] = "limbclock-ladder/1"
        print(json.dumps(d, indent=1))
        return 0
    print(render(lad))
    if args.write:
        print("\nwrote %s (%d images, source nominal)" % (args.write, sum(1 for im in lad.images if not im.faint)))
    if args.plot:
        print("plot: %s" % args.plot)
    print()
    print(CAUTION_TEXT)
    return 0


def render(lad):
    names = "XYZUVW"
    letters = [names[k] if k < len(names) else "a%d" % (k + 1) for k in range(len(lad.plate_angles_deg))]
    lines = ["Plates: %s (degrees)   incidence %.0f deg, glass n %.3f, shade OD %.1f" % (
        ", ".join("%s=%g" % (letters[k], a) for k, a in enumerate(lad.plate_angles_deg)),
        lad.incidence_deg, lad.n, lad.shade_od),
        "",
        "  image  deviation     D(deg)   sigma'  as         order paths  brightness  mag    note",
        "  -----  ----------  --------  ------  ---------  ----- -----  ----------  -----  ----"]
    confusable = set()
    for a, b, _ in lad.pairs:
        confusable.add(a)
        confusable.add(b)
    for im in lad.images:
        sign_d, whole, mins = _dm(im.deviation_deg)
        expr = "2(" + "+".join(("%d%s" % (c, letters[k])) if c != 1 else letters[k]
                               for k, c in enumerate(im.coef) if c) + ")"
        notes = []
        if im.faint:
            notes.append("faint")
        if im.unsafe:
            notes.append("UNSAFE without shade")
        if im.id in confusable:
            notes.append("confusable")
        if im.alt_coefs:
            notes.append("coincident paths")
        lines.append("  %-5s  %3d\u00b0%05.2f'  %8.4f  %6.2f  %-9s  %5d %5d  %10.3g  %5.1f  %s" % (
            im.id, whole, mins, im.deviation_deg, im.sigma_arcmin, expr, im.order, im.paths,
            im.rel_brightness, im.magnitude(), ", ".join(notes)))
    lines.append("")
    lines.append("direct image: %.3g of the light (%.1f mag)%s" % (
        lad.direct.fraction, lad.direct.magnitude(), "  UNSAFE for the Sun without shade" if lad.direct.unsafe else ""))
    if lad.pairs:
        lines.append("confusable pairs (closer than %.2f deg):" % lad.confuse_deg)
        for a, b, sep in lad.pairs:
            lines.append("  %s / %s  %.3f deg apart" % (a, b, sep))
    else:
        lines.append("no visible images closer than %.2f deg" % lad.confuse_deg)
    lines.append("brightness: relative to the brightest image; mag: below the unattenuated body.")
    return "\n".join(lines)


def _dm(deg):
    total = int(round(deg * 6000.0))
    return 1, total // 6000, (total % 6000) / 100.0



