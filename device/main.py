"""Starting the timer on a board: the profile, the way back to the prompt, the console, the watchdog.

The board's ``/main.py`` (written by ``limbclock board build``) is two lines::

    import device.main
    device.main.start()

``start()`` reads ``board.json`` (a ``limbclock-board/1`` profile), then

1. **the way back to the prompt**: if the button is held down at power-on for ``HOLD_MS``
   (2 s), the firmware does not start; the board stays at MicroPython's prompt with Ctrl-C
   working, for ``mpremote`` and ``limbclock board install``;
2. builds the hardware (``device.board.Board.from_profile``; the ``sim`` profile:
   ``device.simboard.SimBoard``, driven by ``limbclock sim --micropython``) with the
   profile's watchdog, and the firmware with the device ID (``lc/device_id``, written by
   ``limbclock board install`` from ``machine.unique_id()``, or made from it at first boot),
   the almanac years in ``almanac/`` and the oscillator profile;
3. **owns the console**: ``micropython.kbd_intr(-1)`` while the link runs, so the 0x03 bytes
   of the protocol's frames (a status request for 1022 bytes is 0x03FE; pushed files) are
   data, not Ctrl-C; given back if the loop ever ends;
4. runs the loop: ``poll()``, feed the watchdog, ``idle()``.  An exception out of a pass is
   counted and the loop goes on (after 20 in a row it stops and lets the watchdog reset the
   board).  The watchdog is fed by the loop, and during a long computation by the engine's
   cooperative hook (``engine.coop``: each evaluation of the forward model), unless the firmware
   core installs a hook of its own; a pass stuck elsewhere for ``watchdog_ms`` resets the board.

``check(seconds)`` is what ``limbclock board check`` runs through ``mpremote``: the firmware for
a few seconds without the host link and without a watchdog, then one JSON line with versions,
free heap, the almanac's span and the clock's state.
"""
import gc
import json

PROFILE_FILE = "board.json"
FLASH_DIR = "lc"
ALMANAC_DIR = "almanac"
ID_FILE = "device_id"
HOLD_MS = 2000
MAX_FAULTS = 20                  # passes failing in a row before the loop gives up (watchdog resets)


def load_profile(path=PROFILE_FILE):
    with open(path) as f:
        prof = json.load(f)
    if prof.get("format") != "limbclock-board/1":
        raise ValueError("%s: not a limbclock-board/1 profile" % path)
    return prof


def device_id(store, hw):
    """The ID kept in the store; at first boot ``device.firmware.device_id_from`` the chip's unique
    ID (``LC-`` + its last 8 hex digits), written so that it never changes."""
    from device.firmware import device_id_from
    raw = store.read(ID_FILE)
    if raw:
        return raw.decode().strip()
    uid = getattr(hw, "unique_id", None)
    did = device_id_from(uid() if uid is not None else b"")
    store.replace(ID_FILE, did.encode())
    return did


def _oscillator(prof):
    from device import clock
    return clock.XO if prof.get("oscillator") == "xo" else clock.TCXO


def make_firmware(hw, prof, did=None):
    """The firmware on ``hw`` as ``prof`` sets it up (device ID, oscillator, log size, almanac)."""
    from device.firmware import Firmware
    if did is None:
        did = device_id(hw.store, hw)
    return Firmware(hw, device_id=did, capacity=prof.get("log_bytes", 65536), profile=_oscillator(prof),
                    data_dir=prof.get("almanac_dir", ALMANAC_DIR))


def run(fw, hw):
    """The main loop (returns only when ``hw.running()`` says the world ended: the simulator)."""
    faults = 0
    running = getattr(hw, "running", None)
    while True:
        hw.idle()
        if running is not None and not running():
            return
        try:
            fw.poll()
            faults = 0
        except MemoryError:
            gc.collect()
            faults += 1
        except Exception as e:   # a fault in one pass must not stop the timer: count it, go on
            faults += 1
            fw.message = "fault: %s" % type(e).__name__
            fw.dirty = True
            if faults >= MAX_FAULTS:
                raise
        if faults < MAX_FAULTS:
            hw.feed_watchdog()


def start(profile_path=PROFILE_FILE):
    prof = load_profile(profile_path)
    if prof.get("hardware") == "sim":
        from device.simboard import SimBoard
        hw = SimBoard.from_shim(prof)
        fw = make_firmware(hw, prof, hw.device_id)
        hw.attach(fw)
        run(fw, hw)
        hw.finish(fw)
        return
    from device.board import Board
    if Board.button_held(prof["button"]["pin"], HOLD_MS):
        print("limbclock: button held at power-on: firmware not started; Ctrl-C works (mpremote)")
        return
    hw = Board.from_profile(prof, FLASH_DIR)
    fw = make_firmware(hw, prof)
    for f in hw.faults:
        fw.message = f[:40]
    from engine import coop
    prev = coop.set_hook(hw.feed_watchdog)     # a long reduction feeds the watchdog at each step
    if prev is not None:                       # the firmware core has its own hook: it stays
        coop.set_hook(prev)
    Board.own_console(True)
    try:
        run(fw, hw)
    finally:
        Board.own_console(False)


def check(seconds=5, profile_path=PROFILE_FILE):
    """Run the firmware ``seconds`` without link or watchdog; print one JSON line (``LCCHECK {...}``)."""
    import time
    import device
    out = {"firmware": device.FIRMWARE_VERSION, "protocol": device.PROTOCOL_VERSION}
    try:
        import engine
        out["engine"] = getattr(engine, "VERSION", None)
        out["frozen"] = getattr(device, "__file__", "").startswith(".frozen")
        prof = load_profile(profile_path)
        out["profile"] = prof.get("name")
        from device.board import Board
        hw = Board.from_profile(prof, FLASH_DIR, link=False, watchdog=False)
        fw = make_firmware(hw, prof)
        out["device_id"] = fw.device_id
        out["faults"] = hw.faults
        t0 = time.ticks_ms()
        while time.ticks_diff(time.ticks_ms(), t0) < seconds * 1000:
            fw.poll()
            hw.idle()
        st = fw.status()
        out["clock"] = st["clock"]
        out["gps"] = st["gps"]
        out["log"] = {"last_seq": st["log"]["last_seq"], "free_records": st["log"]["free_records"]}
        out["display"] = st["display"]
        st = None
        gc.collect()
        out["mem_free"] = gc.mem_free()          # with the firmware built and running, as at boot
        out["mem_alloc"] = gc.mem_alloc()
        from engine import almanac
        alm = almanac.load(prof.get("almanac_dir", ALMANAC_DIR), 1)
        out["almanac"] = [alm.first_year, alm.last_year]
    except Exception as e:      # reported, not raised: the host prints it as the check's finding
        out["error"] = "%s: %s" % (type(e).__name__, e)
    print("LCCHECK " + json.dumps(out))
