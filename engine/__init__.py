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


def reduce_session(text, alm=None, at_us=None, deviation_offset="auto"):
    """Reduce a ``limbclock-session/1`` text to the ``limbclock-fix/1`` dict that
    ``limbclock fix --json`` prints: validate the session (against the almanac's
    span), identify contacts whose image is null (``engine.identify``, when
    present), then compute the fix (``engine.fix.solve_fix``).  ``alm`` defaults
    to the shipped almanac.  Raises ``ValueError`` subclasses on bad input."""
    from engine import session as _session
    from engine import fix as _fix
    if alm is None:
        from engine import almanac as _almanac
        alm = _almanac.load()
    s = _session.parse_session(text, alm)
    warnings = []
    if any(c.image is None and not c.void for c in s.contacts):
        try:
            from engine import identify as _identify
        except ImportError:
            _identify = None
        if _identify is not None:
            warnings = _identify.identify_session(s, alm) or []
    result = _fix.solve_fix(s, alm, at_us, deviation_offset)
    result["warnings"] = list(warnings) + result["warnings"]
    return result
