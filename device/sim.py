"""The virtual timer: the firmware core on CPython, simulated hardware, a pseudo-terminal link.

``VirtualTimer`` presses the button at the contact times of a session (in
simulated time, accelerated), keeps its storage in ``state_dir`` (or memory)
and serves the host on a pseudo-terminal that pyserial opens like any port::

    vt = VirtualTimer(session="sights.json", state_dir="state", link_faults=0.01)
    port = vt.start()          # "/dev/pts/7"
    ...                        # TimerClient(port) talks to it
    vt.stop()

For tests without a thread or a pty, ``vt.loopback()`` returns a transport
for ``host.timer_client.TimerClient`` that runs the simulation as it is read.

Faults: ``link_faults`` drops or corrupts that fraction of the bytes in both
directions; ``power_cut_at_us`` (a true UTC instant) or
``power_cut_after_bytes`` (bytes written to storage, or only to the files whose
names start with ``power_cut_prefix``) cut the power; the timer
comes back ``restart_after_us`` later, recovers its log and carries on.
``storage_bytes`` makes the flash that small (writes beyond it fail with ENOSPC,
as a full flash does) and ``fail_writes`` fails that many writes with EIO: the
firmware holds the presses and says so, exactly as on a board.  ``stalls`` are
intervals in which the firmware's loop does not run; ``cpu_us`` is the simulated
time each tick read costs the firmware (a slow board: a reduction takes time and
the world moves on during it).

Identity: the board's unique id is made once and kept in ``state_dir/board-id``
(without a state directory it derives from ``seed``); the device id derives from
it (``LC-`` + hex) unless ``device_id`` is given.
"""
import json
import os
import random
import select
import sys
import threading
import time

from device import clock as clk
from device.firmware import Firmware, MODES
from device.hal import FileStore, TICKS_PERIOD
from device.simhw import SimWorld, SimHardware, Oscillator, MemStore, CuttingStore, FaultyStore, PowerCut
from engine.timescale import parse_utc

LEAD_US = 90 * 1000000          # the simulation starts this long before the first contact
BODIES = ("sun", "moon")
LIMBS = ("lower", "upper")


class SimError(ValueError):
    """A session or option the virtual timer cannot use."""


def read_session(session):
    """The session document (a dict) from a file path, JSON text or dict."""
    if isinstance(session, dict):
        doc = session
    else:
        text = session
        if not session.lstrip().startswith("{"):
            try:
                with open(session) as f:
                    text = f.read()
            except FileNotFoundError:
                raise SimError("session file %s not found" % session)
            except OSError as e:
                raise SimError("session file %s: %s" % (session, e.strerror or e))
        try:
            doc = json.loads(text)
        except ValueError as e:
            raise SimError("session is not JSON: %s" % e)
    return doc


def conditions_files(doc):
    """``{slot: bytes}`` for the timer's ``instrument`` and ``track`` slots from a session document:
    what ``limbclock push`` would send (a ``limbclock-instrument/1`` file; a ``limbclock-track/1``
    file with the observer)."""
    from device.onboard import track_file
    from engine.instrument import FORMAT
    inst = doc.get("instrument") if isinstance(doc, dict) else None
    if not isinstance(inst, dict) or not isinstance(doc.get("track"), dict):
        raise SimError("session: needs 'instrument' and 'track' objects to load them on the timer")
    d = {"format": FORMAT}
    for k in inst:
        d[k] = inst[k]
    return {"instrument": json.dumps(d).encode(), "track": track_file(doc["track"], doc.get("observer"))}


def read_contacts(session):
    """[(utc_us, body, limb)] from a session file path, JSON text or dict (only ``contacts``)."""
    doc = read_session(session)
    contacts = doc.get("contacts") if isinstance(doc, dict) else None
    if not isinstance(contacts, list):
        raise SimError("session: 'contacts' must be a list")
    out = []
    for i, c in enumerate(contacts):
        if not isinstance(c, dict) or "utc" not in c:
            raise SimError("session: contacts[%d] needs 'utc'" % i)
        body = c.get("body", "sun")
        limb = c.get("limb", "lower")
        if body not in BODIES or limb not in LIMBS:
            raise SimError("session: contacts[%d] body/limb must be sun|moon and lower|upper" % i)
        out.append((parse_utc(c["utc"]), body, limb))
    out.sort()
    return out


def _read_progress(path):
    try:
        with open(path) as f:
            doc = json.load(f)
    except FileNotFoundError:
        return None
    except ValueError:
        raise SimError("%s is damaged: remove it to press the whole session again" % path)
    except OSError as e:
        raise SimError("%s: %s" % (path, e.strerror or e))
    if not isinstance(doc, dict) or doc.get("format") != "limbclock-sim-progress/1" or \
            not isinstance(doc.get("last_pressed_utc_us"), int):
        raise SimError("%s: not a limbclock-sim-progress/1 file" % path)
    return doc["last_pressed_utc_us"]


