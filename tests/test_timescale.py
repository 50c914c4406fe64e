"""Time scales against published facts (IERS Bulletin C, IERS Conventions 2010, ERFA)."""
import erfa
import numpy as np
import pytest
from hypothesis import given, strategies as st

from engine import timescale as ts
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


def test_leap_table_end_is_dated():
    assert ts.leap_table_extrapolated(ts.parse_utc("2030-01-01T00:00:00Z"))
    assert not ts.leap_table_extrapolated(ts.parse_utc("2026-12-02T00:00:00Z"))


def test_leap_table_matches_erfa():
    # ERFA's dat() carries the IERS table (pyerfa)
    for y in range(1972, 2027):
        for m in (1, 7):
            t = ts.parse_utc("%04d-%02d-01T00:00:00Z" % (y, m))
            assert ts.tai_minus_utc_s(t) == erfa.dat(y, m, 1, 0.0), (y, m)


@given(st.integers(min_value=ts.parse_utc("1972-01-01T00:00:00Z"), max_value=ts.parse_utc("2099-12-31T23:59:59Z")))
def test_format_parse_round_trip_us(t):
    assert ts.parse_utc(ts.format_utc(t, 6)) == t


@given(st.integers(min_value=ts.parse_utc("2024-01-01T00:00:00Z"), max_value=ts.parse_utc("2052-01-01T00:00:00Z")),
       st.integers(min_value=-900000, max_value=900000))
def test_era_against_erfa(t, dut1_us):
    # Earth rotation angle vs ERFA era00 (IERS Conventions 2010 eq. 5.15): within 1e-6 arcmin
    d2 = (t + dut1_us) / 86400e6
    ref = np.degrees(erfa.era00(2440587.5, d2))
    diff = (ts.era_deg(t, dut1_us) - ref + 180.0) % 360.0 - 180.0
    # the reference itself splits the date in doubles: 2e-5" resolution at 1e4 days
    assert abs(diff) * 60 < 1e-5
