"""The bounded-input rules (engine/limits.py): the checks themselves, the readers that use them
(session, instrument, track, times), repeated contacts, the command line's refusal/crash split,
the same refusals under MicroPython, and docs/formats.md stating the limits the code enforces.

References: DEVELOPERS.md "Trust rules" (every input checked before arithmetic, one line naming the
field); RFC 8259 section 6 (JSON numbers: NaN and Infinity are not JSON); ISO 8601 / RFC 3339
section 5.6 (a date is written with the ASCII digits 0-9); ITU-R TF.460-6 (|DUT1| <= 0.9 s);
sysexits.h EX_SOFTWARE = 70 (an internal software error) - common practice.
"""
import copy
import json
import os
import re
import sqlite3

import pytest

from engine import limits, timescale
from engine.instrument import InstrumentError, parse_instrument
from engine.session import SessionError, mark_duplicates, parse_session, session_from_dict
from engine.timescale import TimeError, parse_utc

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
DOC = {"format": "limbclock-session/1",
       "observer": {"eye_height_m": 2.4},
       "instrument": {"images": [{"id": "i01", "deviation_deg": 5.3612}, {"id": "i02", "deviation_deg": 7.902}]},
       "track": {"utc": "2029-08-03T06:00:00Z", "lat_deg": 38.52, "lon_deg": -27.11},
       "contacts": [{"utc": "2029-08-03T06:41:12.250Z", "body": "sun", "limb": "lower", "image": "i02"}]}


def doc(**edits):
    d = copy.deepcopy(DOC)
    for path, value in edits.items():
        obj = d
        keys = path.split("__")
        for k in keys[:-1]:
            obj = obj[int(k)] if k.isdigit() else obj[k]
        obj[keys[-1]] = value
    return d


def refused(d_or_text, match):
    text = d_or_text if isinstance(d_or_text, (str, bytes)) else json.dumps(d_or_text)
    with pytest.raises(SessionError) as e:
        parse_session(text)
    assert re.search(match, str(e.value)), str(e.value)
    assert "\n" not in str(e.value)
    return str(e.value)


# ------------------------------------------------------------------------------------ numbers

def test_number_checks_type_and_range_before_float():
    assert limits.number(5, "x", 0.0, 10.0, SessionError) == 5.0
    assert limits.number(0.0, "x", 0.0, 10.0, SessionError) == 0.0       # ends included
    assert limits.number(10, "x", 0.0, 10.0, SessionError) == 10.0
    for bad, msg in ((True, "must be a number, got true"), ("5", 'must be a number, got "5"'),
                     (None, "must be a number, got null"), (float("nan"), "must be a finite number, got nan"),
                     (float("inf"), "must be a finite number, got inf"),
                     (10 ** 400, "an integer beyond 1e18 outside 0.0..10.0"),          # no OverflowError
                     (-10 ** 400, "an integer beyond -1e18 outside 0.0..10.0"),
                     (10.000001, "10.000001 outside 0.0..10.0"), (11, "11.0 outside 0.0..10.0")):
        with pytest.raises(SessionError) as e:
            limits.number(bad, "observer.eye_height_m", 0.0, 10.0, SessionError)
        assert str(e.value) == "observer.eye_height_m: " + msg


