"""Time scales: ISO 8601 UTC text, integer-microsecond instants, TAI, TT, UT1.

An *instant* is an ``int``: microseconds of UTC since 1970-01-01T00:00:00Z,
POSIX style (leap seconds are not counted, every UTC day has 86 400 s).

Leap seconds.  ``LEAP_SECONDS`` is the table of TAI - UTC from IERS Bulletin C
(TAI - UTC = 37 s since 2017-01-01, Bulletin C 52 onwards).  It was last
checked against Bulletin C 72 (July 2026: no leap second at the end of
December 2026), so it is known good until the next date a leap second could
be inserted, the end of 2027-06-30 (``LEAP_TABLE_VALID_UNTIL``; a leap second
there would be announced in Bulletin C 73, January 2027).  Past that date
the engine keeps using the last value (37 s) and says so through
``leap_table_extrapolated``.  ``tests/test_timescale.py`` checks the table
day by day against ERFA's ``eraDat`` and against IERS ``Leap_Second.dat``.  The cost of a leap second announced after that
date would be one second of TT, which moves the Moon by less than 0.01' and the
Sun by less than 0.001': the almanac stays usable, but refresh this table.

POSIX cannot represent a leap second: ``parse_utc`` accepts ``23:59:60.xxx``
only at the end of a day the table lists as having one, and folds it onto the
first microsecond of the next day (as a POSIX clock does).

UT1 = UTC + DUT1.  DUT1 (|DUT1| <= 0.9 s, ITU-R TF.460-6) is broadcast with
radio time signals in 0.1 s steps.  It defaults to 0 here; leaving it out can
cost up to 0.9 s * 15"/s = 0.23' of longitude.
"""
from engine.constants import (US_PER_S, US_PER_DAY, J2000_UNIX_DAYS, TT_MINUS_TAI_US,
                              ERA_RATE_EXTRA_TURNS_PER_DAY)

FIRST_YEAR = 1972          # start of the leap-second era (TAI - UTC = 10 s)
LAST_YEAR = 2099           # latest year the parser accepts
LEAP_TABLE_CHECKED = "2026-07-07"        # IERS Bulletin C 72 (July 2026): no leap second at the end of 2026
LEAP_TABLE_VALID_UNTIL = "2027-06-30T23:59:59Z"   # the last second before the next possible leap second


class TimeError(ValueError):
    """A malformed or out-of-range time."""


def days_from_civil(y, m, d):
    """Days since 1970-01-01 of a proleptic Gregorian date (H. Hinnant's algorithm)."""
    y -= m <= 2
    era = (y if y >= 0 else y - 399) // 400
    yoe = y - era * 400
    doy = (153 * (m + (-3 if m > 2 else 9)) + 2) // 5 + d - 1
    doe = yoe * 365 + yoe // 4 - yoe // 100 + doy
    return era * 146097 + doe - 719468


