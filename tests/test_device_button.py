"""Button debounce and gestures: stamped at the first edge, decided by hold time.

Contact bounce of a few milliseconds and a debounce time of 20 ms are common
practice for small push buttons."""
from hypothesis import given, settings, strategies as st

from device.button import Button, DEBOUNCE_US


def press(b, t0, hold_us, bounce_us=(), poll_every=None):
    """Edges of one press at t0 with bounces (offsets in us) on closing and opening."""
    edges = [(t0, True)]
    level = True
    for off in bounce_us:
        level = not level
        edges.append((t0 + off, level))
    if not level:
        edges.append((t0 + max(bounce_us) + 300, True))
    edges.append((t0 + hold_us, False))
    edges.append((t0 + hold_us + 700, True))
    edges.append((t0 + hold_us + 1500, False))
    out = []
    for t, lv in edges:
        if poll_every:
            out += b.poll(t - 1)
        b.edge(t, lv)
    out += b.poll(t0 + hold_us + 100000)
    return out


@settings(max_examples=60, deadline=None)
@given(st.integers(30000, 14000000), st.lists(st.integers(100, 5000), max_size=4, unique=True),
       st.booleans())
def test_gesture_by_hold_time_stamped_at_first_edge(hold_us, bounces, poll_often):
    b = Button()
    got = press(b, 10 ** 9, hold_us, sorted(bounces), poll_often)
    expect = ("contact" if hold_us < 1000000 else "void" if hold_us < 3000000 else
              "mode" if hold_us < 5000000 else "session" if hold_us < 8000000 else
              "fix" if hold_us < 11000000 else "cancel")
    assert got == [(expect, 10 ** 9)]


def test_spike_shorter_than_debounce_is_ignored():
    b = Button()
    b.edge(1000, True)
    b.edge(1000 + DEBOUNCE_US // 2, False)
    assert b.poll(1000 + 5 * DEBOUNCE_US) == [] and b.glitches == 1
    assert b.hint(10 ** 6) is None


def test_hint_while_held():
    b = Button()
    b.edge(0, True)
    b.poll(DEBOUNCE_US + 1)
    assert b.hint(500000) == "contact" and b.hint(2000000) == "void" and b.hint(6000000) == "session"


@settings(max_examples=8, deadline=None)
@given(st.lists(st.sampled_from([120000, 400000, 1500000, 3600000, 6000000, 9000000, 11500000]), min_size=1, max_size=6))
def test_gestures_through_the_whole_firmware(holds):
    from device import log as L
    from device.sim import VirtualTimer
    from engine.timescale import parse_utc
    t = parse_utc("2029-08-03T06:41:12.250Z")
    vt = VirtualTimer(contacts=[], start_us=t - 60000000)
    for i, h in enumerate(holds):
        vt.world.press(t + i * 12000000, h)
    vt.advance_to(t + len(holds) * 12000000 + 3000000)
    # expected records, from the documented table (device/PROTOCOL.md)
    expect = []
    session, mode, last, voided = 1, 0, None, set()
    seq = 0
    for h in holds:
        g = ("contact" if h < 1000000 else "void" if h < 3000000 else "mode" if h < 5000000 else
             "session" if h < 8000000 else "fix" if h < 11000000 else "cancel")
        if g == "contact":
            seq += 1
            last = seq
            expect.append((L.CONTACT, 0, session, mode))
        elif g == "void" and last is not None and last not in voided:
            seq += 1
            voided.add(last)
            expect.append((L.VOID, last, session, mode))
        elif g == "mode":
            seq += 1
            mode = (mode + 1) % 4
            expect.append((L.SETTINGS, 0, session, mode))
        elif g == "session":
            seq += 1
            session += 1
            expect.append((L.SESSION, 0, session, mode))
    got = [(r.kind, r.ref_seq, r.session, r.body * 2 + r.limb) for r in vt.fw.log.records()]
    assert got == expect
    contacts = [r for r in vt.fw.log.records() if r.kind == L.CONTACT]
    starts = [t + i * 12000000 for i, h in enumerate(holds) if h < 1000000]
    assert [abs(r.utc_us - s) <= 1000 for r, s in zip(contacts, starts)] == [True] * len(starts)