@pytest.mark.parametrize("path, value, message", [
    ("observer__eye_height_m", 10 ** 400, r"^observer\.eye_height_m: an integer beyond 1e18 \(the limit"),
    ("observer__eye_height_m", 100.5, r"^observer\.eye_height_m: 100\.5 outside 0\.0\.\.100\.0$"),
    ("observer__temperature_c", -61, r"^observer\.temperature_c: -61\.0 outside -60\.0\.\.60\.0$"),
    ("observer__pressure_hpa", 799.9, r"^observer\.pressure_hpa: 799\.9 outside 800\.0\.\.1100\.0$"),
    ("track__speed_kn", 60.5, r"^track\.speed_kn: 60\.5 outside 0\.0\.\.60\.0$"),
    ("track__speed_kn", False, r"^track\.speed_kn: must be a number, got false$"),
    ("track__course_deg", 360.01, r"^track\.course_deg: 360\.01 outside"),
    ("instrument__images__0__deviation_deg", 90, r"^instrument\.images\[0\]\.deviation_deg: 90\.0 outside 0\.5\.\.89\.0$"),
    ("instrument__images__0__sigma_arcmin", 0, r"^instrument\.images\[0\]\.sigma_arcmin: must be > 0"),
    ("instrument__images__0__coef", [1, 10 ** 30], r"^instrument\.images\[0\]\.coef\[1\]: an integer beyond 1e18"),
    ("instrument__images__0__coef", [1, 17], r"^instrument\.images\[0\]\.coef\[1\]: must be an integer within 0\.\.16"),
    ("instrument__images__0__coef", [1, True], r"^instrument\.images\[0\]\.coef\[1\]: must be an integer"),
    ("instrument__images__0__source", "guessed", r"^instrument\.images\[0\]\.source: must be"),
    ("instrument__plate_angles_deg", [2.0, 30.0], r"^instrument\.plate_angles_deg\[1\]: 30\.0 must lie strictly"),
    ("instrument__plate_angles_deg", [1.0] * 7, r"^instrument\.plate_angles_deg: must be a list of 1\.\.6 angles"),
    ("instrument__images__0__id", "x" * 33, r"^instrument\.images\[0\]\.id: 33 characters; at most 32$"),
    ("instrument__images__0__id", "i\n01", r'^instrument\.images\[0\]\.id: "i\\n01" holds a control character'),
    ("instrument__images__0__id", "i\ud80001", r"^instrument\.images\[0\]\.id: .* or a lone surrogate$"),
    ("contacts__0__sigma_s", 61, r"^contacts\[0\]\.sigma_s: 61\.0 outside 0\.0\.\.60\.0$"),
    ("contacts__0__utc", 1880433672, r"^contacts\[0\]\.utc: must be ISO 8601 UTC text"),
    ("dut1_s", 0.95, r"^session\.dut1_s: 0\.95 outside -0\.9\.\.0\.9$"),
    ("dr_sigma_nm", 10 ** 400, r"^dr_sigma_nm: an integer beyond 1e18"),
    ("dr_sigma_nm", 0.0, r"^session\.dut1_s|^session\.dr_sigma_nm: 0\.0 outside 0\.1\.\.3000\.0$"),
])
def test_each_number_is_refused_naming_field_and_bound(path, value, message):
    refused(doc(**{path: value}), message)


def test_every_range_end_is_accepted():
    """Both ends of each range reach the engine's types without error (a bound that the reader
    accepts but the engine cannot take would be a crash waiting)."""
    ends = {"observer__eye_height_m": "eye_height_m", "observer__temperature_c": "temperature_c",
            "observer__pressure_hpa": "pressure_hpa", "track__lat_deg": "lat_deg", "track__lon_deg": "lon_deg",
            "track__course_deg": "course_deg", "track__speed_kn": "speed_kn",
            "track__velocity_sigma_kn": "velocity_sigma_kn", "observer__yaw_sigma_deg": "yaw_sigma_deg",
            "observer__contact_sigma_arcmin": "contact_sigma_arcmin", "contacts__0__sigma_s": "sigma_s",
            "instrument__images__0__deviation_deg": "deviation_deg", "dut1_s": "dut1_s",
            "dr_sigma_nm": "dr_sigma_nm", "instrument__reaction_delay_s": "reaction_delay_s",
            "instrument__reaction_delay_sigma_s": "reaction_delay_sigma_s"}
    for path, name in ends.items():
        for v in limits.RANGES[name]:
            parse_session(json.dumps(doc(**{path: v})))


# ------------------------------------------------------------------------------- tree, size, text

def test_nesting_up_to_32_levels_is_accepted_and_33_refused():
    def nest(n):          # n lists, one in the other
        v = 1
        for _ in range(n):
            v = [v]
        return v
    d = doc()
    d["note"] = nest(31)                       # the session object is level 1
    parse_session(json.dumps(d))
    d["note"] = nest(32)
    refused(d, r"^note\[0\]\[0\]\[0\]\[0\]\[0\]\.\.\.: nested deeper than 32 levels$")
    refused('{"a": %s1%s}' % ("[" * 100000, "]" * 100000), r"^session: nested deeper than 32 levels$")


@pytest.mark.parametrize("token", ["NaN", "Infinity", "-Infinity", "1e999", "-1e400"])
def test_non_finite_numbers_are_refused_even_in_extra_keys(token):
    text = json.dumps(doc(contacts__0__note="@")).replace('"@"', "[1, %s]" % token)
    refused(text, r"^contacts\[0\]\.note\[1\]: must be a finite number, got -?inf$|nan$")


