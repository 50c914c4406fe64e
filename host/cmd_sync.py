"""``limbclock sync`` (pull the timer's log into the archive) and ``limbclock push`` (send a file).

    limbclock sync --port /dev/ttyACM0 [--db FILE] [--json]
    limbclock push --port /dev/ttyACM0 --instrument stack.json
    limbclock push --port /dev/ttyACM0 --track session.json     # DR track + observer (limbclock-track/1)
"""
import json
import sys

from host import archive
from host.cautions import CAUTION_TEXT
from host.errors import UserError


def register(sub):
    p = sub.add_parser("sync", help="pull the timer's log into the archive (resumable, no duplicates)")
    p.add_argument("--port", required=True, help="serial port of the timer (or the virtual timer's pty)")
    p.add_argument("--db", default=None, help="archive file (default: %s)" % archive.default_path())
    p.add_argument("--progress", dest="progress", action="store_true", default=None,
                   help="always show the progress bar on stderr (default: on a terminal, long transfers)")
    p.add_argument("--no-progress", dest="progress", action="store_false", help="never show the progress bar")
    p.add_argument("--timeout", type=float, default=1.0, metavar="S", help="seconds to wait for each answer")
    p.add_argument("--batch", type=int, default=None, metavar="N",
                   help="records per read request (default: as many as a frame holds); smaller on a poor link")
    p.add_argument("--json", action="store_true", help='machine-readable: {"new", "duplicates", "device"}')
    p.set_defaults(func=run_sync)

    p = sub.add_parser("push", help="send an instrument, almanac or track file to the timer (verified)")
    p.add_argument("--port", required=True, help="serial port of the timer")
    g = p.add_mutually_exclusive_group(required=True)
    g.add_argument("--instrument", metavar="FILE", help="limbclock-instrument/1 file")
    g.add_argument("--almanac", metavar="FILE", help="almanac file (.lca)")
    g.add_argument("--track", metavar="FILE",
                   help="DR track and observer: a limbclock-track/1 file, or a session file (its track and "
                        "observer are sent as limbclock-track/1)")
    p.add_argument("--json", action="store_true", help="machine-readable output")
    p.set_defaults(func=run_push)


def run_sync(args):
    from host import sync
    db = args.db or archive.default_path()
    if args.timeout <= 0:
        raise UserError("--timeout must be positive")
    if args.batch is not None and args.batch < 1:
        raise UserError("--batch must be at least 1")
    res = sync.sync_port(args.port, db, progress=args.progress, timeout=args.timeout, batch=args.batch)
    if args.json:
        print(json.dumps({"new": res["new"], "duplicates": res["duplicates"], "device": res["device"],
                          "last_seq": res["last_seq"], "not_on_timer": res["not_on_timer"], "db": db}))
        return 0
    if res["not_on_timer"]:
        print("note: %d earlier record(s) of timer %s were confirmed to another archive and are no longer "
              "on the timer; they are not in this one" % (res["not_on_timer"], res["device"]), file=sys.stderr)
    print("timer %s: %d new record(s), %d duplicate(s); archive holds up to seq %d (%s)"
          % (res["device"], res["new"], res["duplicates"], res["last_seq"], db))
    print(CAUTION_TEXT)
    return 0


def run_push(args):
    from host import sync
    from host.timer_client import TimerClient
    slot, path = [(s, getattr(args, s)) for s in ("instrument", "almanac", "track") if getattr(args, s)][0]
    try:
        with open(path, "rb") as f:
            data = f.read()
    except OSError as exc:
        raise UserError("--%s %s: %s" % (slot, path, exc.strerror or exc))
    sync.check_file(slot, data)        # a bad file is refused before the port is even opened
    with TimerClient(args.port) as client:
        res = sync.push(client, slot, data)
    if args.json:
        print(json.dumps(res))
        return 0
    print("sent %s (%d bytes) to timer %s; read back and verified, CRC-32 %s"
          % (slot, res["size"], res["device"], res["crc32"]))
    print(plan_text(res))
    print(CAUTION_TEXT)
    return 0


def plan_text(res):
    """One line: the timer's next contact after a push, or why it has none."""
    c = res.get("next_contact")
    if c:
        return "the timer now shows the next contact: %s %s %s limb, %s, at %s, Zn %03d" % (
            c["image"], c["body"], c["limb"], c["direction"], c["utc"], int(c["zn_deg"] + 0.5) % 360)
    if res.get("plan_problem"):
        return "the timer shows no next contact: %s" % res["plan_problem"]
    if res.get("clock_state") == "none":
        return "the timer has no time yet (no GPS): it shows the next contact once it has"
    return "the timer shows no next contact within its planning horizon (this limb)"
