"""The timer's UTC clock: PPS discipline, drift learning, holdover, manual set.

All times are ints: *ticks* are extended oscillator microseconds
(``hal.TickExtender``), instants are UTC microseconds since 1970.  Floats only
hold small, well-scaled quantities (ppm, residuals of a few microseconds).

Pairing.  A PPS edge marks the start of a UTC second; the NMEA label naming
that second follows 50-500 ms later (receiver practice, REFERENCES.md section 4
[common practice; check per receiver]).  A whole-second label received
``LABEL_MIN_US``..``LABEL_MAX_US`` after the latest edge names that edge.  A
label outside the window is ambiguous (it could belong to either neighbouring
edge) and is dropped and counted.  Successive labelled edges must agree: the
labels' difference in seconds times 1e6 must match the tick difference within
``PAIR_TOL_US`` per second; otherwise the fit restarts (a jump, a leap second
or a receiver reset).

Drift.  While locked the clock fits ticks = a + (1e6 + b) x (x in labelled
seconds) by least squares over the last ``FIT_POINTS`` labelled edges; b is
the oscillator's drift in ppm (us of ticks per second), with its standard
error from the residuals (floored at the 1 us tick quantisation, 1/sqrt(12) us).

Stamping a press at tick p (REFERENCES.md section 4, PPS):
* between two edges e0 (label L0) and e1: ``L0 + (p - e0) * 1e6 // (e1 - e0)``,
  which cancels the oscillator's drift; state LOCKED, uncertainty
  ``sigma_lock_us`` (interrupt latency jitter of the two captures);
* after the last edge, once ``WAIT_US`` has passed without a next edge: the
  learned rate from the last labelled edge (the anchor):
  ``L + dt * 1e12 // (1e12 + drift_ppt)``; state HOLDOVER when more than
  ``LOCK_HOLD_US`` has passed since the anchor.

Holdover uncertainty (a bound, not a standard deviation), dt in seconds since
the anchor::

    u(dt) = sigma_lock_us + (3 sigma_drift_ppm + wander_ppm) dt + 1/2 aging_ppm_per_s dt^2

``wander_ppm`` bounds how far the oscillator's frequency may move away from the
learned value during the outage (temperature); ``aging`` is the slow
monotonic drift of a quartz resonator.  The profiles below state both for a
TCXO and for an uncompensated crystal (values from common practice for
typical parts; check the datasheet of the board's part).

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
LABEL_MIN_US = 50000
LABEL_MAX_US = 500000
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
# Uncompensated crystal: tens of ppm over temperature; on deck a few ppm of slow wander, ~5 ppm/year.
XO = Profile("xo", 30, 4.0, 0.015, 50.0)


class Clock:
    __slots__ = ("profile", "edges", "fit_t", "fit_l", "drift_ppm", "drift_sigma_ppm", "drift_ppt",
                 "have_drift", "anchor_tick", "anchor_utc", "manual_tick", "manual_utc", "manual_unc",
                 "counts", "jump_us")

    def __init__(self, profile=TCXO):
        self.profile = profile
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
                       "inconsistent": 0, "pairs": 0}

    # -- inputs -----------------------------------------------------------
    def on_pps(self, tick):
        """A rising PPS edge captured at extended tick ``tick``."""
        self.counts["pps"] += 1
        if self.edges and tick - self.edges[-1][0] < MIN_PPS_INTERVAL_US:
            self.counts["glitch"] += 1
            return
        self.edges.append([tick, None])
        if len(self.edges) > 6:
            self.edges.pop(0)

    def on_label(self, label, tick_now):
        """An NMEA ``Label`` received (its last byte) at extended tick ``tick_now``."""
        self.counts["labels"] += 1
        if not label.whole or not self.edges:
            self.counts["ambiguous"] += 1
            return
        edge = self.edges[-1]
        d = tick_now - edge[0]
        if d < LABEL_MIN_US or d > LABEL_MAX_US:
            self.counts["ambiguous"] += 1
            return
        if edge[1] is not None:
            if edge[1] != label.utc_us:
                self.counts["conflict"] += 1
                edge[1] = None
                self._restart()
            return
        edge[1] = label.utc_us
        self._pair(edge[0], label.utc_us)

    def set_time(self, utc_us, unc_us, tick_now):
        """Manual time set: ``utc_us`` is true at ``tick_now``, within ``unc_us``."""
        if not isinstance(utc_us, int) or not isinstance(unc_us, int) or unc_us <= 0 or unc_us >= UNC_MAX_US:
            raise ClockError("set time needs an int instant and an uncertainty of 1 us .. 4294 s")
        if self.state(tick_now) == LOCKED:
            raise ClockError("clock is GPS-locked; manual time refused")
        self.manual_tick = tick_now
        self.manual_utc = utc_us
        self.manual_unc = unc_us

    # -- fit --------------------------------------------------------------
    def _restart(self):
        self.fit_t = []
        self.fit_l = []

    def _pair(self, tick, utc_us):
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
            return MANUAL
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
        # 2. manual anchor newer than any GPS anchor
        if self.manual_tick is not None:
            dt = tick - self.manual_tick
            tol = self.profile.tolerance_ppm if not self.have_drift else self.profile.wander_ppm
            utc = self.manual_utc + (self._rate_us(dt) if self.have_drift else dt)
            return (utc, MANUAL, self.holdover_unc_us(dt, self.manual_unc, tol))
        # 3. extrapolate from the last labelled edge with the learned rate
        if self.anchor_tick is not None and self.have_drift:
            dt = tick - self.anchor_tick
            utc = self.anchor_utc + self._rate_us(dt)
            unc = self.holdover_unc_us(dt, self.profile.sigma_lock_us + self.jump_us, self.profile.wander_ppm)
            if dt <= LOCK_HOLD_US and len(self.fit_t) >= MIN_PAIRS:
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
                "fit_points": len(self.fit_t), "oscillator": self.profile.name, "counts": self.counts}
