"""The timer's main loop: ties the hardware boundary to the clock, button, log and link.

``Firmware(hw)`` recovers the log, then ``poll()`` is called in a loop, at
least every 20 ms on a board (the NMEA pairing needs the receive time of a
sentence to within a few tens of ms).  ``run()`` is that loop for a board.

The loop never dies.  Every pass runs inside a guard: any exception (a bug, a
``MemoryError``, a storage error, a bad file pushed) is caught, counted by kind,
shown on the display's message line and in the status (``fault``, ``loop``),
written to the log as a FAULT record where the storage allows (at most one per
kind every ``FAULT_LOG_US``), and the next pass runs.  The hardware watchdog
(``hw.feed_watchdog``) is fed after every pass and every service pass, so only a
loop that hangs is reset.

Presses.  A gesture becomes an entry of the pending list at once (body, limb and
session as they are at the press); a contact is stamped when its time is known
(next PPS edge, or ``clock.WAIT_US`` later from the learned rate) and written; only
then does the timer beep and show it.  An entry leaves the pending list only once
its record is durably written.  When the log is full or the storage refuses a
write, the entries stay in RAM (at most ``HELD_MAX``; more are counted in
``held_overflow`` and said on the display), the timer beeps ``---`` and shows why,
and retries: at once after a sync's ACK made room, else every ``RETRY_US``.

Time without GPS.  A press before the clock has any time is written at once with
time state none, its extended tick (oscillator us since boot) in ``utc_us`` and
the boot count (``boots`` in ``state.json``) in ``ref_seq``; when the clock
locks later in the same power cycle, a STAMP record naming it gives its UTC
(extrapolated back from the first labelled edge with the learned drift; state
holdover with its bound).  After a power cycle the tick and boot count keep the
intervals between such presses.  The clock's snapshot (time, uncertainty, drift)
is saved in ``state.json`` at the first lock, on losing lock and every
``TIME_SAVE_US``; at start-up the drift is restored, and the time too when the
board's RTC (``hw.rtc_us``) ran through the reset.

Long stalls.  The tick count is kept by ``hal.TickExtender`` with the slower
``ticks_ms`` counter: a stall of any length up to days keeps it exact, and
events drained after a stall are placed by ``extend_checked``; an event that
could be a whole period off is stamped with the stalled interval as extra
uncertainty, never LOCKED.  Without a slower counter a stall over half a period
(or a PPS ring that overflowed more than the elapsed time allows) makes the clock
forget its time.

On-board work in slices.  The planner and the ``fix`` gesture run the engine with
a cooperative hook (``engine.coop``): at most every ``SERVICE_US`` of ticks the
hook runs a service pass (drain the button and PPS rings, feed NMEA, settle
gestures, stamp and write contacts, feed the watchdog); it never calls the engine
or serves the host link.  A ``fix`` gesture during a fix is refused with a message.
``stall_max_us`` is the longest interval between two passes (status ``loop``).

Display: four status lines, then two lines from ``device.onboard``: the next predicted contact
and its countdown (recomputed only when needed), or for ``FIX_SHOW_US`` after the ``fix``
gesture ends the on-board fix and its ellipse.
"""
import binascii
import json

from device import FIRMWARE_VERSION
from device import clock as clk
from device.button import Button
from device.hal import TickExtender, ticks_diff
from device.log import (Log, LogError, LogFull, CONTACT, VOID, SESSION, SETTINGS, TIME_SET, FAULT, STAMP,
                        BODY_NAMES, LIMB_NAMES)
from device.nmea import Parser
from device.onboard import Onboard, iter_records
from device.protocol import Protocol
from engine.timescale import format_utc

