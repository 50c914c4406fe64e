"""The timer's UTC clock: PPS discipline, drift learning, holdover, manual set.

All times are ints: *ticks* are extended oscillator microseconds
(``hal.TickExtender``), instants are UTC microseconds since 1970.  Floats only
hold small, well-scaled quantities (ppm, residuals of a few microseconds).

Pairing.  A PPS edge marks the start of a UTC second; the NMEA sentences that
name a second arrive some time before or after its edge.  Which edge a sentence
names, and how long after the edge (or before it) it may end, are properties of
the receiver: a ``ReceiverProfile``.  Common practice (receiver manuals; no
NMEA 0183 rule fixes it): the sentences follow the edge they name and end within
the second (``PRECEDING``, the default: a whole-second label received
``label_min_us`` .. ``label_max_us`` = 20-950 ms after the latest edge names that
edge); some receivers send the label of the coming second before its edge
(``NEXT``: the label names the first edge 20-950 ms after it).  A label outside the
window is ambiguous (it could belong to either neighbouring edge) and is dropped
and counted.  The firmware also checks the pairing against the data: the delay
between an edge and every label (the last ``DELAY_POINTS`` = 8, accepted or not)
must stay within ``spread_us`` (200 ms) of each other; a receiver whose sentences
straddle a second boundary (some just before an edge, some just after it: those
would pair with the wrong edge) or whose timing jumps gives unsteady delays, and
the clock refuses to lock (``counts.unsteady``; the fit restarts and no label is
paired until the delays settle).  Which edge a steady receiver names cannot be
seen in its timing: that stays a setting.
Successive labelled edges must agree: the labels' difference in seconds times 1e6
must match the tick difference within ``PAIR_TOL_US`` per second; otherwise the
fit restarts (a jump, a leap second or a receiver reset).

Drift.  While locked the clock fits ticks = a + (1e6 + b) x (x in labelled
seconds) by least squares over the last ``FIT_POINTS`` labelled edges; b is
the oscillator's drift in ppm (us of ticks per second), with its standard
error from the residuals (floored at the 1 us tick quantisation, 1/sqrt(12) us).

Stamping a press at tick p (PPS interpolation):
* between two edges e0 (label L0) and e1: ``L0 + (p - e0) * 1e6 // (e1 - e0)``,
  which cancels the oscillator's drift; state LOCKED, uncertainty
  ``sigma_lock_us`` (interrupt latency jitter of the two captures);
* after the last edge, once ``WAIT_US`` has passed without a next edge: the
  learned rate from the last labelled edge (the anchor):
  ``L + dt * 1e12 // (1e12 + drift_ppt)``; state HOLDOVER when more than
  ``LOCK_HOLD_US`` has passed since the anchor;
* before the first labelled edge of the fit (a press made before the clock had
  time, stamped afterwards): the same rate back from that first edge, state
  HOLDOVER with the bound below for the interval.

Holdover uncertainty (a bound, not a standard deviation), dt in seconds since
the anchor::

    u(dt) = sigma_lock_us + (3 sigma_drift_ppm + wander_ppm) dt + 1/2 aging_ppm_per_s dt^2

``wander_ppm`` bounds how far the oscillator's frequency may move away from the
learned value during the outage (temperature); ``aging`` is the slow
monotonic drift of a quartz resonator.  The profiles below state both for a
plain crystal (``XO``, the default: a board counts ``ticks_us`` from its CPU
crystal) and a TCXO (values from common practice for typical parts; check the
datasheet of the board's part).

Across a reset.  ``snapshot(tick_now)`` gives what the firmware persists (the
current UTC, its uncertainty, the drift and its sigma); ``restore`` starts a new
power cycle from it: the learned drift always, and the time when a clock that
ran through the reset (an RTC) says how long it was: state HOLDOVER from the
restored instant, the uncertainty grown by the RTC's tolerance and resolution.
A lost wrap of the tick counter that could not be repaired (``forget``) drops
the time and keeps the drift.

Jumps.  When a label disagrees with the tick count (a leap second: the
receiver's ``23:59:60`` label is skipped because POSIX time cannot name it,
and the next label is one second "short"; or a receiver that corrects its
time), the fit restarts and the clock stays in holdover from the last trusted
edge until ``MIN_PAIRS`` new pairs confirm the labels; meanwhile every stamp
carries the size of the disagreement in its uncertainty (about 1 s at a leap
second).

Manual set (e.g. from a radio time signal): ``set_time(utc_us, unc_us)`` is
refused while GPS-locked; afterwards u(dt) = unc_us + (3 sigma_drift_ppm +
tolerance) dt, with the learned drift if there is one (else the profile's
``tolerance_ppm``).
"""
import math

