"""Degree trigonometry and degree-minute formatting (common practice)."""
import math

from hypothesis import given, settings, strategies as st

from engine import angles as a


def test_exact_quadrants():
    assert a.sind(180.0) == 0.0 and a.cosd(90.0) == 0.0 and a.sind(90.0) == 1.0 and a.cosd(-180.0) == -1.0


@settings(max_examples=200, deadline=None)
@given(st.floats(min_value=-1e4, max_value=1e4))
def test_against_math(x):
    assert abs(a.sind(x) - math.sin(math.radians(x))) < 1e-12
    assert abs(a.cosd(x) - math.cos(math.radians(x))) < 1e-12
    assert 0.0 <= a.norm360(x) < 360.0
    assert -180.0 <= a.norm180(x) < 180.0


def test_dm_rounding_never_shows_60():
    assert a.fmt_lat(38.99999) == "39°00.0'N"
    assert a.fmt_lon(-27.1) == "027°06.0'W"
    assert a.fmt_lat(-0.5) == "00°30.0'S"
