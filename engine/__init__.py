"""limbclock engine: the pure-Python reduction core.

Standard library only, and only what MicroPython on a small board also has.
Modules: ``timescale`` (UTC/TT/UT1, instants as int microseconds), ``angles``
(degree trigonometry and formatting), ``constants``, ``almanac`` (compact
Chebyshev almanac of the Sun and Moon), ``corrections`` (dip, refraction,
semi-diameter, parallax), ``sphere`` (altitude/azimuth, rhumb-line DR),
``model`` (THE forward model of a timed contact), ``session``
(``limbclock-session/1`` reader), ``fix`` (least-squares fix, ellipse,
blunders), ``instrument``, ``plan``, ``identify``, ``calibrate``.
"""

VERSION = "0.1.0"               # reported by the timer (`limbclock board check`)


def reduce_session(text, alm=None, at_us=None, deviation_offset="auto", relabel=True):
    """Reduce a ``limbclock-session/1`` text to the ``limbclock-fix/1`` dict that
    ``limbclock fix --json`` prints: validate the session (against the almanac's
    span), identify contacts whose image is null (``engine.identify``, when
    present), then compute the fix (``engine.fix.solve_fix``).

    ``text`` may also be a Session already read by ``engine.session.parse_session``
    with the same ``alm`` (so that a board can drop the text before the
    reduction); it is reduced in place (identified images are written into its
    contacts).

    With ``relabel`` (default), a contact rejected as a blunder that fits another
    image (or the other limb) within 3 sigma at the fix is read as that image
    and the fix is solved again; the relabelling is kept only when the contact
    is then accepted, and its ``reason`` and the warnings say so (the label the
    navigator wrote is kept in ``labelled``).  ``alm`` defaults to the shipped
    almanac.  Raises ``ValueError`` subclasses on bad input, and ``engine.fix.FixError``
    ("inconsistent: ...") when the fix's rejection limit stopped it (``consistent``
    False: more than a third of the contacts would be blunders)."""
    from engine import session as _session
    from engine import fix as _fix
    if alm is None:
        from engine import almanac as _almanac
        alm = _almanac.load()
    s = text if isinstance(text, _session.Session) else _session.parse_session(text, alm)
    text = None
    warnings = []
    if any(c.image is None and not c.void for c in s.contacts):
        try:
            from engine import identify as _identify
        except ImportError:
            _identify = None
        if _identify is not None:
            warnings = _identify.identify_session(s, alm) or []
    result = _fix.solve_fix(s, alm, at_us, deviation_offset)
    if relabel:
        changed = _apply_suggestions(s, result)
        if changed:
            result = None       # one result (its per-contact report) on a board's heap at a time
            result = _relabel(s, alm, at_us, deviation_offset, changed, _fix)
    result["warnings"] = list(warnings) + result["warnings"]
    if result.get("consistent") is False:
        # more than a third of the contacts would be blunders: no position is given (engine/fix.py)
        raise _fix.FixError("inconsistent: %d of %d contacts misfit; more than a third would be rejected as "
                            "blunders, so no fix is given" % (len(result["rejected_blunders"]) +
                                                              len(result["rejected_time_blunders"]) + 1,
                                                              result["contacts_usable"]))
    return result


def _apply_suggestions(s, result):
    """Read each rejected contact with a suggestion as the image (or limb) it fits, in place;
    returns {index: (image, limb) as labelled} of the contacts changed."""
    changed = {}
    for entry in result["contacts"]:
        sug = entry.get("suggest")
        if entry["used"] or not sug:
            continue
        c = s.contacts[entry["index"]]
        changed[c.index] = (c.image, c.limb)
        if "image" in sug:
            c.image = sug["image"]
        else:
            c.limb = sug["limb"]
    return changed


def _relabel(s, alm, at_us, deviation_offset, changed, _fix):
    """Second pass: the fix with the contacts ``changed`` read as they fit; the relabelling of those
    then accepted is kept.  When none is, the labels go back and the first fix is solved again
    (rather than held through the second solve: same result, half the heap)."""
    second = _fix.solve_fix(s, alm, at_us, deviation_offset)
    kept = []
    for entry in second["contacts"]:
        old = changed.get(entry["index"])
        if old is None:
            continue
        if entry["used"]:
            what = ("image %s" % entry["image"]) if old[0] != entry["image"] else ("%s limb" % entry["limb"])
            entry["labelled"] = {"image": old[0], "limb": old[1]}
            entry["reason"] = "relabelled: timed as %s %s, fits as %s (residual %+.1f')" % (
                old[0], old[1], what, entry["residual_nm"])
            kept.append("contact %d relabelled %s %s -> %s" % (entry["index"], old[0], old[1], what))
    if not kept:
        second = None
        for index, (image, limb) in changed.items():
            s.contacts[index].image, s.contacts[index].limb = image, limb
        return _fix.solve_fix(s, alm, at_us, deviation_offset)
    second["warnings"] = kept + second["warnings"]
    return second
