"""Time scales against published facts (IERS Bulletin C, IERS Conventions 2010, ERFA)."""
import erfa
import numpy as np
import pytest
from hypothesis import given, settings, strategies as st

from engine import timescale as ts
from engine.constants import US_PER_DAY
from engine.timescale import TimeError


def test_round_trip_text():
    for text in ("2029-08-03T06:41:12.250Z", "2025-01-01T00:00:00.000Z", "2050-12-31T23:59:59.999Z"):
        assert ts.format_utc(ts.parse_utc(text)) == text


def test_known_instant():
    # 2000-01-01T12:00:00Z is 946728000 s after the POSIX epoch (common practice: `date -d @946728000`)
    assert ts.parse_utc("2000-01-01T12:00:00Z") == 946728000 * 1000000


@pytest.mark.parametrize("text", ["2029-08-03T06:41:12.250", "2029-13-03T06:41:12Z", "2029-02-29T00:00:00Z",
                                  "2029-08-03T24:00:00Z", "2029-08-03T06:61:00Z", "yesterday", "",
                                  "1969-12-31T23:59:59Z", "2100-01-01T00:00:00Z", "2029-08-03T06:41:1xZ",
                                  "2029-08-03T23:59:60Z"])
def test_malformed_or_out_of_range(text):
    with pytest.raises(TimeError):
        ts.parse_utc(text)


def test_non_string():
    with pytest.raises(TimeError):
        ts.parse_utc(12345)


def test_leap_second_boundaries():
    # IERS Bulletin C 52: a leap second at the end of 2016-12-31; TAI-UTC 36 s before, 37 s after.
    before = ts.parse_utc("2016-12-31T23:59:59.999Z")
    leap = ts.parse_utc("2016-12-31T23:59:60.500Z")
    after = ts.parse_utc("2017-01-01T00:00:00Z")
    assert ts.tai_minus_utc_s(before) == 36
    assert leap == after  # the leap second folds onto the next day's start (POSIX)
    assert ts.tai_minus_utc_s(after) == 37
    # TT - UTC = 37 + 32.184 = 69.184 s after 2017 (IAU 1991 A4 / IERS)
    assert ts.tt_minus_utc_us(after) == 69184000
    assert ts.tt_minus_utc_us(ts.parse_utc("2040-06-01T00:00:00Z")) == 69184000
    # GPS - UTC = 18 s (IS-GPS-200, GPS = TAI - 19 s)
    assert ts.utc_to_gps_s(after) == 18


FIRST_DAY = ts.days_from_civil(1972, 1, 1)
VALID_UNTIL_DAY = ts.days_from_civil(2027, 6, 30)      # the last day the table is known good


def test_valid_until_is_the_day_before_the_next_possible_leap_second():
    # IERS Bulletin C 72 (July 2026) announced no leap second at the end of December 2026; the
    # next possible one is at the end of 2027-06-30 (Bulletin C 73, January 2027, would announce it).
    assert ts.LEAP_TABLE_VALID_UNTIL == "2027-06-30T23:59:59Z"
    last_good = ts.parse_utc("2027-07-01T00:00:00Z") - 1
    assert ts.format_utc(last_good, 6) == "2027-06-30T23:59:59.999999Z"
    assert last_good // US_PER_DAY == VALID_UNTIL_DAY == 20999
    assert not ts.leap_table_extrapolated(ts.parse_utc("2027-06-30T00:00:00Z"))
    assert not ts.leap_table_extrapolated(last_good)
    assert ts.leap_table_extrapolated(last_good + 1)
    assert ts.leap_table_extrapolated(ts.parse_utc("2030-01-01T00:00:00Z"))


def _erfa_dat(days, fd):
    """TAI - UTC from ERFA's eraDat (pyerfa) for UTC days since 1970 at day fraction ``fd``."""
    ymd = np.array([ts.civil_from_days(int(d)) for d in days])
    return erfa.dat(ymd[:, 0], ymd[:, 1], ymd[:, 2], fd)