def test_huge_integers_are_refused_anywhere():
    refused(json.dumps(doc(vessel={"length_ft": "@"})).replace('"@"', "9" * 300),
            r"^vessel\.length_ft: an integer beyond 1e18")
    parse_session(json.dumps(doc(vessel={"mmsi": 10 ** 18})))     # at the limit: kept


def test_keys_with_control_characters_are_shown_escaped():
    msg = refused(json.dumps(doc(**{"x\ny": float("nan")})), r"^\"x\\ny\": must be a finite")
    assert "\n" not in msg


def test_dicts_given_directly_are_checked_too():
    d = doc()
    d["contacts"][0]["note"] = (1, 2)              # not a JSON value
    with pytest.raises(SessionError, match=r"^contacts\[0\]\.note: tuple is not a JSON value$"):
        session_from_dict(d)
    d["contacts"][0]["note"] = {3: "x"}
    with pytest.raises(SessionError, match=r"^contacts\[0\]\.note: key 3 is not a text$"):
        session_from_dict(d)


def test_size_limit_on_bytes_and_text():
    pad = limits.MAX_FILE_BYTES - len(json.dumps(doc(pad="")))
    at = json.dumps(doc(pad="x" * pad))
    assert len(at) == limits.MAX_FILE_BYTES
    parse_session(at.encode())
    refused((at + " ").encode(), r"^session: 4194305 bytes; at most 4194304 bytes \(4 MiB\) per file$")
    refused(at + " ", r"^session: 4194305 characters; at most 4194304 bytes")


def test_text_encodings():
    refused(b"\xff\xfe{}", r"^session: not UTF-8 text$")
    refused(json.dumps(DOC).encode("utf-16"), r"^session: not UTF-8 text$")
    refused(b"\xef\xbb\xbf" + json.dumps(DOC).encode(), r"^session: not valid JSON \(Unexpected UTF-8 BOM")


def test_contact_and_image_counts():
    d = doc()
    d["contacts"] = [dict(DOC["contacts"][0], utc=timescale.format_utc(1880433672250000 + k * 10 ** 6))
                     for k in range(limits.MAX_CONTACTS + 1)]
    refused(d, r"^contacts: 10001 contacts; at most 10000 per session \(split the file\)$")
    d = doc()
    d["instrument"]["images"] = [{"id": "i%03d" % k, "deviation_deg": 1.0 + k * 0.1} for k in range(513)]
    d["contacts"][0]["image"] = None
    refused(d, r"^instrument\.images: 513 images; at most 512$")
    d["instrument"]["images"].pop()
    assert len(parse_session(json.dumps(d)).images) == 512


# ---------------------------------------------------------------------------------------- times

@pytest.mark.parametrize("text, why", [
    ("\u0968\u0966\u0968\u096f-08-03T06:41:12Z", "bad year '\u0968\u0966\u0968\u096f': ASCII digits 0-9 only"),
    ("2029-\u0966\u096e-03T06:41:12Z", "bad month"),
    ("2029-08-03T06:41:1\u0968Z", "bad second"),
    ("\uff12\uff10\uff12\uff19-08-03T06:41:12Z", "bad year"),                  # fullwidth
    ("2029-08-03T06:41:12.\u0968\u0665Z", "bad fraction"),                     # Devanagari and Arabic-Indic
    ("2029-08-03T0\U0001d7d8:41:12Z", "bad hour"),                             # mathematical bold 6
    ("2029-08-03T06:41:12.2_5Z", "bad fraction"),                             # int() takes '_'
    ("\u30002029-08-03T06:41:12Z", "is not ISO 8601"),                         # ideographic space
    ("2029-08-03T06:41:12.25" + "0" * 20 + "Z", "43 characters long; ISO 8601 UTC takes at most 40"),
])
def test_only_ascii_iso_8601_is_a_time(text, why):
    # ISO 8601 and RFC 3339 write dates in the digits 0-9; str.isdigit() and int() accept others
    with pytest.raises(TimeError) as e:
        parse_utc(text)
    assert why in str(e.value)
    assert parse_utc("2029-08-03T06:41:12.25Z") == 1880433672250000     # POSIX seconds from Python's datetime


def test_time_errors_are_short():
    with pytest.raises(TimeError) as e:
        parse_utc("2" * 5000)
    assert len(str(e.value)) < 150
    with pytest.raises(TimeError, match="got int$"):
        parse_utc(10 ** 5000)


