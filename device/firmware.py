"""The timer's main loop: ties the hardware boundary to the clock, button, log and link.

``Firmware(hw)`` recovers the log, then ``poll()`` is called in a loop, at
least every 20 ms on a board (the NMEA pairing window needs the receive time
of a sentence to within a few tens of ms, and ``TickExtender`` needs a call
every half tick period).  ``run()`` is that loop for a board.

A press becomes a record once its time is known (next PPS edge, or
``clock.WAIT_US`` later from the learned rate) and written; only then does the
timer beep and show it.  Settings that must survive a reset and an emptied
log (session number, body, limb) live in ``state.json``, replaced atomically.

Display: four status lines, then two lines from ``device.onboard``: the next predicted contact
and its countdown (recomputed only when needed), or for ``FIX_SHOW_US`` after the ``fix``
gesture the on-board fix and its ellipse.  The reduction runs inside one pass of the loop (a few
seconds on a board: presses are still stamped by the edge interrupt; a GPS label or two may be
dropped as ambiguous).
"""
import json

from device import FIRMWARE_VERSION
from device import clock as clk
from device.button import Button
from device.hal import TickExtender
from device.log import Log, LogError, LogFull, CONTACT, VOID, SESSION, SETTINGS, TIME_SET, BODY_NAMES, LIMB_NAMES
from device.nmea import Parser
from device.onboard import Onboard, iter_records
from device.protocol import Protocol
from engine.timescale import format_utc

MODES = ((0, 0), (0, 1), (1, 0), (1, 1))      # (body, limb): sun lower, sun upper, moon lower, moon upper
STATE_FILE = "state.json"
FIX_SHOW_US = 60000000        # the fix stays on the display this long (then the next contact again)