def test_leap_table_day_by_day_against_erfa():
    # Every UTC day from 1972-01-01 to the last day the table is known good, at 00:00:00 and at
    # 23:59:59.999999: TAI - UTC equals ERFA's eraDat (pyerfa; SOFA/ERFA's table of IERS
    # Bulletin C).  ERFA's year of release + 5 is its own "dubious year" limit (2029 for
    # pyerfa 2.0.1): the whole range lies before it, so no warning (warnings are errors here).
    days = np.arange(FIRST_DAY, VALID_UNTIL_DAY + 1)
    assert days.size == 20270                      # 1972-01-01 .. 2027-06-30 inclusive
    at_start = _erfa_dat(days, 0.0)
    at_end = _erfa_dat(days, 1.0 - 1e-11)          # eraDat takes the value of the day: fd < 1
    ours_start = np.array([ts.tai_minus_utc_s(int(d) * US_PER_DAY) for d in days])
    ours_end = np.array([ts.tai_minus_utc_s((int(d) + 1) * US_PER_DAY - 1) for d in days])
    assert np.array_equal(ours_start, at_start) and np.array_equal(ours_end, at_end)
    assert np.array_equal(at_start, at_end)         # eraDat too changes only between days
    # a leap second is inserted at the end of exactly the days before a step of TAI - UTC
    step = np.diff(at_start) == 1
    leap_days = days[:-1][step]
    assert len(leap_days) == 27 and set(np.diff(at_start)) == {0.0, 1.0}
    for d, want in zip(days[:-1], step):
        assert ts.is_leap_second_day(int(d)) == bool(want)
    # and TT - UTC = TAI - UTC + 32.184 s (IAU 1991 Resolution A4) on every day
    assert all(ts.tt_minus_utc_us(int(d) * US_PER_DAY) == int(v) * 1000000 + 32184000
               for d, v in zip(days[::97], at_start[::97]))
    with pytest.raises(TimeError):
        ts.tai_minus_utc_s(FIRST_DAY * US_PER_DAY - 1)


def test_leap_second_fold_on_every_leap_day():
    # 23:59:60.xxx exists only at the end of a leap-second day (ITU-R TF.460-6: a positive leap
    # second is inserted as 23:59:60 before 00:00:00); POSIX folds it onto the next day's start.
    days = np.arange(FIRST_DAY, VALID_UNTIL_DAY + 1)
    tai = _erfa_dat(days, 0.0)
    leap_days = [int(d) for d, s in zip(days[:-1], np.diff(tai)) if s == 1]
    for d in leap_days:
        y, m, dd = ts.civil_from_days(d)
        text = "%04d-%02d-%02dT23:59:60.250Z" % (y, m, dd)
        assert ts.parse_utc(text) == (d + 1) * US_PER_DAY
        # just before the leap second: the old offset; the folded instant: the new one
        before = ts.parse_utc("%04d-%02d-%02dT23:59:59.999999Z" % (y, m, dd))
        assert ts.tai_minus_utc_s(before) + 1 == ts.tai_minus_utc_s(ts.parse_utc(text))
    # and a day without one refuses second 60 (its neighbours, and 2026-12-31, which Bulletin C 72 left alone)
    for d in [leap_days[5] - 1, leap_days[5] + 1, ts.days_from_civil(2026, 12, 31), ts.days_from_civil(2027, 6, 30)]:
        y, m, dd = ts.civil_from_days(d)
        with pytest.raises(TimeError):
            ts.parse_utc("%04d-%02d-%02dT23:59:60Z" % (y, m, dd))


def _iers_leap_second_file():
    """IERS ``Leap_Second.dat`` as installed by the ``astropy-iers-data`` package (a copy of the
    IERS Earth Orientation Centre's file, no download): (the file's "expires on" date as
    (y, m, d), [(y, m, d, TAI - UTC)], its "Updated through" line)."""
    import astropy_iers_data
    rows, expires, through = [], None, ""
    month = {n: i + 1 for i, n in enumerate(("January", "February", "March", "April", "May", "June", "July",
                                             "August", "September", "October", "November", "December"))}
    with open(astropy_iers_data.IERS_LEAP_SECOND_FILE) as f:
        for line in f:
            if "File expires on" in line:
                d, mname, y = line.split("on", 1)[1].split()
                expires = (int(y), month[mname], int(d))
            elif "Updated through" in line:
                through = line.strip("# \n")
            elif line.strip() and not line.startswith("#"):
                _mjd, d, m, y, v = line.split()
                rows.append((int(y), int(m), int(d), int(v)))
    return expires, rows, through