class Faults:
    """Drops or corrupts a fraction ``rate`` of bytes (half each), seeded."""

    def __init__(self, rate, seed=0):
        self.rate = rate
        self.rng = random.Random(seed)
        self.dropped = 0
        self.corrupted = 0

    def apply(self, data):
        if not self.rate or not data:
            return bytes(data)
        out = bytearray()
        rng = self.rng
        for b in data:
            if rng.random() < self.rate:
                if rng.random() < 0.5:
                    self.dropped += 1
                    continue
                self.corrupted += 1
                b ^= rng.randrange(1, 256)
            out.append(b)
        return bytes(out)


def _state_dir(path):
    """Create (if needed) and check the state directory: a problem names the directory and why."""
    try:
        os.makedirs(os.path.join(path, "flash"), exist_ok=True)
        probe = os.path.join(path, ".probe")
        with open(probe, "w") as f:
            f.write("ok")
        os.remove(probe)
    except OSError as e:
        raise SimError("state directory %s: %s" % (path, e.strerror or e))


def _board_id(state_dir, seed):
    """The board's unique id bytes: kept in ``state_dir/board-id`` (made once), else from ``seed``."""
    if state_dir is None:
        return b"SIM" + bytes(((seed >> 24) & 255, (seed >> 16) & 255, (seed >> 8) & 255, seed & 255))
    path = os.path.join(state_dir, "board-id")
    try:
        with open(path) as f:
            uid = bytes.fromhex(f.read().strip())
        if uid:
            return uid
    except (OSError, ValueError):
        pass
    uid = os.urandom(8)
    try:
        with open(path, "w") as f:
            f.write(uid.hex() + "\n")
    except OSError as e:
        raise SimError("state directory %s: %s" % (state_dir, e.strerror or e))
    return uid