# ------------------------------------------------------------------------------- repeated contacts

def _session(times_s, **per):
    d = doc()
    base = 1880433672250000
    d["contacts"] = []
    for k, t in enumerate(times_s):
        c = {"utc": timescale.format_utc(base + int(round(t * 1e6)), 6), "body": "sun", "limb": "lower",
             "image": "i02"}
        for key, values in per.items():
            c[key] = values[k]
        d["contacts"].append(c)
    return parse_session(json.dumps(d))


def test_repeats_within_half_a_second_are_marked_once():
    s = _session([0.0, 0.5, 0.5000011, 1.2])
    assert [c.dup_of for c in s.contacts] == [None, 0, None, None]     # 0.5 s is within; 0.500001 s is not
    assert s.warnings == ["contacts[1] repeats contacts[0] (sun lower i02, 0.500 s apart): used once"]


def test_a_chain_is_measured_from_the_kept_contact():
    s = _session([0.0, 0.4, 0.8, 1.1])
    assert [c.dup_of for c in s.contacts] == [None, 0, None, 2]


def test_what_makes_a_repeat():
    # null images are the same; another limb, body or image is not; void contacts take no part
    s = _session([0.0, 0.1, 0.2, 0.3, 0.4, 0.45], image=[None, None, "i01", "i01", "i02", "i02"],
                 limb=["lower", "lower", "lower", "upper", "lower", "lower"], void=[False] * 4 + [True, False])
    assert [c.dup_of for c in s.contacts] == [None, 0, None, None, None, None]
    assert "image null" in s.warnings[0]


def test_time_order_decides_which_is_kept():
    s = _session([10.3, 10.0])
    assert [c.dup_of for c in s.contacts] == [1, None]
    assert s.warnings == ["contacts[0] repeats contacts[1] (sun lower i02, 0.300 s apart): used once"]


def test_many_repeats_give_twenty_lines_and_a_count():
    s = _session([k * 2.0 + d for k in range(25) for d in (0.0, 0.1)])
    assert sum(c.dup_of is not None for c in s.contacts) == 25
    assert len(s.warnings) == 21 and s.warnings[-1].startswith("5 more repeated contacts")


def test_mark_duplicates_runs_again_cleanly():
    s = _session([0.0, 0.1])
    s.contacts[1].t_us += 10 ** 6
    assert mark_duplicates(s.contacts) == [] and s.contacts[1].dup_of is None


def test_calibration_uses_a_repeat_once():
    from engine import almanac, calibrate
    with open(os.path.join(ROOT, "vectors", "sessions", "both_sides.json")) as f:
        d = json.load(f)
    d["track"] = dict(d["truth"]["track"], known=True)
    alm = almanac.load()
    one = calibrate.calibrate_session(parse_session(json.dumps(d), alm), alm)
    d["contacts"].append(dict(d["contacts"][3]))
    two = calibrate.calibrate_session(parse_session(json.dumps(d), alm), alm)
    assert one["contacts_used"] == two["contacts_used"] == 28
    assert [im["deviation_deg"] for im in one["images"]] == [im["deviation_deg"] for im in two["images"]]


# --------------------------------------------------------------------------- instrument and track files

INSTRUMENT = {"format": "limbclock-instrument/1", "name": "x", "plate_angles_deg": [2.7, 4.05],
              "images": [{"id": "i01", "deviation_deg": 5.4, "coef": [1, 0]}]}


