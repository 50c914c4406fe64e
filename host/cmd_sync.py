"""``limbclock sync`` (pull the timer's log into the archive) and ``limbclock push`` (send a file).

    limbclock sync --port /dev/ttyACM0 [--db FILE] [--new] [--json]
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
                   help="records per read request (default: as many as a frame holds)")
    p.add_argument("--new", action="store_true",
                   help="make a new archive in an empty (0-byte) file or an empty SQLite database at --db")
    p.add_argument("--json", action="store_true",
                   help='machine-readable: {"new", "duplicates", "device", "log_id", "missing_on_timer", ...}')
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
    import os
    from host import sync
    db = args.db or archive.default_path()
    if args.timeout <= 0:
        raise UserError("--timeout must be positive")
    if args.batch is not None and args.batch < 1:
        raise UserError("--batch must be at least 1")
    created = not os.path.exists(db) or os.path.getsize(db) == 0
    try:
        res = sync.sync_port(args.port, db, progress=args.progress, timeout=args.timeout, batch=args.batch,
                             new=args.new)
    except archive.ArchiveReadOnly as exc:
        raise UserError("%s; nothing was read from the timer (its records stay on it)" % exc)
    except sqlite3_errors() as exc:
        raise archive.ArchiveDamaged(archive.damaged_message(db, [exc], before_ack=True))
    lid = archive.log_label(res["log_id"])
    if args.json:
        print(json.dumps({"new": res["new"], "duplicates": res["duplicates"], "device": res["device"],
                          "log_id": lid, "last_seq": res["last_seq"], "confirmed_seq": res["confirmed_seq"],
                          "missing_on_timer": res["missing_on_timer"], "missing_seqs": res["missing_seqs"],
                          "not_on_timer": res["not_on_timer"], "db": db, "link": res.get("link")}))
        return 0
    if created:
        print("created a new archive at %s" % db)
    if res["not_on_timer"]:
        print("note: %d earlier record(s) of timer %s log %s were confirmed to another archive and are no longer "
              "on the timer; they are not in this one" % (res["not_on_timer"], res["device"], lid), file=sys.stderr)
    if res["missing_on_timer"]:
        print("warning: %d record(s) of timer %s log %s were damaged on the timer and could not be read (seq %s); "
              "the archive notes them as missing" % (res["missing_on_timer"], res["device"], lid,
                                                    _seq_ranges(res["missing_seqs"])), file=sys.stderr)
    print("timer %s log %s: %d new record(s), %d duplicate(s); archive holds up to seq %d, the timer confirmed "
          "up to %d (%s)" % (res["device"], lid, res["new"], res["duplicates"], res["last_seq"],
                             res["confirmed_seq"], db))
    link = res.get("link") or {}
    if link.get("error_rate", 0) >= 0.0005:
        print("link: about %.1f %% of the bytes arrived damaged (%d of %d frames); the sync completed by "
              "asking again" % (100.0 * link["error_rate"], link["damaged"], link["damaged"] + link["frames"]))
    print(CAUTION_TEXT)
    return 0


def sqlite3_errors():
    import sqlite3
    return (sqlite3.DatabaseError,)


def _seq_ranges(seqs):
    """``[3, 4, 5, 9]`` -> ``"3-5, 9"``."""
    out = []
    for s in sorted(seqs):
        if out and s == out[-1][1] + 1:
            out[-1][1] = s
        else:
            out.append([s, s])
    return ", ".join("%d" % a if a == b else "%d-%d" % (a, b) for a, b in out)


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