MODES = ((0, 0), (0, 1), (1, 0), (1, 1))      # (body, limb): sun lower, sun upper, moon lower, moon upper
STATE_FILE = "state.json"
STATE_FORMAT = "limbclock-timer-state/1"
FIX_SHOW_US = 60000000        # the fix stays on the display this long after it is done
HELD_MAX = 64                 # gestures held in RAM while the storage refuses them
UNTIMED_MAX = 64              # contacts of this power cycle waiting for a late stamp
RETRY_US = 10000000           # a refused write is tried again this often (at once after an ACK)
SERVICE_US = 5000             # the coop hook serves the inputs at most this often
LABEL_STALE_US = 250000       # labels read after a longer pass have no usable receive time
TIME_SAVE_US = 600000000      # the clock's snapshot is saved this often (and at lock changes)
RESTORE_MAX_US = 7 * 86400 * 1000000    # an RTC gap longer than this restores the drift only
FAULT_LOG_US = 600000000      # at most one FAULT record per kind this often
ENOSPC = 28                   # the storage's "no space left" error number

# fault kinds (FAULT records: image = kind, ref_seq = the fault count)
F_LOOP = 1
F_MEMORY = 2
F_STORAGE = 3
F_WRAP = 4
F_RING = 5
F_SERVICE = 6
FAULT_NAMES = {F_LOOP: "loop", F_MEMORY: "memory", F_STORAGE: "storage", F_WRAP: "tick-wrap",
               F_RING: "ring-overflow", F_SERVICE: "service"}


def device_id_from(uid):
    """The device id a board's unique id gives: ``LC-`` and the id's last four bytes in upper-case hex
    (``limbclock board install`` writes the same; two units of one owner sharing them is unlikely, and
    each log also has its own random identity)."""
    if not uid:
        return "LC-0000"
    return "LC-" + binascii.hexlify(bytes(uid)[-4:]).decode().upper()