@pytest.mark.parametrize("data, message", [
    (b"\xff{}", r"^instrument file: not UTF-8 text$"),
    ('{"a": %s}' % ("[" * 5000 + "]" * 5000), r"^instrument file: nested deeper than 32 levels$"),
    (json.dumps(dict(INSTRUMENT, images=[{"id": "i01", "deviation_deg": 5.4, "coef": [1, 10 ** 20]}])),
     r"^images\[0\]\.coef\[1\]: an integer beyond 1e18"),
    (json.dumps(dict(INSTRUMENT, images=[{"id": "i01", "deviation_deg": 5.4, "coef": [1, 99]}])),
     r"^images\[0\]\.coef: expected a list of 1\.\.6 integers within 0\.\.16"),
    (json.dumps(dict(INSTRUMENT, reaction_delay_s=10 ** 400)), r"^reaction_delay_s: an integer beyond 1e18"),
    (json.dumps(dict(INSTRUMENT, images=[{"id": "i01", "deviation_deg": True}])),
     r"^images\[0\]\.deviation_deg: must be a number, got true$"),
    (json.dumps(dict(INSTRUMENT, images=[{"id": "i%d" % k, "deviation_deg": 5.0} for k in range(513)])),
     r"^images: 513 images; at most 512$"),
    (json.dumps(dict(INSTRUMENT, images=[{"id": "i" * 40, "deviation_deg": 5.0}])),
     r"^images\[0\]\.id: 40 characters; at most 32$"),
    (json.dumps(INSTRUMENT).replace("5.4", "NaN"), r"^images\[0\]\.deviation_deg: must be a finite number"),
    (" " * (limits.MAX_FILE_BYTES + 1), r"^instrument file: 4194305 characters; at most"),
])
def test_instrument_reader_limits(data, message):
    with pytest.raises(InstrumentError) as e:
        parse_instrument(data)
    assert re.search(message, str(e.value)), str(e.value)
    parse_instrument(json.dumps(INSTRUMENT))


def test_track_reader_limits():
    from device.onboard import OnboardError, parse_track
    for data, message in ((b'{"a": ' + b"[" * 5000 + b"]" * 5000 + b"}", "track file: nested deeper than 32 levels"),
                          (b" " * (limits.MAX_FILE_BYTES + 1), "track file: 4194305 bytes; at most 4194304"),
                          (b'{"utc": "2030-10-20T18:00:00Z", "lat_deg": 1e999, "lon_deg": 2}',
                           "track file: track.lat_deg: must be a finite number, got inf"),
                          (b'{"utc": "\xe0\xa5\xa8030-10-20T18:00:00Z", "lat_deg": 1, "lon_deg": 2}',
                           "ASCII digits 0-9 only")):
        with pytest.raises(OnboardError) as e:
            parse_track(data)
        assert message in str(e.value), str(e.value)


# ------------------------------------------------------------------------ the command line's split

def test_which_exceptions_are_refusals():
    from device.onboard import OnboardError
    from engine.fix import FixError
    from engine.plan import PlanError
    from host.cli import is_refusal
    from host.errors import UserError
    from host.timer_client import NoAnswer

    class Derived(SessionError):
        pass
    for exc in (SessionError("x"), Derived("x"), UserError("x"), FixError("x"), PlanError("x"), OnboardError("x"),
                NoAnswer("x"), FileNotFoundError(2, "No such file"), PermissionError(13, "denied"),
                sqlite3.OperationalError("database is locked"), sqlite3.DatabaseError("file is not a database")):
        assert is_refusal(exc), exc
    for exc in (ValueError("math domain error"), ZeroDivisionError("float division by zero"),
                OverflowError("int too large to convert to float"), RecursionError("maximum recursion depth"),
                KeyError("x"), IndexError("x"), TypeError("x"), AttributeError("x"), MemoryError(),
                UnicodeDecodeError("utf-8", b"\xff", 0, 1, "invalid start byte"),
                sqlite3.ProgrammingError("x"), sqlite3.IntegrityError("x"), RuntimeError("x")):
        assert not is_refusal(exc), exc


def test_one_line_escapes_newlines():
    from host.cli import one_line
    assert one_line(SessionError("a\nb\r\nc")) == "a\\nb\\r\\nc"
    assert one_line(KeyError()) == "KeyError"


def test_numeric_options_are_checked(tmp_path):
    import fuzz_sessions as fz
    from host import cli
    name, seed = fz.SEEDS[0]
    path = fz.drive("plan", json.dumps(seed), str(tmp_path))
    inst = tmp_path / "inst.json"
    inst.write_text(json.dumps(INSTRUMENT))
    base = ["plan", "--from", "2034-07-02T08:00:00Z", "--to", "2034-07-02T12:00:00Z", "--instrument", str(inst)]
    for extra, message in ((["--lat", "nan", "--lon", "1"], "--lat: must be a finite number, got nan"),
                           (["--lat", "10", "--lon", "1", "--course", "inf"], "--course: must be a finite number, got inf"),
                           (["--lat", "10", "--lon", "1", "--speed", "1e400"], "--speed: must be a finite number, got inf"),
                           (["--lat", "10", "--lon", "1", "--pressure", "300"], "--pressure: 300.0 outside 800.0..1100.0"),
                           (["--lat", "10", "--lon", "1", "--eye-height", "-1"], "--eye-height: -1.0 outside 0.0..100.0")):
        rc, out, err = fz.run_cli(base + extra + ["--json"])
        assert rc == 2 and err.strip().endswith(message), err
    rc, out, err = fz.run_cli(["plan", path, "--from", "2034-07-02T08:00:00Z", "--min-deviation", "nan"])
    assert rc == 2 and "--min-deviation: must be a finite number" in err
    d = fz.seed_for("calibrate", seed)
    path = fz.drive("calibrate", json.dumps(d), str(tmp_path))
    for extra, message in ((["--delay", "nan"], "--delay: must be a finite number, got nan"),
                           (["--delay", "3"], "--delay: 3.0 outside -2.0..2.0"),
                           (["--time-sigma", "0"], "--time-sigma: must be > 0 s")):
        rc, out, err = fz.run_cli(["calibrate", path, "--json"] + extra)
        assert rc == 2 and err.strip().endswith(message), err
    assert cli.EX_SOFTWARE == 70 and cli.EX_INPUT == 2