NONE = 0
LOCKED = 1
HOLDOVER = 2
MANUAL = 3
STATE_NAMES = ("none", "locked", "holdover", "manual")

US = 1000000
LABEL_MIN_US = 20000          # receiver profile defaults (see ReceiverProfile)
LABEL_MAX_US = 950000
DELAY_SPREAD_US = 200000      # edge-to-label delays of successive pairs agree this well
DELAY_POINTS = 8
PAIR_TOL_US = 500            # per second of interval: covers oscillators within +/-500 ppm
MIN_PPS_INTERVAL_US = 500000  # an edge closer than this to the previous one is a glitch
MAX_GAP_S = 10               # a longer gap between labelled edges restarts the fit window
FIT_POINTS = 64
MIN_PAIRS = 4                # labelled edges before the clock calls itself locked
LOCK_HOLD_US = 2500000       # locked while the last labelled edge is at most this old
WAIT_US = 1300000            # a press waits this long for the next edge before extrapolating
UNC_MAX_US = 0xFFFFFFFF      # uint32 in the log: "unknown"


class ClockError(ValueError):
    """A time input the clock refuses (manual set while locked, bad uncertainty)."""


class ReceiverProfile:
    """How a GPS receiver's time sentences relate to its PPS edges (see the module docstring).

    ``names``: "preceding" (a label names the edge before it) or "next" (the edge after it);
    ``label_min_us``/``label_max_us``: the window of the delay between the edge and the end of the
    label (label after edge for "preceding", edge after label for "next"); ``spread_us``: how much
    that delay may vary between pairs before the clock refuses the pairing."""
    __slots__ = ("name", "names", "label_min_us", "label_max_us", "spread_us")

    def __init__(self, name, names="preceding", label_min_us=LABEL_MIN_US, label_max_us=LABEL_MAX_US,
                 spread_us=DELAY_SPREAD_US):
        if names not in ("preceding", "next"):
            raise ClockError("receiver profile: names must be 'preceding' or 'next', got %r" % (names,))
        if not 0 < label_min_us < label_max_us < US:
            raise ClockError("receiver profile: label window must be inside (0, 1 s)")
        self.name = name
        self.names = names
        self.label_min_us = label_min_us
        self.label_max_us = label_max_us
        self.spread_us = spread_us


# Common practice: most receivers end the sentences of a second after its edge; some send the
# label of the coming second before its edge.  Check the receiver's manual.
PRECEDING = ReceiverProfile("preceding")
NEXT = ReceiverProfile("next", "next")


class Profile:
    """Oscillator error model for holdover (see the module docstring)."""
    __slots__ = ("name", "sigma_lock_us", "wander_ppm", "aging_ppm_per_day", "tolerance_ppm")

    def __init__(self, name, sigma_lock_us, wander_ppm, aging_ppm_per_day, tolerance_ppm):
        self.name = name
        self.sigma_lock_us = sigma_lock_us
        self.wander_ppm = wander_ppm
        self.aging_ppm_per_day = aging_ppm_per_day
        self.tolerance_ppm = tolerance_ppm


# sigma_lock: MicroPython hard-IRQ capture jitter of both edges, tens of us [common practice].
# TCXO: +/-0.5 ppm over temperature, ~1 ppm/year aging [common practice for typical parts].
TCXO = Profile("tcxo", 30, 0.5, 0.003, 2.5)
# Uncompensated (AT-cut) crystal, what a board's ticks_us counts: tens of ppm over the full
# temperature range; a 10-20 degC swing on deck moves it by up to about 10 ppm; ~5 ppm/year
# aging; 50 ppm initial tolerance + temperature when nothing was learned [common practice].
XO = Profile("xo", 30, 10.0, 0.015, 50.0)
DEFAULT_PROFILE = XO