class Firmware:
    __slots__ = ("hw", "ticks", "nmea", "clock", "button", "log", "proto", "device_id", "firmware_version",
                 "session", "body", "limb", "pending", "message", "fault", "lines", "file_capacity",
                 "last_contact", "voided", "hint", "store", "display_due", "dirty", "onboard", "fix_until")

    def __init__(self, hw, device_id="LC-0001", capacity=65536, profile=clk.TCXO, file_capacity=262144,
                 data_dir=None):
        self.hw = hw
        self.store = hw.store
        self.device_id = device_id
        self.firmware_version = FIRMWARE_VERSION
        self.file_capacity = file_capacity
        self.ticks = TickExtender(hw.ticks_us(), hw.ticks_period)
        self.nmea = Parser()
        self.clock = clk.Clock(profile)
        self.button = Button()
        self.pending = []                 # [gesture, press_tick]
        self.message = "ready"
        self.fault = None
        self.lines = None
        self.hint = None
        self.display_due = 0
        self.dirty = True
        self.session, self.body, self.limb = 1, 0, 0
        self._load_state()
        self.last_contact = None
        self.voided = []
        try:
            self.log = Log(self.store, capacity=capacity)
        except LogError as e:
            self.fault = str(e)
            raise
        if self.log.recovered_bytes:
            self.message = "recovered: %d torn bytes dropped" % self.log.recovered_bytes
        self._scan_voids()
        self.proto = Protocol(self)
        self.onboard = Onboard(self.store, data_dir)
        self.fix_until = -1

    # -- persistent settings ------------------------------------------------
    def _load_state(self):
        self.store.recover(STATE_FILE)
        raw = self.store.read(STATE_FILE)
        if raw:
            try:
                d = json.loads(raw)
                self.session, self.body, self.limb = int(d["session"]), int(d["body"]) & 1, int(d["limb"]) & 1
            except (ValueError, KeyError, TypeError):
                self.message = "settings damaged: defaults"

    def _save_state(self):
        self.store.replace(STATE_FILE, json.dumps({"session": self.session, "body": self.body,
                                                   "limb": self.limb}).encode())

    def _scan_voids(self):
        for r in self.log.records():
            if r.kind == CONTACT:
                self.last_contact = r.seq
            elif r.kind == VOID:
                self.voided.append(r.ref_seq)
        self.voided = self.voided[-16:]

    # -- the loop -------------------------------------------------------------
    def now(self):
        return self.ticks.ext

    def poll(self):
        hw = self.hw
        now = self.ticks.update(hw.ticks_us())
        for raw in hw.pps_events():
            self.clock.on_pps(self.ticks.extend(raw))
        data = hw.gps_read()
        if data:
            for lab in self.nmea.feed(data):
                self.clock.on_label(lab, now)
        for raw, level in hw.button_events():
            self.button.edge(self.ticks.extend(raw), level)
        for gesture, tick in self.button.poll(now):
            self.pending.append([gesture, tick])
        hint = self.button.hint(now)
        if hint != self.hint:
            if hint is not None and hint != "contact":
                hw.buzz(".")              # a chirp at each step of a held press
            self.hint = hint
            self.dirty = True
        self._resolve(now)
        self._plan(now)
        data = hw.host_read()
        out = self.proto.feed(data) if data else self.proto.idle(now)
        if out:
            hw.host_write(out)
        if self.dirty or now >= self.display_due:
            self._display(now)

    def run(self):
        while True:
            self.poll()
            self.hw.idle()

    def _resolve(self, now):
        while self.pending:
            gesture, tick = self.pending[0]
            st = self.clock.stamp(tick, now)
            if st is None:
                return
            self.pending.pop(0)
            self._commit(gesture, st)

    def _commit(self, gesture, stamp):
        utc_us, state, unc = stamp
        log = self.log
        try:
            if gesture == "contact":
                r = log.append(CONTACT, utc_us, state, unc, self.body, self.limb, self.session)
                self.last_contact = r.seq
                self._ack(".", "#%d %s%s" % (r.seq, _hms(utc_us, state), _unc_text(state, unc)))
            elif gesture == "void":
                target = self.last_contact
                if target is None or target in self.voided:
                    self._ack("-", "nothing to void")
                    return
                r = log.append(VOID, utc_us, state, unc, self.body, self.limb, self.session, -1, target)
                self.voided = (self.voided + [target])[-16:]
                self._ack("..", "#%d voids #%d" % (r.seq, target))
            elif gesture == "mode":
                i = (MODES.index((self.body, self.limb)) + 1) % len(MODES)
                self.body, self.limb = MODES[i]
                self._save_state()
                log.append(SETTINGS, utc_us, state, unc, self.body, self.limb, self.session)
                self._ack("..", "now %s %s limb" % (BODY_NAMES[self.body], LIMB_NAMES[self.limb]))
            elif gesture == "fix":
                self._reduce()
            elif gesture == "session":
                self.session = (self.session + 1) & 0xFFFF
                self._save_state()
                log.append(SESSION, utc_us, state, unc, self.body, self.limb, self.session)
                self._ack("...", "session %d started" % self.session)
            else:
                self._ack("-", "cancelled")
        except LogFull as e:
            self.hw.buzz("---")
            self.message = "LOG FULL: SYNC! not saved"
            self.fault = str(e)
            self.dirty = True

    def _plan(self, now):
        """Keep the next predicted contact (``Onboard.update`` recomputes only when needed)."""
        utc, state, _ = self.clock.now(now)
        if state == clk.NONE:
            return
        changed = self.onboard.update(utc, self.body * 2 + self.limb, LIMB_NAMES[self.limb])
        if changed:
            self.dirty = True

    def _reduce(self):
        """The ``fix`` gesture: reduce the current session on board and show the result for a minute."""
        self.hw.show((self.lines or ["", "", "", ""])[:4] + ["FIX: reducing", "session %d ..." % self.session])
        log = self.log
        fix = self.onboard.reduce(lambda: iter_records(log), self.session)
        self.fix_until = self.now() + FIX_SHOW_US
        if fix is None:
            self._ack("-", "fix failed")
        else:
            self._ack("...", "FIX %d used %d rej" % (fix["contacts_used"], fix["rejected"]))

    def _ack(self, pattern, message):
        self.hw.buzz(pattern)
        self.message = message
        self.fault = None
        self.dirty = True

    def set_time(self, utc_us, unc_us):
        now = self.now()
        self.clock.set_time(utc_us, unc_us, now)
        try:
            self.log.append(TIME_SET, utc_us, clk.MANUAL, unc_us, self.body, self.limb, self.session)
        except LogFull:
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
                        "recovered_bytes": log.recovered_bytes},
                "session": self.session, "body": BODY_NAMES[self.body], "limb": LIMB_NAMES[self.limb],
                "pending": len(self.pending), "fault": self.fault, "display": self.lines or [],
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
        if now < self.fix_until:
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
        return "no time"
    return format_utc(utc_us, 3)[11:23]


def _unc_text(state, unc):
    if state == clk.NONE or unc >= clk.UNC_MAX_US:
        return ""
    if unc < 1000:
        return " +-%dus" % unc
    if unc < 1000000:
        return " +-%.1fms" % (unc / 1000.0)
    return " +-%.1fs" % (unc / 1000000.0)