# ------------------------------------------------------------------------------------- MicroPython

def test_the_same_refusals_under_micropython():
    """The readers run unmodified under MicroPython and refuse with the same lines (its json has
    no NaN token and decodes deep nesting without recursing: the tree walk refuses it)."""
    from mpy import run_micropython
    cases = [json.dumps(doc(observer__eye_height_m="@")).replace('"@"', "1" + "0" * 400),
             json.dumps(doc(note="@")).replace('"@"', "[" * 40 + "1" + "]" * 40),
             json.dumps(doc(contacts__0__utc="\u0968\u0966\u0968\u096f-08-03T06:41:12Z"), ensure_ascii=False),
             json.dumps(doc(track__speed_kn=True)), json.dumps(doc(contacts__0__note=1e300)).replace("1e+300", "1e999"),
             json.dumps(doc(instrument__images__0__coef=[1, 17]))]
    want = []
    for text in cases:
        with pytest.raises(SessionError) as e:
            parse_session(text)
        want.append(str(e.value))
    code = "import json\nfrom engine.session import parse_session, SessionError\nout = []\n"
    code += "for t in %r:\n" % (cases,)
    code += "    try:\n        parse_session(t)\n        out.append('accepted')\n"
    code += "    except SessionError as e:\n        out.append(str(e))\n"
    code += "print(json.dumps(out))\n"
    got = json.loads(run_micropython(code).strip().splitlines()[-1])
    # MicroPython's repr() escapes non-ASCII characters: the same line, written '\u0968...'
    assert got[2] == want[2].encode("ascii", "backslashreplace").decode("ascii")
    assert got[:2] + got[3:] == want[:2] + want[3:]


# ------------------------------------------------------------------------- the format docs agree

def _docs():
    with open(os.path.join(ROOT, "docs", "formats.md"), encoding="utf-8") as f:
        return f.read()


def _num(text):
    return float(text.replace("\u2212", "-").replace(" ", ""))


def test_docs_state_every_range_the_readers_enforce():
    rows = re.findall(r"^\| `(\w+)` \| (-?[\d.]+) \.\. (-?[\d.]+)", _docs(), re.M)
    stated = dict((k, (_num(lo), _num(hi))) for k, lo, hi in rows)
    assert stated == dict((k, (float(lo), float(hi))) for k, (lo, hi) in limits.RANGES.items())


def test_docs_state_the_limits():
    text = _docs()
    def spaced(n):
        return "{:,}".format(n).replace(",", " ")
    assert "at most %s bytes (4 MiB)" % spaced(limits.MAX_FILE_BYTES) in text
    assert limits.MAX_FILE_BYTES == 4 * 2 ** 20
    assert "at most %d levels" % limits.MAX_DEPTH in text
    assert "at most %s per session" % spaced(limits.MAX_CONTACTS) in text
    assert "at most %d per instrument" % limits.MAX_IMAGES in text
    assert "1 to %d characters" % limits.MAX_ID_CHARS in text
    assert "at most %d characters" % limits.MAX_TIME_CHARS in text and limits.MAX_TIME_CHARS == timescale.MAX_TIME_CHARS
    assert "1 to %d (7 plates)" % limits.MAX_PLATES in text
    assert limits.MAX_ABS_INT == 10 ** 18 and "\u00b110\u00b9\u2078" in text
    assert limits.DUPLICATE_US == 500000 and "at most 0.5 s" in text
