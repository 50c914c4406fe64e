"""limbclock engine: the pure-Python reduction core.

Standard library only, and only what MicroPython on a small board also has.
Modules: ``timescale`` (UTC/TT/UT1, instants as int microseconds), ``angles``
(degree trigonometry and formatting), ``constants``, ``almanac`` (compact
Chebyshev almanac of the Sun and Moon).
"""
