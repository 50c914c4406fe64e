"""The one button: debounce and gestures, decided by how long it is held.

Edges arrive with the tick the interrupt captured (``edge``).  A change of
level counts once the pin has been stable for ``DEBOUNCE_US``; the time of the
change is the FIRST edge of the bouncing transition, so a press is stamped at
the instant the contact closed, not after the bounce or at release.  A spike
shorter than the debounce time is ignored.

Gestures (decided at release by the hold time; while held, ``hint`` tells the
display what releasing now would do, and the firmware chirps at each step):

==============  ===========  ===============================================
hold time       gesture      effect
==============  ===========  ===============================================
< 1 s           ``contact``  a contact, stamped at the first edge of the press
1 s .. 3 s      ``void``     voids the last contact (a new VOID record)
3 s .. 5 s      ``mode``     next body/limb: sun lower, sun upper, moon lower, moon upper
5 s .. 8 s      ``session``  starts a new session
8 s .. 11 s     ``fix``      reduces the current session on board (``device/onboard.py``)
> 11 s          ``cancel``   nothing (a way out of a held press)
==============  ===========  ===============================================
"""
DEBOUNCE_US = 20000
STEPS_US = (1000000, 3000000, 5000000, 8000000, 11000000)
GESTURES = ("contact", "void", "mode", "session", "fix", "cancel")


def classify(hold_us):
    i = 0
    while i < len(STEPS_US) and hold_us >= STEPS_US[i]:
        i += 1
    return GESTURES[i]


class Button:
    """Feed ``edge(tick, pressed)``; ``poll(now)`` returns finished gestures ``(name, press_tick)``.

    A level that stayed put for ``DEBOUNCE_US`` is settled either by ``poll`` or by the
    next edge (whichever comes first), so a slow main loop cannot lose a press."""
    __slots__ = ("raw", "raw_tick", "stable", "change_tick", "press_tick", "glitches", "done")

    def __init__(self):
        self.raw = False
        self.raw_tick = 0
        self.stable = False
        self.change_tick = None     # first edge since the level left ``stable``
        self.press_tick = None
        self.glitches = 0
        self.done = []

    def edge(self, tick, pressed):
        self._settle(tick)
        if pressed != self.stable and self.change_tick is None:
            self.change_tick = tick
        self.raw = pressed
        self.raw_tick = tick

    def _settle(self, now):
        if self.change_tick is None or now - self.raw_tick < DEBOUNCE_US:
            return
        if self.raw == self.stable:          # bounced back: a spike, not a change
            self.change_tick = None
            self.glitches += 1
            return
        t = self.change_tick
        self.change_tick = None
        self.stable = self.raw
        if self.stable:
            self.press_tick = t
        elif self.press_tick is not None:
            self.done.append((classify(t - self.press_tick), self.press_tick))
            self.press_tick = None

    def poll(self, now):
        self._settle(now)
        out = self.done
        self.done = []
        return out

    def hint(self, now):
        """The gesture a release at ``now`` would make, or None when not held."""
        if not self.stable or self.press_tick is None:
            return None
        return classify(now - self.press_tick)