def test_leap_table_against_the_iers_file_and_erfa_validity():
    # Third source: the IERS Earth Orientation Centre's Leap_Second.dat (copy shipped by
    # astropy-iers-data).  Every entry up to our valid-until day is in our table, and our table has
    # no other entry; our valid-until day is not later than the end of the half-year in which
    # the IERS file expires (leap seconds go in at the end of June or December first: ITU-R TF.460-6).
    expires, rows, through = _iers_leap_second_file()
    assert rows and expires
    theirs = [(ts.days_from_civil(y, m, d), v) for y, m, d, v in rows
              if ts.days_from_civil(y, m, d) <= VALID_UNTIL_DAY]
    assert theirs == list(ts.LEAP_SECONDS), "refresh engine/timescale.py LEAP_SECONDS (%s)" % through
    half_year_end = ts.days_from_civil(expires[0], 6, 30) if expires[1] <= 6 else \
        ts.days_from_civil(expires[0], 12, 31)
    # The IERS file expires a few days before the end of its half-year (28 June 2027 for Bulletin
    # C 72); the table may be trusted until a leap second could next be inserted, at the end of that
    # half-year, and not beyond.  A NEWER IERS file (a later expiry, as a fresh install of
    # astropy-iers-data brings) keeps this true: our valid-until day is then merely conservative,
    # and instants past it are flagged as extrapolated.  Only a leap second the table lacks fails.
    assert VALID_UNTIL_DAY <= half_year_end, \
        "IERS file %s, expires %r: our table claims more than it vouches for" % (through, expires)
    later = [r for r in rows if ts.days_from_civil(r[0], r[1], r[2]) > VALID_UNTIL_DAY]
    assert all(r[3] == ts.LEAP_SECONDS[-1][1] for r in later), \
        "a leap second after our valid-until day: refresh engine/timescale.py LEAP_SECONDS (%s)" % through
    # ERFA's own statements of validity: pyerfa's leap_seconds.expires is the expiry of the table
    # it was last given (astropy hands it this IERS file), or, for its built-in table, 180 days
    # past the last leap second (2017-06-30); eraDat flags years from its release year + 5 as
    # "dubious" (2029 for ERFA 2.0.1, later for newer releases).  Our span lies inside ERFA's
    # trusted range; ERFA's built-in table (last leap second 2017-01-01) agrees with ours day by
    # day (test above) to our valid-until day.
    erfa_expires = erfa.leap_seconds.expires.date().toordinal() - 719163      # days since 1970
    assert erfa_expires >= ts.days_from_civil(2017, 6, 30)
    y, m, d = ts.civil_from_days(VALID_UNTIL_DAY)
    import warnings
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        erfa.dat(y, m, d, 0.0)                       # not dubious: our span is inside ERFA's


@settings(max_examples=200, deadline=None)
@given(st.integers(min_value=ts.parse_utc("1972-01-01T00:00:00Z"), max_value=ts.parse_utc("2099-12-31T23:59:59Z")))
def test_format_parse_round_trip_us(t):
    assert ts.parse_utc(ts.format_utc(t, 6)) == t


@settings(max_examples=200, deadline=None)
@given(st.integers(min_value=ts.parse_utc("2024-01-01T00:00:00Z"), max_value=ts.parse_utc("2052-01-01T00:00:00Z")),
       st.integers(min_value=-900000, max_value=900000))
def test_era_against_erfa(t, dut1_us):
    # Earth rotation angle vs ERFA era00 (IERS Conventions 2010 eq. 5.15): within 1e-6 arcmin
    d2 = (t + dut1_us) / 86400e6
    ref = np.degrees(erfa.era00(2440587.5, d2))
    diff = (ts.era_deg(t, dut1_us) - ref + 180.0) % 360.0 - 180.0
    # the reference itself splits the date in doubles: 2e-5" resolution at 1e4 days
    assert abs(diff) * 60 < 1e-5