class VirtualTimer:
    def __init__(self, session=None, contacts=None, state_dir=None, link_faults=0.0, speed=0.0, seed=1,
                 drift_ppm=1.3, wander_ppm=0.0, aging_ppm_per_day=0.0, profile=clk.DEFAULT_PROFILE, outages=(),
                 power_cut_at_us=None, power_cut_after_bytes=None, restart_after_us=3000000,
                 display_file=None, display_stderr=False, capacity=65536, ticks_period=TICKS_PERIOD,
                 start_us=None, device_id=None, press_us=120000, conditions=False, fix_at_us=None,
                 receiver=clk.PRECEDING, names_next=False, label_delays_us=(120000, 180000), label_jitter_us=0,
                 storage_bytes=None, fail_writes=0, stalls=(), cpu_us=0, ms_counter=True, first_fix_us=None,
                 power_cut_prefix=""):
        self.contacts = list(contacts or []) if session is None else read_contacts(session)
        files = conditions_files(read_session(session)) if conditions and session is not None else {}
        self.state_dir = state_dir
        self.progress_path = None
        self.progress_error = None
        self.already_pressed = 0
        if state_dir:
            _state_dir(state_dir)
            # a restarted virtual timer does not press again what it pressed in an earlier run
            self.progress_path = os.path.join(state_dir, "sim-progress.json")
            done = _read_progress(self.progress_path)
            if done is not None:
                left = [c for c in self.contacts if c[0] > done]
                self.already_pressed = len(self.contacts) - len(left)
                self.contacts = left
                if start_us is None and not left:
                    start_us = done + 10000000
        self.uid = _board_id(state_dir, seed)
        self._saved = None
        if start_us is None:
            start_us = (self.contacts[0][0] if self.contacts else int(time.time()) * 1000000) - LEAD_US
        self.start_us = start_us
        self.base_store = FileStore(os.path.join(state_dir, "flash")) if state_dir else MemStore()
        try:
            for slot in files:                   # as if pushed by the host before the session
                self.base_store.replace("slot_" + slot, files[slot])
        except OSError as e:
            raise SimError("state directory %s: %s" % (state_dir, e.strerror or e))
        self.flash = FaultyStore(self.base_store, storage_bytes, fail_writes)
        self.faults_in = Faults(link_faults, seed)
        self.faults_out = Faults(link_faults, seed + 1)
        self.speed = speed
        self.profile = profile
        self.receiver = receiver
        self.capacity = capacity
        self.device_id = device_id
        self.ms_counter = ms_counter
        self.display_file = display_file
        self.display_stderr = display_stderr
        self.power_cut_at_us = power_cut_at_us
        self.power_cut_after_bytes = power_cut_after_bytes
        self.power_cut_prefix = power_cut_prefix
        self.restart_after_us = restart_after_us
        self.ticks_period = ticks_period
        self.press_us = press_us
        self.power_cuts = 0
        self._shown = None
        self.off_until = None
        osc = Oscillator(start_us, drift_ppm, wander_ppm, aging_ppm_per_day=aging_ppm_per_day,
                         start_tick=random.Random(seed).randrange(ticks_period), period=ticks_period)
        self.world = SimWorld(start_us, osc, outages=outages, period=ticks_period, names_next=names_next,
                              label_delays_us=label_delays_us, label_jitter_us=label_jitter_us, stalls=stalls,
                              cpu_us=cpu_us, seed=seed, first_fix_us=first_fix_us)
        self.world.on_display = self._on_display
        self._boot(self.power_cut_after_bytes)
        from device.firmware import device_id_from
        self.device_id = device_id or device_id_from(self.uid)
        self._plan_presses()
        self.end_contacts_us = max([c[0] for c in self.contacts] + [start_us]) + 5000000
        self.fix_at_us = fix_at_us
        if fix_at_us is not None:
            self.press_fix(fix_at_us)
            self.end_contacts_us = max(self.end_contacts_us, fix_at_us + 15000000)
        self._thread = None
        self._stop = threading.Event()
        self._master = self._slave = None
        self.port = None
        self.error = None
        self.lock = threading.Lock()

    # -- power ----------------------------------------------------------------
    def _boot(self, budget=None):
        store = CuttingStore(self.flash, budget, self.power_cut_prefix)
        self.store = store
        self.hw = SimHardware(self.world, store, self.ticks_period, self.uid, self.ms_counter)
        self.world.attach(self.hw, None)
        self.world.in_poll = True          # booting takes simulated time too
        try:
            self.fw = Firmware(self.hw, device_id=self.device_id, capacity=self.capacity, profile=self.profile,
                               receiver=self.receiver)
        except PowerCut:
            self.fw = None
            self._power_off()
            return
        finally:
            self.world.in_poll = False
        self.world.attach(self.hw, self.fw)

    def _power_off(self):
        self.power_cuts += 1
        self.store.dead = True
        self.off_until = self.world.t_us + self.restart_after_us
        self.world.attach(SimHardware(self.world, MemStore(), self.ticks_period, self.uid), None)
        self.fw = None

    def _plan_presses(self):
        """Button presses for the contacts, with a mode change ahead of a contact of another body/limb."""
        mode = 0
        for utc, body, limb in self.contacts:
            want = MODES.index((BODIES.index(body), LIMBS.index(limb)))
            k = (want - mode) % len(MODES)
            for j in range(k):           # 3.5 s holds, 7 s apart, finishing 10 s before the contact
                self.world.press(utc - 10000000 - (k - j) * 7000000, 3500000)
            mode = want
            self.world.press(utc, self.press_us)

    def press_fix(self, t_us, hold_us=9500000):
        """Hold the button for the ``fix`` gesture (8-11 s) from true UTC ``t_us``."""
        self.world.press(t_us, hold_us)

    # -- running ----------------------------------------------------------------
    def advance_to(self, t_us):
        """Run the simulation up to true UTC ``t_us`` (power cuts and restarts included)."""
        while True:
            if self.fw is None:
                target = min(t_us, self.off_until)
                self.world.advance_to(target)
                if self.world.t_us >= self.off_until:
                    self.off_until = None
                    self._boot(None)
                if self.world.t_us >= t_us:
                    return
                continue
            target = t_us
            if self.power_cut_at_us is not None and self.world.t_us < self.power_cut_at_us <= t_us:
                target = self.power_cut_at_us
            try:
                self.world.advance_to(target)
            except PowerCut:
                self._power_off()
                continue
            if target == self.power_cut_at_us and self.world.t_us >= target and self.fw is not None:
                self.power_cut_at_us = None
                self._power_off()
                continue
            self._save_progress()
            if self.world.t_us >= t_us:
                return

    def _save_progress(self):
        if self.progress_path is None:
            return
        done = None
        for c in self.contacts:
            if c[0] + 3000000 <= self.world.t_us:
                done = c[0]
        if done is not None and done != self._saved:
            self._saved = done
            tmp = self.progress_path + ".tmp"
            try:
                with open(tmp, "w") as f:
                    json.dump({"format": "limbclock-sim-progress/1", "last_pressed_utc_us": done}, f)
                os.replace(tmp, self.progress_path)
            except OSError as e:            # the disk of the state directory is full or gone
                self.progress_error = "progress not saved in %s: %s" % (self.state_dir, e.strerror or e)

    def run_contacts(self):
        """Run through every scheduled contact (as fast as possible) and until their records are written."""
        self.advance_to(self.end_contacts_us)

    def now_us(self):
        return self.world.t_us

    def truth(self):
        """{raw tick of a press: true UTC of the press} for checking stamps."""
        return dict(self.world.truth)

    def _on_display(self, t_us, lines):
        if self.display_file:
            with open(self.display_file, "w") as f:
                f.write("\n".join(lines) + "\n")
        if self.display_stderr:
            # not every tick of the clock line nor of the countdown
            key = (lines[0].split()[0], lines[2], lines[3]) + tuple(x for x in lines[4:] if not x.startswith("in "))
            if key != self._shown:
                self._shown = key
                sys.stderr.write("[timer] %s\n" % " | ".join(lines))
                sys.stderr.flush()

    # -- links ------------------------------------------------------------------
    def loopback(self, faults=None, seed=7, step_us=5000):
        """An in-process transport for ``TimerClient`` (no thread, no pty): reading runs the simulation."""
        return Loopback(self, self.faults_in.rate if faults is None else faults, seed, step_us)

    def start(self):
        """Open the pseudo-terminal, start serving in a thread; returns the port path."""
        import tty
        self._master, self._slave = os.openpty()
        tty.setraw(self._slave)
        tty.setraw(self._master)
        os.set_blocking(self._master, False)
        self.port = os.ttyname(self._slave)
        self._thread = threading.Thread(target=self._serve, name="virtual-timer", daemon=True)
        self._thread.start()
        return self.port

    def stop(self):
        self._stop.set()
        if self._thread is not None:
            self._thread.join(5)
            self._thread = None
        for fd in (self._master, self._slave):
            if fd is not None:
                try:
                    os.close(fd)
                except OSError:
                    pass
        self._master = self._slave = None

    def wait(self):
        while self._thread is not None and self._thread.is_alive():
            self._thread.join(0.2)

    def _serve(self):
        try:
            self._serve_loop()
        except Exception as e:  # reported by the command; a thread must not die silently
            self.error = e
            raise

    def _serve_loop(self):
        last = time.monotonic()
        pending_out = b""
        while not self._stop.is_set():
            r, _, _ = select.select([self._master], [], [], 0.002)
            if r:
                try:
                    data = os.read(self._master, 4096)
                except (BlockingIOError, OSError):
                    data = b""
                if data:
                    self.hw.host_in.extend(self.faults_in.apply(data))
            now = time.monotonic()
            elapsed = now - last
            last = now
            t = self.world.t_us
            if t < self.end_contacts_us:
                step = 20000000 if self.speed <= 0 else int(elapsed * self.speed * 1e6)
                target = min(self.end_contacts_us, t + max(step, 1000))
            else:
                target = t + int(elapsed * max(1.0, self.speed if self.speed > 0 else 1.0) * 1e6)
            with self.lock:
                self.advance_to(max(target, t))
                out = bytes(self.hw.host_out)
                self.hw.host_out = bytearray()
            if out:
                pending_out += self.faults_out.apply(out)
            if pending_out:
                try:
                    n = os.write(self._master, pending_out)
                    pending_out = pending_out[n:]
                except BlockingIOError:
                    pass
                except OSError:
                    pending_out = b""