def civil_from_days(z):
    """(year, month, day) of a day count since 1970-01-01 (H. Hinnant's algorithm)."""
    z += 719468
    era = (z if z >= 0 else z - 146096) // 146097
    doe = z - era * 146097
    yoe = (doe - doe // 1460 + doe // 36524 - doe // 146096) // 365
    y = yoe + era * 400
    doy = doe - (365 * yoe + yoe // 4 - yoe // 100)
    mp = (5 * doy + 2) // 153
    d = doy - (153 * mp + 2) // 5 + 1
    m = mp + (3 if mp < 10 else -9)
    return y + (m <= 2), m, d


def _is_leap_year(y):
    return y % 4 == 0 and (y % 100 != 0 or y % 400 == 0)


_MONTH_DAYS = (31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31)


def _month_days(y, m):
    return 29 if (m == 2 and _is_leap_year(y)) else _MONTH_DAYS[m - 1]


# (first UTC day it applies, as days since 1970-01-01; TAI - UTC in seconds)
# IERS Bulletin C / leap-seconds list.
LEAP_SECONDS = (
    (days_from_civil(1972, 1, 1), 10), (days_from_civil(1972, 7, 1), 11),
    (days_from_civil(1973, 1, 1), 12), (days_from_civil(1974, 1, 1), 13),
    (days_from_civil(1975, 1, 1), 14), (days_from_civil(1976, 1, 1), 15),
    (days_from_civil(1977, 1, 1), 16), (days_from_civil(1978, 1, 1), 17),
    (days_from_civil(1979, 1, 1), 18), (days_from_civil(1980, 1, 1), 19),
    (days_from_civil(1981, 7, 1), 20), (days_from_civil(1982, 7, 1), 21),
    (days_from_civil(1983, 7, 1), 22), (days_from_civil(1985, 7, 1), 23),
    (days_from_civil(1988, 1, 1), 24), (days_from_civil(1990, 1, 1), 25),
    (days_from_civil(1991, 1, 1), 26), (days_from_civil(1992, 7, 1), 27),
    (days_from_civil(1993, 7, 1), 28), (days_from_civil(1994, 7, 1), 29),
    (days_from_civil(1996, 1, 1), 30), (days_from_civil(1997, 7, 1), 31),
    (days_from_civil(1999, 1, 1), 32), (days_from_civil(2006, 1, 1), 33),
    (days_from_civil(2009, 1, 1), 34), (days_from_civil(2012, 7, 1), 35),
    (days_from_civil(2015, 7, 1), 36), (days_from_civil(2017, 1, 1), 37),
)


# The first UTC day the table is no longer known good: 2027-07-01 (day 21000).
_EXTRAPOLATED_FROM_DAY = days_from_civil(2027, 7, 1)
MAX_TIME_CHARS = 40        # longest time text parse_utc reads (engine.limits.MAX_TIME_CHARS)


def _digits(s, what):
    """ASCII digits only: str.isdigit() and int() also take other scripts' digits (Devanagari,
    Arabic-Indic, fullwidth...), which are not ISO 8601."""
    if not s:
        raise TimeError("bad %s %r" % (what, s))
    for ch in s:
        if not "0" <= ch <= "9":
            raise TimeError("bad %s %r: ASCII digits 0-9 only" % (what, s))
    return int(s)


def _shown(text):
    return repr(text) if len(text) <= MAX_TIME_CHARS else repr(text[:MAX_TIME_CHARS]) + "..."


def parse_utc(text):
    """ISO 8601 UTC text -> instant (int microseconds).

    Accepts ``YYYY-MM-DDTHH:MM:SS[.ffffff]Z`` (also ``+00:00`` for ``Z``,
    ``HH:MM`` without seconds, and a space for ``T``).  Fractions finer than
    a microsecond are rounded.  Raises ``TimeError`` with the reason.
    """
    if not isinstance(text, str):
        raise TimeError("time must be a string like 2029-08-03T06:41:12.250Z, got %s" % type(text).__name__)
    if len(text) > MAX_TIME_CHARS:
        raise TimeError("time %s is %d characters long; ISO 8601 UTC takes at most %d"
                        % (_shown(text), len(text), MAX_TIME_CHARS))
    s = text.strip(" \t\r\n")       # ASCII white space only
    if s.endswith("Z") or s.endswith("z"):
        s = s[:-1]
    elif s.endswith("+00:00"):
        s = s[:-6]
    else:
        raise TimeError("time %r must be UTC and end in Z" % text)
    if len(s) < 16 or s[4] != "-" or s[7] != "-" or s[10] not in "Tt " or s[13] != ":":
        raise TimeError("time %r is not ISO 8601 (YYYY-MM-DDTHH:MM:SS.sssZ)" % text)
    try:
        y = _digits(s[0:4], "year")
        mo = _digits(s[5:7], "month")
        d = _digits(s[8:10], "day")
        hh = _digits(s[11:13], "hour")
        mi = _digits(s[14:16], "minute")
        sec = 0
        frac_us = 0
        rest = s[16:]
        if rest:
            if rest[0] != ":" or len(rest) < 3:
                raise TimeError("bad seconds")
            sec = _digits(rest[1:3], "second")
            rest = rest[3:]
            if rest:
                if rest[0] not in ".," or len(rest) < 2:
                    raise TimeError("bad fraction")
                f = rest[1:]
                _digits(f, "fraction")
                if len(f) <= 6:
                    frac_us = int((f + "000000")[:6])
                else:
                    frac_us = int(f[:6]) + (1 if int(f[6]) >= 5 else 0)
    except TimeError as e:
        raise TimeError("time %r is not ISO 8601 (%s)" % (text, e))
    if not FIRST_YEAR <= y <= LAST_YEAR:
        raise TimeError("time %r: year outside %d..%d" % (text, FIRST_YEAR, LAST_YEAR))
    if not 1 <= mo <= 12:
        raise TimeError("time %r: month %d out of range" % (text, mo))
    if not 1 <= d <= _month_days(y, mo):
        raise TimeError("time %r: day %d out of range" % (text, d))
    if hh > 23 or mi > 59 or sec > 60:
        raise TimeError("time %r: hour, minute or second out of range" % text)
    day = days_from_civil(y, mo, d)
    if sec == 60:
        if not (hh == 23 and mi == 59 and is_leap_second_day(day)):
            raise TimeError("time %r: second 60 only exists at the end of a leap-second day" % text)
        return (day + 1) * US_PER_DAY   # folded onto the next day's first microsecond
    return day * US_PER_DAY + ((hh * 60 + mi) * 60 + sec) * US_PER_S + frac_us


def format_utc(t_us, decimals=3):
    """Instant -> ISO 8601 text with ``Z`` and ``decimals`` (0..6) fractional digits,
    rounded to the nearest displayed unit."""
    if not isinstance(t_us, int):
        raise TimeError("instant must be an int of microseconds, got %r" % (t_us,))
    unit = 10 ** (6 - decimals)
    t = ((t_us + unit // 2) // unit) * unit
    day = t // US_PER_DAY
    us = t - day * US_PER_DAY
    y, mo, d = civil_from_days(day)
    sec = us // US_PER_S
    frac = us - sec * US_PER_S
    text = "%04d-%02d-%02dT%02d:%02d:%02d" % (y, mo, d, sec // 3600, (sec // 60) % 60, sec % 60)
    if decimals > 0:
        text += "." + ("%06d" % frac)[:decimals]
    return text + "Z"


def is_leap_second_day(day):
    """True when a leap second was inserted at the end of UTC day ``day``."""
    for first_day, _ in LEAP_SECONDS:
        if first_day == day + 1 and first_day != LEAP_SECONDS[0][0]:
            return True
    return False


def tai_minus_utc_s(t_us):
    """TAI - UTC in whole seconds at an instant (IERS Bulletin C table).

    Raises TimeError before 1972.  After ``LEAP_TABLE_VALID_UNTIL`` the last
    value is kept (see the module docstring)."""
    day = t_us // US_PER_DAY
    i = len(LEAP_SECONDS) - 1           # from the latest entry back: today's instants stop at once
    while i >= 0:
        if day >= LEAP_SECONDS[i][0]:
            return LEAP_SECONDS[i][1]
        i -= 1
    raise TimeError("instants before 1972 are outside the leap-second table")


def leap_table_extrapolated(t_us):
    """True when ``t_us`` lies past the date the leap-second table is known good."""
    return t_us // US_PER_DAY >= _EXTRAPOLATED_FROM_DAY


def tt_minus_utc_us(t_us):
    """TT - UTC in microseconds (TT = TAI + 32.184 s)."""
    return tai_minus_utc_s(t_us) * US_PER_S + TT_MINUS_TAI_US


def utc_to_tt(t_us):
    """UTC instant -> TT in microseconds since 1970-01-01T00:00:00 TT (same POSIX count)."""
    return t_us + tt_minus_utc_us(t_us)


def utc_to_gps_s(t_us):
    """GPS - UTC in seconds at an instant (GPS = TAI - 19 s): 18 s since 2017."""
    return tai_minus_utc_s(t_us) - 19


def split_j2000(t_us):
    """(whole days since 2000-01-01T00:00, microseconds into that day) of a POSIX-style count."""
    day = t_us // US_PER_DAY
    return day - J2000_UNIX_DAYS, t_us - day * US_PER_DAY


_TURN_E15 = 1000000000000000      # 1e15: ERA fractions are carried in units of 1e-15 turn
_ERA0_E17 = 77905727326400000     # 0.7790572732640 turn in 1e-17 (IERS Conventions 2010, eq. 5.15)
_ERA_RATE_E17 = 273781191135448   # 0.00273781191135448 turn/day in 1e-17


def era_deg(t_us, dut1_us=0):
    """Earth rotation angle in degrees, [0, 360), at UTC instant ``t_us`` with
    UT1 = UTC + ``dut1_us`` (IERS Conventions 2010, eq. 5.15).

    Built from integers (whole days and microseconds, fractions of a turn in
    units of 1e-15) so it keeps 0.001' even in single-precision float; every
    integer stays below 2**63."""
    days, us = split_j2000(t_us + dut1_us)
    # fraction of a turn from J2000 and whole UT1 days, 1e-17 turn units
    f17 = (_ERA0_E17 + _ERA_RATE_E17 * (days % 36500000)) % 100000000000000000
    # JD_UT1 - 2451545.0 = days - 0.5 + us/86400e6: half a day is half a turn
    # plus half a day of the extra rate; a day fraction is 1.0027... turns.
    day_e15 = us * 10000000 // 864                     # us/86400e6 turns, in 1e-15 units
    total = (f17 // 100 + day_e15 + _TURN_E15 // 2) % _TURN_E15
    extra = ERA_RATE_EXTRA_TURNS_PER_DAY * (us / 86400000000.0 - 0.5)
    turns = total / 1e15 + extra
    a = 360.0 * (turns - int(turns))
    if a < 0.0:
        a += 360.0
    return a
