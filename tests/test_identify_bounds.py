"""Identification's search is bounded in time and memory, whatever the session's size.

Work is counted in evaluations of the forward model (``engine.coop.ticks``, a portable count:
wall-clock figures are ``python -m bench identify``'s); memory with ``tracemalloc`` (CPython).
Sessions: the reference contact times of one invented day (``vectors/identify_scenarios.json``,
DE421 + ERFA), repeated 0.1 s apart to make long sessions (a repeat is a valid contact of the same
image: 0.1 s moves the altitude by at most 0.03').
"""
import tracemalloc

from engine import almanac, coop, identify
from engine.session import session_from_dict
from engine.timescale import format_utc, parse_utc
import identify_trials as T

ALM = almanac.load()
DOC = T.load()


def long_session(n):
    scn = DOC["scenarios"][1]
    base = [c for c in scn["contacts"] if abs(c["rate_arcmin_per_s"]) >= T.MIN_RATE]
    cs = []
    k = 0
    while len(cs) < n:
        for c in base[:n - len(cs)]:
            cs.append({"utc": format_utc(parse_utc(c["utc"]) + k * 100000, 3), "body": c["body"], "limb": c["limb"],
                       "image": None, "truth": c["image"]})
        k += 1
    cs.sort(key=lambda c: c["utc"])
    s = session_from_dict({"format": "limbclock-session/1", "observer": scn["observer"],
                           "instrument": {"images": DOC["instruments"][scn["instrument"]]["images"]},
                           "track": dict(scn["track"], known=False), "contacts": cs})
    for c in s.contacts:
        c.dup_of = None                 # repeats on purpose: each is read as a contact of its own
    return s


def measure(n):
    s = long_session(n)
    t0 = coop.ticks
    tracemalloc.start()
    notes, summary = identify.identify_for_fix(s, ALM)
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    return coop.ticks - t0, peak, s, summary


def test_search_bounded_and_the_rest_read_once():
    identify.identify_for_fix(long_session(24), ALM)         # the almanac's year decoded once
    t24, m24, _, _ = measure(24)
    t240, m240, _, _ = measure(240)
    t2400, m2400, s, summary = measure(2400)
    # the search and refinement work on at most 24 contacts: a constant; every other contact is read once
    # at the most probable position (its image and residual), at the others until they are hopeless
    assert t24 < 1500, t24                                    # measured 914
    assert t240 - t24 <= 3.0 * 216, (t24, t240)
    assert t2400 - t240 <= 1.5 * 2160, (t240, t2400)
    # memory: a few arrays of n entries (measured about 120 bytes a contact in CPython)
    assert m2400 - m240 <= 250 * 2160, (m240, m2400)
    assert m240 < 200 * 1024
    # and the long session is identified: every contact, confidently, as its image
    assert summary["consistent"] and not summary["fallback"] and summary["ambiguous"] == []
    assert all(c.image == c.extra["truth"] for c in s.contacts)


def test_bounds_are_what_the_docstring_says():
    assert identify.SEARCH_CONTACTS == 8 and identify.REFINE_CONTACTS == 24 and identify.MAX_ANCHORS == 4
    assert identify.KEEP == 16 and identify.REFINE_FAR == 10 and identify.REFINE_NEAR == 6
    assert identify.MAX_HYPOTHESES == 6
    s = long_session(60)
    r = identify.identify(s, ALM)
    assert len(r["hypotheses"]) <= identify.MAX_HYPOTHESES
    assert len(r["contacts"]) == 60
