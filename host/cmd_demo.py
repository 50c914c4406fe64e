"""``limbclock demo [--out DIR]``: the whole chain on an invented scenario (see ``host/demo.py``)."""
import json


def register(sub):
    p = sub.add_parser("demo", help="run the whole chain on an invented scenario; plots and exports into DIR")
    p.add_argument("--out", default="demo-out", metavar="DIR", help="output folder (default: demo-out)")
    p.add_argument("--json", action="store_true",
                   help="print a machine-readable summary on stdout (the story goes to stderr)")
    p.set_defaults(func=run)


def run(args):
    import sys
    from host import demo
    summary = demo.run(args.out, stream=sys.stderr if args.json else sys.stdout)
    if args.json:
        print(json.dumps({"error_nm": summary["error_nm"], "inside_ellipse": summary["inside_ellipse"],
                          "dr_error_nm": summary["dr_error_nm"], "contacts": summary["contacts"],
                          "labels_correct": summary["labels_correct"], "sync": summary["sync"],
                          "wall_s": summary["wall_s"], "fix": summary["fix"], "written": summary["written"],
                          "onboard": summary["onboard"],
                          "timer": None if summary["timer"] is None else
                          {k: v for k, v in summary["timer"].items() if k != "session_text"}},
                         indent=1))
    return 0