class Firmware:
    __slots__ = ("hw", "ticks", "nmea", "clock", "button", "log", "proto", "device_id", "firmware_version",
                 "session", "body", "limb", "pending", "message", "fault", "lines", "file_capacity",
                 "last_contact", "voided", "hint", "store", "display_due", "dirty", "onboard", "fix_until",
                 "boots", "untimed", "untimed_lost", "held_overflow", "storage_error", "retry_at", "blocked_base",
                 "faults", "fault_counts", "fault_logged", "fix_requested", "busy", "svc_raw", "svc_ext",
                 "stall_max_us", "stall_where", "passes", "service_passes", "rings", "doubt", "labels_stale", "last_fault",
                 "time_saved_at", "time_snapshot", "last_state", "state_damaged", "wrap_faults")

    def __init__(self, hw, device_id=None, capacity=65536, profile=clk.DEFAULT_PROFILE, file_capacity=262144,
                 data_dir=None, receiver=clk.PRECEDING):
        self.hw = hw
        self.store = hw.store
        self.firmware_version = FIRMWARE_VERSION
        self.file_capacity = file_capacity
        self.faults = 0
        self.fault_counts = {}
        self.fault_logged = {}
        self.fault = None
        self.last_fault = None
        self.ticks = TickExtender(hw.ticks_us(), hw.ticks_period, hw.ticks_ms(), hw.ms_period)
        self.svc_raw = self.ticks.raw
        self.svc_ext = 0
        self.stall_max_us = 0
        self.stall_where = None
        self.passes = 0
        self.service_passes = 0
        self.rings = hw.ring_overflows()
        self.doubt = None                 # (from_ext, to_ext, extra_us): events there may be misplaced
        self.labels_stale = 0
        self.wrap_faults = 0
        self.nmea = Parser()
        self.clock = clk.Clock(profile, receiver)
        self.button = Button()
        self.pending = []                 # [gesture, tick, extra_us, stamp, body, limb, session]
        self.untimed = []                 # [seq, tick, body, limb, session] written before any time
        self.untimed_lost = 0
        self.held_overflow = 0
        self.storage_error = None
        self.retry_at = None
        self.blocked_base = None
        self.message = "ready"
        self.lines = None
        self.hint = None
        self.display_due = 0
        self.dirty = True
        self.fix_requested = False
        self.busy = False
        self.session, self.body, self.limb = 1, 0, 0
        self.boots = 0
        self.time_snapshot = None
        self.time_saved_at = None
        self.last_state = clk.NONE
        self.state_damaged = False
        self._load_state()
        self.boots += 1
        self.device_id = device_id if device_id else device_id_from(self._uid())
        self._save_state()
        self._restore_time()
        self.last_contact = None
        self.voided = []
        self.log = Log(self.store, capacity=capacity)
        lg = self.log
        if lg.recovered_bytes:
            self.message = "recovered: %d torn bytes dropped" % lg.recovered_bytes
        if lg.damaged:
            self.message = "LOG: %d damaged record(s) skipped" % lg.damaged
        if lg.rebuilt:
            self.message = "LOG head rebuilt (%s)" % lg.rebuilt
        self._scan_voids()
        self.proto = Protocol(self)
        self.onboard = Onboard(self.store, data_dir)
        self.fix_until = -1

    def _uid(self):
        try:
            return self.hw.unique_id()
        except Exception:                 # a port without it
            return b""

    # -- persistent settings ------------------------------------------------
    def _load_state(self):
        try:
            self.store.recover(STATE_FILE)
        except OSError:
            pass
        raw = self.store.read(STATE_FILE)
        if not raw:
            return
        try:
            d = json.loads(raw)
            self.session, self.body, self.limb = int(d["session"]), int(d["body"]) & 1, int(d["limb"]) & 1
            self.boots = int(d.get("boots", 0))
            t = d.get("time")
            self.time_snapshot = t if isinstance(t, dict) else None
        except (ValueError, KeyError, TypeError, AttributeError):
            self.message = "settings damaged: defaults"
            self.state_damaged = True

    def _save_state(self):
        """Replace ``state.json`` (atomic); a storage error is signalled, never raised."""
        d = {"format": STATE_FORMAT, "session": self.session, "body": self.body, "limb": self.limb,
             "boots": self.boots}
        if self.time_snapshot is not None:
            d["time"] = self.time_snapshot
        try:
            self.store.replace(STATE_FILE, json.dumps(d).encode())
            return True
        except OSError as e:
            self._storage_problem("settings not saved (%s)" % (e,))
            return False

    def _restore_time(self):
        snap = self.time_snapshot
        if not isinstance(snap, dict):
            return
        elapsed = None
        unc = 0
        rtc = self.hw.rtc_us()
        saved = snap.get("rtc_us")
        if rtc is not None and isinstance(saved, int) and 0 <= rtc - saved <= RESTORE_MAX_US:
            elapsed = rtc - saved
            unc = int(self.hw.rtc_tolerance_ppm * elapsed / 1e6) + self.hw.rtc_resolution_us
        if self.clock.restore(snap, self.ticks.ext, elapsed, unc):
            self.message = "time restored: HOLDOVER"

    def _save_time(self, now):
        snap = self.clock.snapshot(now)
        rtc = self.hw.rtc_us()
        if snap["utc_us"] is None and snap["drift_ppm"] is None:
            return
        snap["rtc_us"] = rtc
        self.time_snapshot = snap
        self.time_saved_at = now
        self._save_state()

    def _scan_voids(self):
        for r in self.log.iter_records():
            if r.kind == CONTACT:
                self.last_contact = r.seq
            elif r.kind == VOID:
                self.voided.append(r.ref_seq)
                if len(self.voided) > 16:
                    self.voided.pop(0)

    # -- the loop -------------------------------------------------------------
    def now(self):
        return self.ticks.ext

    def poll(self):
        """One pass of the main loop; never raises."""
        self.passes += 1
        try:
            self._pass()
        except MemoryError as e:
            self._fault(F_MEMORY, "loop", e)
        except Exception as e:          # the loop goes on whatever failed in this pass
            self._fault(F_LOOP, "loop", e)
        self._feed()

    def run(self):
        while True:
            self.poll()
            self.hw.idle()

    def _feed(self):
        try:
            self.hw.feed_watchdog()
        except Exception:
            pass

    def _pass(self):
        hw = self.hw
        now = self._inputs("loop")
        hint = self.button.hint(now)
        if hint != self.hint:
            if hint is not None and hint != "contact":
                hw.buzz(".")              # a chirp at each step of a held press
            self.hint = hint
            self.dirty = True
        self._resolve(now)
        self._late_stamps(now)
        self._clock_changes(now)
        if self.fix_requested:
            self.fix_requested = False
            self._reduce()
            now = self.ticks.ext
        self._plan(now)
        data = hw.host_read()
        out = self.proto.feed(data) if data else self.proto.idle(now)
        if out:
            hw.host_write(out)
        if self.dirty or now >= self.display_due:
            self._display(now)

    def _inputs(self, where):
        """Read the counters and drain every input: PPS edges, GPS bytes, button edges, gestures."""
        hw = self.hw
        tk = self.ticks
        raw = hw.ticks_us()
        now = tk.update(raw, hw.ticks_ms())
        span = now - tk.prev
        gap = now - self.svc_ext
        if gap > self.stall_max_us:
            self.stall_max_us = gap
            self.stall_where = where
        self.svc_ext = now
        self.svc_raw = raw
        pps = hw.pps_events()
        rings = hw.ring_overflows()
        if rings != self.rings:
            lost_b = rings[0] - self.rings[0]
            lost_p = rings[1] - self.rings[1]
            self.rings = rings
            if tk.ms is None and lost_p and span < (lost_p + len(pps)) * 1000000 - 2000000:
                tk.unverified = True      # more edges than the interval holds: wraps were lost
            if lost_b:
                self._fault(F_RING, "button ring", None, "BUTTON: %d edge(s) lost" % lost_b)
        if tk.unverified:
            self.clock.forget()
            self.wrap_faults += 1
            self.doubt = (tk.prev, now, clk.UNC_MAX_US)
            self._fault(F_WRAP, "ticks", None, "TICK WRAP? time dropped")
        elif self.doubt is not None and now - self.doubt[1] > 60000000:
            self.doubt = None
        for r in pps:
            t, ok = tk.extend_checked(r)
            if ok:
                self.clock.on_pps(t)
        data = hw.gps_read()
        if data:
            labels = self.nmea.feed(data)
            if span > LABEL_STALE_US:
                self.labels_stale += len(labels)      # received some time in a long pass: unusable
            else:
                for lab in labels:
                    self.clock.on_label(lab, now)
        for r, level in hw.button_events():
            t, ok = tk.extend_checked(r)
            if not ok and self.doubt is None:
                self.doubt = (tk.prev, now, span)
            self.button.edge(t, level)
        for gesture, tick in self.button.poll(now):
            self._gesture(gesture, tick)
        return now

    def _service(self):
        """The coop hook: at most every ``SERVICE_US``, serve the inputs while the engine works."""
        raw = self.hw.ticks_us()
        if ticks_diff(raw, self.svc_raw, self.hw.ticks_period) < SERVICE_US:
            return
        self.service_passes += 1
        try:
            now = self._inputs("fix" if self.busy else "plan")
            self._resolve(now)
            if self.dirty and self.busy:
                self._display(now)
        except MemoryError as e:
            self._fault(F_MEMORY, "service", e)
        except Exception as e:            # never into the engine
            self._fault(F_SERVICE, "service", e)
        self._feed()

    # -- gestures and records ----------------------------------------------------
    def _gesture(self, gesture, tick):
        if gesture == "fix":
            if self.busy or self.fix_requested:
                self._ack("-", "fix running: wait")
            else:
                self.fix_requested = True
            return
        if gesture == "cancel":
            self._ack("-", "cancelled")
            return
        if len(self.pending) >= HELD_MAX:
            self.held_overflow += 1
            self.hw.buzz("---")
            self.message = "LOST %d press(es): %s" % (self.held_overflow, self.storage_error or "too many")
            self.dirty = True
            return
        if gesture == "mode":
            i = (MODES.index((self.body, self.limb)) + 1) % len(MODES)
            self.body, self.limb = MODES[i]
            self._save_state()
            self.dirty = True
        elif gesture == "session":
            self.session = (self.session + 1) & 0xFFFF
            self._save_state()
            self.dirty = True
        extra = 0
        d = self.doubt
        if d is not None and d[0] <= tick <= d[1]:
            extra = d[2]
        self.pending.append([gesture, tick, extra, None, self.body, self.limb, self.session])
        if self.storage_error is not None:
            self.hw.buzz("---")           # this press is held too: said at once
            self._held_message()

    def _held_message(self):
        what = {"log full": "LOG FULL: SYNC!", "flash full": "FLASH FULL: SYNC!"}.get(self.storage_error,
                                                                                 "STORAGE ERROR:")
        self.message = "%s %d held" % (what, len(self.pending))
        self.dirty = True

    def _resolve(self, now):
        """Stamp the pending entries (always: a stamp is best while the edges around the press are
        known), then write them in order; an entry leaves the list only once written."""
        for e in self.pending:
            if e[3] is None:
                st = self._stamp(e[1], e[2], now)
                if st is None:
                    break                  # waits for the next PPS edge; later ones wait behind it
                e[3] = st
        if self.storage_error is not None and self.pending:
            if self.log.base_seq == self.blocked_base and self.retry_at is not None and now < self.retry_at:
                return                     # held: tried again after an ACK or RETRY_US
        while self.pending and self.pending[0][3] is not None:
            try:
                self._write(self.pending[0])
            except LogError as err:
                self._blocked(err, now)
                return
            self.pending.pop(0)
            if self.storage_error is not None:
                self.storage_error = None
                self.fault = None

    def _stamp(self, tick, extra, now):
        """(utc_us or tick, state, unc) of an event at ``tick``; None to wait for the next edge."""
        st = self.clock.stamp(tick, now, extra > 0)
        if st is None:
            return None
        utc, state, unc = st
        if extra >= clk.UNC_MAX_US:
            return (tick, clk.NONE, clk.UNC_MAX_US)
        if extra:
            if state == clk.NONE:
                return (tick, clk.NONE, clk.UNC_MAX_US)
            state = clk.HOLDOVER if state == clk.LOCKED else state
            unc = min(clk.UNC_MAX_US, unc + extra)
        if state == clk.NONE:
            return (tick, clk.NONE, clk.UNC_MAX_US)
        return (utc, state, unc)

    def _write(self, e):
        """Write the record of one entry; raises LogError (full, storage) with nothing changed."""
        gesture, tick, extra, stamp, body, limb, session = e
        utc, state, unc = stamp
        log = self.log
        boot = self.boots if state == clk.NONE else 0
        if gesture == "contact":
            r = log.append(CONTACT, utc, state, unc, body, limb, session, -1, boot)
            self.last_contact = r.seq
            if state == clk.NONE and extra < clk.UNC_MAX_US:
                if len(self.untimed) < UNTIMED_MAX:
                    self.untimed.append([r.seq, tick, body, limb, session])
                else:
                    self.untimed_lost += 1
            self._ack(".", "#%d %s%s" % (r.seq, _hms(utc, state), _unc_text(state, unc)))
        elif gesture == "void":
            target = self.last_contact
            if target is None or target in self.voided:
                self._ack("-", "nothing to void")
                return
            r = log.append(VOID, utc, state, unc, body, limb, session, -1, target)
            self.voided.append(target)
            if len(self.voided) > 16:
                self.voided.pop(0)
            self._ack("..", "#%d voids #%d" % (r.seq, target))
        elif gesture == "mode":
            log.append(SETTINGS, utc, state, unc, body, limb, session, -1, boot)
            self._ack("..", "now %s %s limb" % (BODY_NAMES[body], LIMB_NAMES[limb]))
        elif gesture == "session":
            log.append(SESSION, utc, state, unc, body, limb, session, -1, boot)
            self._ack("...", "session %d started" % session)

    def _blocked(self, err, now):
        """The log refused a write: hold the entries, say so once, retry later."""
        first = self.storage_error is None
        if isinstance(err, LogFull):
            self.storage_error = "log full"
        elif getattr(err, "errno", None) == ENOSPC:
            self.storage_error = "flash full"
        else:
            self.storage_error = "storage error"
        self._held_message()
        self.fault = str(err)
        self.last_fault = self.fault
        self.blocked_base = self.log.base_seq
        self.retry_at = now + RETRY_US
        if first:
            self.hw.buzz("---")
            self._count(F_STORAGE)
        self.dirty = True

    def _storage_problem(self, text):
        self._count(F_STORAGE)
        self.fault = text
        self.last_fault = text
        self.message = "STORAGE: " + text[:30]
        self.dirty = True

    def _late_stamps(self, now):
        """Contacts written before the clock had time get a STAMP record once it locks."""
        if not self.untimed or self.storage_error is not None or self.clock.state(now) != clk.LOCKED:
            return
        while self.untimed:
            seq, tick, body, limb, session = self.untimed[0]
            utc, state, unc = self.clock.stamp(tick, now, True)
            if state == clk.NONE:
                return
            try:
                self.log.append(STAMP, utc, state, unc, body, limb, session, -1, seq)
            except LogError as err:
                self._blocked(err, now)
                return
            self.untimed.pop(0)
            self.message = "#%d stamped %s%s" % (seq, _hms(utc, state), _unc_text(state, unc))
            self.dirty = True

    def _clock_changes(self, now):
        """Save the clock's snapshot at the first lock, on losing lock and every TIME_SAVE_US."""
        st = self.clock.state(now)
        last = self.last_state
        self.last_state = st
        due = self.time_saved_at is None or now - self.time_saved_at >= TIME_SAVE_US
        if st == clk.NONE:
            return
        if (st == clk.LOCKED and (last != clk.LOCKED and self.time_saved_at is None)) or \
                (last == clk.LOCKED and st != clk.LOCKED) or (due and self.time_saved_at is not None):
            self._save_time(now)

    # -- faults ---------------------------------------------------------------------
    def _count(self, kind):
        self.faults += 1
        self.fault_counts[FAULT_NAMES[kind]] = self.fault_counts.get(FAULT_NAMES[kind], 0) + 1

    def _fault(self, kind, where, exc, text=None):
        """Count, show and (rate-limited) log a fault; never raises."""
        try:
            self._count(kind)
            if text is None:
                text = "%s: %s %s" % (where, type(exc).__name__, exc)
            self.fault = text[:80]
            self.last_fault = self.fault
            self.message = ("FAULT " + text)[:40] if exc is not None else text[:40]
            self.dirty = True
            now = self.ticks.ext
            last = self.fault_logged.get(kind)
            if self.storage_error is None and (last is None or now - last >= FAULT_LOG_US):
                self.fault_logged[kind] = now
                utc, state, unc = self.clock.now(now)
                if state == clk.NONE:
                    utc = now
                self.log.append(FAULT, utc, state, unc, self.body, self.limb, self.session, kind, self.faults)
        except Exception:
            pass

    # -- on-board work ----------------------------------------------------------------
    def _plan(self, now):
        """Keep the next predicted contact (``Onboard.update`` recomputes only when needed)."""
        utc, state, _ = self.clock.now(now)
        if state == clk.NONE:
            return
        from engine import coop
        prev = coop.set_hook(self._service)
        try:
            changed = self.onboard.update(utc, self.body * 2 + self.limb, LIMB_NAMES[self.limb])
        finally:
            coop.set_hook(prev)
        if changed:
            self.dirty = True

    def _reduce(self):
        """The ``fix`` gesture: reduce the current session on board in slices, then show the result."""
        self.hw.show((self.lines or ["", "", "", ""])[:4] + ["FIX: reducing", "session %d ..." % self.session])
        from engine import coop
        log = self.log
        self.busy = True
        prev = coop.set_hook(self._service)
        try:
            fix = self.onboard.reduce(lambda: iter_records(log), self.session)
        finally:
            coop.set_hook(prev)
            self.busy = False
        self.fix_until = self.ticks.ext + FIX_SHOW_US
        if fix is None:
            self._ack("-", "fix failed")
        else:
            msg = "FIX %d used %d rej" % (fix["contacts_used"], fix["rejected"])
            if fix.get("doubts"):
                # a doubtful fix is said so on the display and by its beeps (engine/doubts.py)
                msg += " DOUBT %s" % fix["doubts"][0]
                self._ack("..-", msg)
            else:
                self._ack("...", msg)

    def _ack(self, pattern, message):
        self.hw.buzz(pattern)
        self.message = message
        if self.storage_error is None:
            self.fault = None
        self.dirty = True

    def set_time(self, utc_us, unc_us):
        now = self.now()
        self.clock.set_time(utc_us, unc_us, now)
        try:
            self.log.append(TIME_SET, utc_us, clk.MANUAL, unc_us, self.body, self.limb, self.session)
        except LogError:
            pass

    def files_changed(self, slot):
        self.onboard.files_changed()
        self.message = "file %s received" % slot
        self.dirty = True

    # -- outputs --------------------------------------------------------------
    def status(self):
        now = self.now()
        log = self.log
        return {"device_id": self.device_id, "firmware": self.firmware_version,
                "protocol": _protocol_version(), "clock": self.clock.status(now),
                "gps": self.nmea.counters(),
                "log": {"first_seq": log.first_seq, "last_seq": log.last_seq,
                        "confirmed_seq": log.confirmed_seq, "free_records": log.free_records,
                        "free_bytes": log.free_bytes, "capacity_bytes": log.capacity,
                        "recovered_bytes": log.recovered_bytes, "damaged": log.damaged,
                        "damaged_seqs": list(log.damaged_seqs), "rebuilt": log.rebuilt,
                        "log_id": log.log_id, "origin_seq": log.origin_seq, "segments": len(log.segs)},
                "session": self.session, "body": BODY_NAMES[self.body], "limb": LIMB_NAMES[self.limb],
                "pending": len(self.pending), "fault": self.fault, "display": self.lines or [],
                "boot": self.boots,
                "storage": {"error": self.storage_error, "held": len(self.pending),
                            "held_overflow": self.held_overflow},
                "untimed": {"waiting": len(self.untimed), "not_kept": self.untimed_lost},
                "loop": {"passes": self.passes, "service_passes": self.service_passes, "faults": self.faults,
                         "fault_counts": self.fault_counts, "last_fault": self.last_fault,
                         "stall_max_us": self.stall_max_us,
                         "stall_where": self.stall_where, "ring_overflow": {"button": self.rings[0],
                                                                           "pps": self.rings[1]},
                         "lost_wraps": self.ticks.lost_wraps, "wrap_faults": self.wrap_faults,
                         "labels_stale": self.labels_stale},
                "next_contact": self.onboard.next, "plan_problem": self.onboard.problem,
                "onboard_fix": self.onboard.fix, "onboard_fix_error": self.onboard.fix_error}

    def _display(self, now):
        """Refresh the display lines: at most every 100 ms, or at once after an event."""
        self.dirty = False
        self.display_due = now + 100000
        utc, state, unc = self.clock.now(now)
        if state == clk.NONE:
            l1 = "NO TIME - wait GPS"
            l2 = "--:--:--"
        else:
            l1 = "%s %s" % (clk.STATE_NAMES[state].upper(), _unc_text(state, unc).strip())
            l2 = format_utc(utc, 0)[11:19] + " UTC"
        l3 = "S%d %s %s #%s" % (self.session, BODY_NAMES[self.body].upper(),
                                "LL" if self.limb == 0 else "UL",
                                self.log.last_seq if self.log.last_seq is not None else "-")
        if self.hint is not None and self.hint != "contact":
            l4 = "release: %s" % self.hint
        else:
            l4 = self.message
        if self.busy:
            lines = [l1, l2, l3, l4, "FIX: reducing", "session %d ..." % self.session]
        elif now < self.fix_until:
            lines = [l1, l2, l3, l4] + self.onboard.fix_lines()
        else:
            lines = [l1, l2, l3, l4] + self.onboard.plan_lines(utc if state != clk.NONE else None)
        if lines != self.lines:
            self.lines = lines
            self.hw.show(lines)


def _protocol_version():
    from device import PROTOCOL_VERSION
    return PROTOCOL_VERSION


def _hms(utc_us, state):
    if state == clk.NONE:
        return "no time (tick kept)"
    return format_utc(utc_us, 3)[11:23]


def _unc_text(state, unc):
    if state == clk.NONE or unc >= clk.UNC_MAX_US:
        return ""
    if unc < 1000:
        return " +-%dus" % unc
    if unc < 1000000:
        return " +-%.1fms" % (unc / 1000.0)
    return " +-%.1fs" % (unc / 1000000.0)