class Clock:
    __slots__ = ("profile", "receiver", "edges", "fit_t", "fit_l", "drift_ppm", "drift_sigma_ppm", "drift_ppt",
                 "have_drift", "anchor_tick", "anchor_utc", "manual_tick", "manual_utc", "manual_unc",
                 "manual_state", "counts", "jump_us", "arrivals", "pending_label")

    def __init__(self, profile=DEFAULT_PROFILE, receiver=PRECEDING):
        self.profile = profile
        self.receiver = receiver
        self.arrivals = []           # edge-to-label delays of the last labels, paired or not (us)
        self.pending_label = None    # "next" receivers: [utc_us, tick] waiting for its edge
        self.manual_state = MANUAL
        self.edges = []              # recent PPS edges: [tick, label_utc_us or None]
        self.fit_t = []              # ticks of labelled edges in the fit window
        self.fit_l = []              # their labels (utc us)
        self.drift_ppm = 0.0
        self.drift_sigma_ppm = profile.tolerance_ppm
        self.drift_ppt = 0
        self.have_drift = False
        self.anchor_tick = None
        self.anchor_utc = None
        self.manual_tick = None
        self.manual_utc = None
        self.manual_unc = 0
        self.jump_us = 0             # size of an unconfirmed jump between labels and ticks
        self.counts = {"pps": 0, "glitch": 0, "labels": 0, "ambiguous": 0, "conflict": 0,
                       "inconsistent": 0, "unsteady": 0, "pairs": 0}

    # -- inputs -----------------------------------------------------------
    def on_pps(self, tick):
        """A rising PPS edge captured at extended tick ``tick``."""
        self.counts["pps"] += 1
        if self.edges and tick - self.edges[-1][0] < MIN_PPS_INTERVAL_US:
            self.counts["glitch"] += 1
            return
        edge = [tick, None]
        self.edges.append(edge)
        if len(self.edges) > 6:
            self.edges.pop(0)
        p = self.pending_label
        if p is not None:                      # "next" receivers: the label came before this edge
            self.pending_label = None
            d = tick - p[1]
            rx = self.receiver
            if not self._steady(d):
                return
            if rx.label_min_us <= d <= rx.label_max_us:
                edge[1] = p[0]
                self._pair(tick, p[0], d)
            else:
                self.counts["ambiguous"] += 1

    def on_label(self, label, tick_now):
        """An NMEA ``Label`` received (its last byte) at extended tick ``tick_now``."""
        self.counts["labels"] += 1
        rx = self.receiver
        if not label.whole:
            self.counts["ambiguous"] += 1
            return
        if rx.names == "next":
            p = self.pending_label
            if p is not None and p[0] == label.utc_us:
                return                         # the same second's other sentence
            if p is not None:
                self.counts["ambiguous"] += 1  # the earlier label never met its edge
            self.pending_label = [label.utc_us, tick_now]
            return
        if not self.edges:
            self.counts["ambiguous"] += 1
            return
        edge = self.edges[-1]
        d = tick_now - edge[0]
        if not self._steady(d):
            return
        if d < rx.label_min_us or d > rx.label_max_us:
            self.counts["ambiguous"] += 1
            return
        if edge[1] is not None:
            if edge[1] != label.utc_us:
                self.counts["conflict"] += 1
                edge[1] = None
                self._restart()
            return
        edge[1] = label.utc_us
        self._pair(edge[0], label.utc_us, d)

    def set_time(self, utc_us, unc_us, tick_now):
        """Manual time set: ``utc_us`` is true at ``tick_now``, within ``unc_us``."""
        if not isinstance(utc_us, int) or not isinstance(unc_us, int) or unc_us <= 0 or unc_us >= UNC_MAX_US:
            raise ClockError("set time needs an int instant and an uncertainty of 1 us .. 4294 s")
        if self.state(tick_now) == LOCKED:
            raise ClockError("clock is GPS-locked; manual time refused")
        self.manual_tick = tick_now
        self.manual_utc = utc_us
        self.manual_unc = unc_us
        self.manual_state = MANUAL

    def snapshot(self, tick_now):
        """What survives a power cycle: ``{"utc_us", "unc_us", "state", "drift_ppm",
        "drift_sigma_ppm"}`` (utc None when the clock has no time)."""
        utc, st, unc = self.now(tick_now)
        return {"utc_us": utc if st != NONE else None, "unc_us": unc, "state": STATE_NAMES[st],
                "drift_ppm": self.drift_ppm if self.have_drift else None,
                "drift_sigma_ppm": self.drift_sigma_ppm if self.have_drift else None}

    def restore(self, snap, tick_now, elapsed_us=None, elapsed_unc_us=0):
        """Start from a ``snapshot`` of the previous power cycle: its drift, and (when
        ``elapsed_us``, the time since the snapshot, is known from a clock that ran through the
        reset) its time, in holdover, with ``elapsed_unc_us`` more uncertainty."""
        d = snap.get("drift_ppm")
        sg = snap.get("drift_sigma_ppm")
        if isinstance(d, (int, float)) and isinstance(sg, (int, float)) and abs(d) < 1000 and 0 < sg < 1000:
            self.drift_ppm = float(d)
            self.drift_sigma_ppm = float(sg)
            self.drift_ppt = int(round(d * 1000000.0))
            self.have_drift = True
        utc = snap.get("utc_us")
        unc = snap.get("unc_us")
        if elapsed_us is None or not isinstance(utc, int) or not isinstance(unc, int) or elapsed_us < 0:
            return False
        u = unc + elapsed_unc_us              # the oscillator was off: the RTC measured the gap
        if u >= UNC_MAX_US:
            return False
        self.manual_tick = tick_now
        self.manual_utc = utc + elapsed_us
        self.manual_unc = u
        self.manual_state = HOLDOVER
        return True

    def forget(self):
        """The tick count may have lost whole wrap periods: drop the time, keep the drift."""
        self.edges = []
        self._restart()
        self.anchor_tick = None
        self.anchor_utc = None
        self.manual_tick = None
        self.pending_label = None

    # -- fit --------------------------------------------------------------
    def _restart(self):
        self.fit_t = []
        self.fit_l = []

    def _steady(self, delay_us):
        """Record one edge-to-label delay; False (and the fit restarted) while the recent ones do
        not agree within ``spread_us``: the labels may be landing on the wrong edges."""
        if delay_us > US + MIN_PPS_INTERVAL_US // 10:
            return True                        # an edge went missing: not a timing change
        a = self.arrivals
        a.append(delay_us)
        if len(a) > DELAY_POINTS:
            a.pop(0)
        if max(a) - min(a) > self.receiver.spread_us:
            self.counts["unsteady"] += 1
            self._restart()
            return False
        return True

    def _pair(self, tick, utc_us, delay_us=0):
        if self.fit_t:
            dl = utc_us - self.fit_l[-1]
            n = dl // US
            if dl % US or n <= 0 or n > MAX_GAP_S:
                if n <= 0:
                    self.counts["inconsistent"] += 1
                self._restart()
            else:
                miss = tick - self.fit_t[-1] - dl - self.drift_ppt * n // 1000000
                if abs(miss) > PAIR_TOL_US * n:
                    # labels and ticks disagree (a leap second, a receiver jump): until new pairs
                    # confirm one side, every stamp carries the size of the disagreement
                    self.counts["inconsistent"] += 1
                    self.jump_us = max(self.jump_us, abs(miss))
                    self._restart()
        self.counts["pairs"] += 1
        self.fit_t.append(tick)
        self.fit_l.append(utc_us)
        if len(self.fit_t) > FIT_POINTS:
            self.fit_t.pop(0)
            self.fit_l.pop(0)
        if len(self.fit_t) >= MIN_PAIRS:
            # only a pair confirmed by MIN_PAIRS consistent ones becomes the anchor: a label
            # that jumped never moves the clock on its own
            self.anchor_tick = tick
            self.anchor_utc = utc_us
            self.manual_tick = None
            self.manual_state = MANUAL
            self.jump_us = 0
            self._fit()

    def _fit(self):
        """Least-squares drift over the window (x in s, y = tick residual in us, both small)."""
        t0 = self.fit_t[0]
        l0 = self.fit_l[0]
        n = len(self.fit_t)
        xs = []
        ys = []
        for i in range(n):
            x = (self.fit_l[i] - l0) // US
            xs.append(x)
            ys.append(self.fit_t[i] - t0 - x * US)
        mx = sum(xs) / n
        my = sum(ys) / n
        sxx = 0.0
        sxy = 0.0
        for i in range(n):
            dx = xs[i] - mx
            sxx += dx * dx
            sxy += dx * (ys[i] - my)
        if sxx <= 0:
            return
        b = sxy / sxx
        a = my - b * mx
        ss = 0.0
        for i in range(n):
            r = ys[i] - a - b * xs[i]
            ss += r * r
        var = ss / (n - 2) if n > 2 else 0.0
        var = max(var, 1.0 / 12.0)          # 1 us tick quantisation
        self.drift_ppm = b
        self.drift_sigma_ppm = math.sqrt(var / sxx)
        self.drift_ppt = int(round(b * 1000000.0))
        self.have_drift = True

    # -- outputs ----------------------------------------------------------
    def state(self, tick_now):
        if self.anchor_tick is not None and len(self.fit_t) >= MIN_PAIRS and \
                tick_now - self.anchor_tick <= LOCK_HOLD_US:
            return LOCKED
        if self.manual_tick is not None:
            return self.manual_state
        if self.anchor_tick is not None and self.have_drift:
            return HOLDOVER
        return NONE

    def _label_of(self, i):
        e = self.edges[i]
        if e[1] is not None:
            return e[1]
        for j in range(i - 1, -1, -1):
            if self.edges[j][1] is not None:
                dt = e[0] - self.edges[j][0]
                k = (dt + US // 2) // US
                if k > 0 and abs(dt - k * US) <= PAIR_TOL_US * k:
                    return self.edges[j][1] + k * US
                return None
        return None

    def _rate_us(self, dt_ticks):
        """Ticks -> true microseconds with the learned drift (integer arithmetic)."""
        return dt_ticks * 1000000000000 // (1000000000000 + self.drift_ppt)

    def holdover_unc_us(self, dt_us, base_us, tolerance_ppm):
        dt_s = abs(dt_us) / 1e6
        p = self.profile
        u = base_us + (3.0 * self.drift_sigma_ppm + tolerance_ppm) * dt_s + \
            0.5 * (p.aging_ppm_per_day / 86400.0) * dt_s * dt_s
        return UNC_MAX_US if u >= UNC_MAX_US else int(u) + 1

    def stamp(self, tick, tick_now, force=False):
        """UTC of an event captured at ``tick``: ``(utc_us, state, unc_us)``, or None to wait
        for the next PPS edge (at most ``WAIT_US``; ``force`` extrapolates at once)."""
        # 1. interpolate between two PPS edges around the press
        for i in range(len(self.edges) - 1):
            e0 = self.edges[i][0]
            e1 = self.edges[i + 1][0]
            if e0 <= tick < e1:
                span = e1 - e0
                lab = self._label_of(i)
                if lab is not None and abs(span - US) <= PAIR_TOL_US and len(self.fit_t) >= MIN_PAIRS:
                    return (lab + (tick - e0) * US // span, LOCKED, self.profile.sigma_lock_us)
                break
        st = self.state(tick_now)
        if st == LOCKED and not force and tick_now - tick < WAIT_US:
            return None
        # 2. manual (or restored) anchor newer than any GPS anchor
        if self.manual_tick is not None:
            dt = tick - self.manual_tick
            tol = self.profile.tolerance_ppm if not self.have_drift else self.profile.wander_ppm
            utc = self.manual_utc + (self._rate_us(dt) if self.have_drift else dt)
            return (utc, self.manual_state, self.holdover_unc_us(dt, self.manual_unc, tol))
        # 3. extrapolate with the learned rate: from the last labelled edge, or back from the first
        #    one of the fit for an event before it (a press made before the clock had time)
        if self.anchor_tick is not None and self.have_drift:
            ref_t, ref_l = self.anchor_tick, self.anchor_utc
            back = self.fit_t and tick < self.fit_t[0] and len(self.fit_t) >= MIN_PAIRS
            if back:
                ref_t, ref_l = self.fit_t[0], self.fit_l[0]
            dt = tick - ref_t
            utc = ref_l + self._rate_us(dt)
            unc = self.holdover_unc_us(dt, self.profile.sigma_lock_us + self.jump_us, self.profile.wander_ppm)
            if not back and -LOCK_HOLD_US <= dt <= LOCK_HOLD_US and len(self.fit_t) >= MIN_PAIRS:
                return (utc, LOCKED, unc)
            return (utc, HOLDOVER, unc)
        return (0, NONE, UNC_MAX_US)

    def now(self, tick_now):
        """Best current UTC estimate ``(utc_us, state, unc_us)`` for the display and status."""
        return self.stamp(tick_now, tick_now, force=True)

    def status(self, tick_now):
        utc, st, unc = self.now(tick_now)
        return {"state": STATE_NAMES[st], "utc_us": utc, "uncertainty_us": unc,
                "drift_ppm": round(self.drift_ppm, 4) if self.have_drift else None,
                "drift_sigma_ppm": round(self.drift_sigma_ppm, 5) if self.have_drift else None,
                "fit_points": len(self.fit_t), "oscillator": self.profile.name, "receiver": self.receiver.name,
                "label_delay_ms": round(min(self.arrivals) / 1000.0, 1) if self.arrivals else None,
                "counts": self.counts}
