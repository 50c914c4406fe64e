"""NMEA 0183 time sentences (RMC, ZDA) as the timer reads them.

Sentences are built here from the field layouts of the NMEA 0183 standard (National Marine
Electronics Association, NMEA 0183 v4.11, 2018) as reproduced in receiver manuals (e.g. u-blox,
"u-blox 8 / M8 Receiver description", UBX-13003221, NMEA RMC and ZDA) [from memory; the
standard itself not consulted] with a checksum helper written independently of
``device.nmea``; expected instants come from Python's ``datetime``.
"""
import datetime

from hypothesis import given, settings, strategies as st

from device.nmea import Parser, checksum

EPOCH = datetime.datetime(1970, 1, 1, tzinfo=datetime.timezone.utc)


def xor_hex(body):
    """NMEA checksum: XOR of the characters between '$' and '*', 2 hex digits (NMEA 0183, as above)."""
    c = 0
    for ch in body:
        c ^= ord(ch)
    return "%02X" % c


def sentence(body, cs=None):
    return ("$%s*%s\r\n" % (body, xor_hex(body) if cs is None else cs)).encode()


def us(dt):
    d = dt - EPOCH
    return (d.days * 86400 + d.seconds) * 1000000 + d.microseconds


def test_published_example_checksums():
    # Example sentences widely reproduced in receiver documentation [from memory]; their
    # printed checksums 6A, 60, 47 must match the parser's XOR.
    assert checksum(b"GPRMC,123519,A,4807.038,N,01131.000,E,022.4,084.4,230394,003.1,W") == 0x6A
    assert checksum(b"GPZDA,201530.00,04,07,2002,00,00") == 0x60
    assert checksum(b"GPGGA,123519,4807.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,") == 0x47
    p = Parser()
    p.feed(b"$GPGGA,123519,4807.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,*47\r\n")
    assert p.other == 1 and p.bad_checksum == 0
    # a correct 2002 ZDA is well formed but earlier than any date this firmware can see
    assert p.feed(b"$GPZDA,201530.00,04,07,2002,00,00*60\r\n") == [] and p.malformed == 1 and p.bad_checksum == 0


def test_rmc_and_zda_labels_any_talker():
    t = datetime.datetime(2029, 8, 3, 6, 41, 12, tzinfo=datetime.timezone.utc)
    p = Parser()
    data = b""
    for talker in ("GP", "GN", "GL", "GA", "BD"):
        data += sentence("%sRMC,064112.00,A,3831.200,N,02706.600,W,5.5,212.0,030829,,,A" % talker)
        data += sentence("%sZDA,064112.00,03,08,2029,00,00" % talker)
    labels = p.feed(data)
    assert [lab.kind for lab in labels] == ["RMC", "ZDA"] * 5
    assert all(lab.utc_us == us(t) and lab.whole for lab in labels)
    assert p.good == 10


def test_rmc_without_mode_field_and_fraction():
    # NMEA 2.2 RMC (no mode field, 12 fields) and a fractional time
    p = Parser()
    labels = p.feed(sentence("GPRMC,235959.50,A,3831.2,N,02706.6,W,0.0,0.0,311229,,"))
    t = datetime.datetime(2029, 12, 31, 23, 59, 59, 500000, tzinfo=datetime.timezone.utc)
    assert len(labels) == 1 and labels[0].utc_us == us(t) and not labels[0].whole


def test_broken_checksum_void_blank_and_garbage_are_counted_not_trusted():
    p = Parser()
    good = "GNRMC,064112.00,A,3831.200,N,02706.600,W,5.5,212.0,030829,,,A"
    wrong = "%02X" % (int(xor_hex(good), 16) ^ 0x01)
    data = sentence(good, wrong)                                   # one bit off
    data += b"$" + good.encode() + b"\r\n"                         # no checksum at all
    data += sentence("GNRMC,064113.00,V,,,,,,,030829,,,N")        # void fix
    data += sentence("GNZDA,,,,,,")                                # before lock: blank
    data += sentence("GNZDA,064113.00,31,02,2029,00,00")           # 31 February
    data += sentence("GNZDA,066113.00,03,08,2029,00,00")           # minute 61
    data += b"\x00\xffnoise$GNRM"                                  # torn sentence, then a good one
    data += sentence("GNZDA,064114.00,03,08,2029,00,00")
    labels = p.feed(data)
    assert len(labels) == 1
    assert labels[0].utc_us == us(datetime.datetime(2029, 8, 3, 6, 41, 14, tzinfo=datetime.timezone.utc))
    assert p.bad_checksum == 2 and p.void == 1 and p.blank == 1 and p.malformed == 3


def test_leap_second_label_is_skipped():
    p = Parser()
    assert p.feed(sentence("GPZDA,235960.00,31,12,2016,00,00")) == [] and p.leap + p.malformed == 1


def test_week_rollover_is_repaired():
    # IS-GPS-200: the 10-bit week number wraps every 1024 weeks; an old receiver reports
    # the date 1024 weeks early [from memory].
    t = datetime.datetime(2029, 8, 3, 6, 41, 12, tzinfo=datetime.timezone.utc)
    early = t - datetime.timedelta(weeks=1024)
    p = Parser()
    labels = p.feed(sentence("GPZDA,%s.00,%02d,%02d,%04d,00,00" % (early.strftime("%H%M%S"), early.day,
                                                                  early.month, early.year)))
    assert len(labels) == 1 and labels[0].utc_us == us(t) and p.rollover == 1


@settings(max_examples=60, deadline=None)
@given(st.datetimes(min_value=datetime.datetime(2026, 1, 1), max_value=datetime.datetime(2099, 12, 31, 23, 59, 59)),
       st.binary(max_size=12), st.sampled_from(["GP", "GN", "GL"]))
def test_any_time_round_trips_and_one_flipped_bit_is_rejected(dt, junk, talker):
    dt = dt.replace(microsecond=0, tzinfo=datetime.timezone.utc)
    body = "%sZDA,%s.00,%02d,%02d,%04d,00,00" % (talker, dt.strftime("%H%M%S"), dt.day, dt.month, dt.year)
    p = Parser()
    labels = p.feed(junk.replace(b"$", b"#") + b"\r\n" + sentence(body))
    assert len(labels) == 1 and labels[0].utc_us == us(dt)
    flipped = bytearray(sentence(body))
    flipped[8] ^= 0x04                       # a digit of the time field changes, checksum does not
    assert p.feed(bytes(flipped)) == [] and p.bad_checksum == 1
