"""Identification never gives a confidently wrong label: the seeded 300-session test.

Sessions (``tests/identify_trials.py``): contact times of 24 invented days at sea computed outside
the engine (``vectors/identify_scenarios.json``: DE421 + ERFA, Bennett refraction, NA dip; see
``vectors/generate_identify.py``), 4 to 16 unlabelled contacts over 1 to 8 hours, with simulated
errors (image deviations 1', dip 1', 0.3' per contact, 0.25 s timing, the DR's velocity 0.3 kn) and
the DR 0 to 600 nmi off in any direction while the session says nothing about it (sigma_DR 30 nmi
by default).  A label is given only at confidence 0.99 or more: none of them may be wrong.  The
search is complete: the true assignment is among the hypotheses of every session.  Figures by
DR error and session size, and the reliability table of the confidence: ``python -m bench identify``.
"""
import random

from engine import almanac, identify
from engine.session import session_from_dict
import identify_trials as T

ALM = almanac.load()
SEED = 2031
SESSIONS = 300


def test_no_confidently_wrong_label_in_300_sessions_with_the_dr_0_to_600_nmi_off():
    doc = T.load()
    rnd = random.Random(SEED)
    ok = withheld = 0
    wrong = []
    missed = []
    for k in range(SESSIONS):
        sess, truth = T.make(doc, rnd)
        r = identify.identify(session_from_dict(sess), ALM)
        good, amb, bad = T.score(r, truth)
        ok += good
        withheld += amb
        if bad:
            wrong.append((k, truth["scenario"], round(truth["dr_error_nm"]),
                          [(c["image"], c["confidence"]) for c in r["contacts"]], truth["images"]))
        if truth["images"] not in [h["images"] for h in r["hypotheses"]] and len(truth["images"]) > 4:
            missed.append((k, truth["scenario"], len(truth["images"])))
    assert wrong == []
    # complete: the truth is among the hypotheses (4-contact sessions can hold more equally good ones
    # than are carried to the end; they are then counted against every label)
    assert missed == []
    # and not mute: measured 81 % of the labels given (the rest withheld, with their alternatives)
    assert ok > 0.75 * (ok + withheld), (ok, withheld)
