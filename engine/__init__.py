"""limbclock engine: the pure-Python reduction core.

Standard library only, and only what MicroPython on a small board also has.
Modules: ``timescale`` (UTC/TT/UT1, instants as int microseconds), ``angles``
(degree trigonometry and formatting), ``constants``, ``almanac`` (compact
Chebyshev almanac of the Sun and Moon), ``corrections`` (dip, refraction,
semi-diameter, parallax), ``sphere`` (altitude/azimuth, rhumb-line DR),
``model`` (THE forward model of a timed contact), ``session``
(``limbclock-session/1`` reader), ``fix`` (least-squares fix, ellipse,
blunders), ``doubts`` (what to doubt about a fix), ``instrument``, ``plan``,
``identify``, ``calibrate``.
"""

VERSION = "0.1.0"               # reported by the timer (`limbclock board check`)


def reduce_session(text, alm=None, at_us=None, deviation_offset="auto", relabel=True, diagnose=True):
    """Reduce a ``limbclock-session/1`` text to the ``limbclock-fix/1`` dict that
    ``limbclock fix --json`` prints: validate the session (against the almanac's
    span), identify contacts whose image is null (``engine.identify``, when
    present), compute the fix (``engine.fix.solve_fix``) and say what to doubt
    about it (``engine.doubts``: the dict's ``"doubts"``, a list of
    ``{"code", "message"}``, empty when the fix is consistent).

    ``text`` may also be a Session already read by ``engine.session.parse_session``
    with the same ``alm`` (so that a board can drop the text before the
    reduction); it is reduced in place (identified images are written into its
    contacts).

    Identification writes the images it is confident of (0.99); when fewer than
    three usable contacts are then labelled and the most probable assignment
    fits, the fix uses that assignment for the contacts that fit it and a doubt
    says so (``identification_ambiguous``).  The dict then carries
    ``"identification"``: ``searched``, ``dr_explains``, ``candidates`` (every
    position that fits), ``fallback``.

    With ``relabel`` (default), a contact rejected as a blunder that fits another
    image (or the other limb) within 3 sigma at the fix is read as that image
    and the fix is solved again; the relabelling is kept only when the contact
    is then accepted, and its ``reason`` and the warnings say so (the label the
    navigator wrote is kept in ``labelled``).  ``diagnose`` (default) reduces the
    session again under each likely slip when the fix is far from the DR (at
    most ``engine.doubts.MAX_SLIP_SOLVES`` fixes).  ``alm`` defaults to the
    shipped almanac.

    Raises ``ValueError`` subclasses on bad input, and
    ``engine.doubts.NoConsistentFix`` (a ``engine.fix.FixError``) when no
    consistent fix exists (among them the fix's rejection limit: more than a third
    of the contacts would be blunders, ``consistent`` False): its message is one
    line, and no position is given."""
    from engine import session as _session
    from engine import fix as _fix
    from engine import doubts as _doubts
    if alm is None:
        from engine import almanac as _almanac
        alm = _almanac.load()
    s = text if isinstance(text, _session.Session) else _session.parse_session(text, alm)
    text = None
    _doubts.dr_sigma_of(s)                      # a malformed dr_sigma_nm is refused before any work
    warnings = []
    ident = None
    if any(c.image is None and not c.void for c in s.contacts):
        try:
            from engine import identify as _identify
        except ImportError:
            _identify = None
        if _identify is not None:
            warnings, ident = _identify.identify_for_fix(s, alm)
    try:
        result = _fix.solve_fix(s, alm, at_us, deviation_offset)
    except _fix.FixError as exc:
        if ident is not None and (not ident["consistent"] or ident["fallback"] or len(ident["candidates"]) != 1):
            raise _doubts.NoConsistentFix("no consistent fix: %s (%s)" % (_no_position(ident), exc))
        raise
    if relabel:
        changed = _apply_suggestions(s, result)
        if changed:
            result = None       # one result (its per-contact report) on a board's heap at a time
            result = _relabel(s, alm, at_us, deviation_offset, changed, _fix)
    result["warnings"] = list(warnings) + result["warnings"]
    why = _doubts.consistency(result, ident)
    if why is not None:
        raise _doubts.NoConsistentFix(why)
    result["doubts"] = _doubts.assess(s, alm, result, ident, at_us, deviation_offset, diagnose)
    if any(d["code"] == "long_run" for d in result["doubts"]):
        # said once: the doubt replaces the fix's own note on the running fix
        result["warnings"] = [w for w in result["warnings"] if not w.startswith("running fix over ")]
    if ident is not None:
        result["identification"] = {"searched": ident["searched"], "dr_explains": ident["dr_explains"],
                                    "candidates": ident["candidates"], "fallback": ident["fallback"]}
    return result


def _no_position(ident):
    """Why identification leaves no position to fix (one phrase)."""
    from engine.angles import fmt_lat, fmt_lon
    if not ident["consistent"]:
        return "no position explains the contacts with any images of the instrument"
    cands = ident["candidates"]
    if len(cands) > 1:
        return "%d positions fit the contacts (%s)" % (len(cands), "; ".join(
            "%s %s" % (fmt_lat(c["lat_deg"]), fmt_lon(c["lon_deg"])) for c in cands))
    return "the images of the contacts cannot be told"


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