class Loopback:
    """A pyserial-like transport over a ``VirtualTimer`` in the same thread; time is simulated."""

    def __init__(self, vt, faults, seed, step_us):
        self.vt = vt
        self.fin = Faults(faults, seed)
        self.fout = Faults(faults, seed + 1)
        self.step_us = step_us
        self.buf = bytearray()
        self.disconnect_after = None     # bytes read before the cable is pulled once
        self.disconnects = 0

    def monotonic(self):
        return self.vt.world.t_us / 1e6

    @property
    def in_waiting(self):
        return len(self.buf)

    def write(self, data):
        self.vt.hw.host_in.extend(self.fin.apply(data))
        return len(data)

    def read(self, n=1):
        if not self.buf:
            self.vt.advance_to(self.vt.world.t_us + self.step_us)
            out = bytes(self.vt.hw.host_out)
            self.vt.hw.host_out = bytearray()
            self.buf.extend(self.fout.apply(out))
            if self.disconnect_after is not None:
                self.disconnect_after -= len(self.buf)
                if self.disconnect_after <= 0:
                    self.disconnect_after = None
                    self.disconnects += 1
                    cut = len(self.buf) // 2
                    del self.buf[cut:]           # the rest of this burst is lost with the cable
        k = min(n, len(self.buf))
        data = bytes(self.buf[:k])
        del self.buf[:k]
        return data

    def reset_input_buffer(self):
        self.buf = bytearray()

    def close(self):
        pass
