"""limbclock-session/1 reader: the contract's example (DEVELOPERS.md), every validation error, extras kept, fuzzing."""
import copy
import json

import pytest
from hypothesis import given, settings, strategies as st

from engine import almanac
from engine.session import SessionError, parse_session, session_from_dict

# the example of the contract (DEVELOPERS.md, "Session file limbclock-session/1"), verbatim
EXAMPLE = {"format": "limbclock-session/1",
           "observer": {"eye_height_m": 2.4, "temperature_c": 17.0, "pressure_hpa": 1008.0},
           "instrument": {"images": [{"id": "i01", "deviation_deg": 5.3612}, {"id": "i02", "deviation_deg": 7.9020}]},
           "track": {"utc": "2029-08-03T06:00:00Z", "lat_deg": 38.52, "lon_deg": -27.11,
                     "course_deg": 212.0, "speed_kn": 5.5, "known": False},
           "contacts": [{"utc": "2029-08-03T06:41:12.250Z", "body": "sun", "limb": "lower", "image": "i02"},
                        {"utc": "2029-08-03T06:55:40.918Z", "body": "sun", "limb": "lower", "image": None}]}


def test_design_example_parses():
    s = parse_session(json.dumps(EXAMPLE))
    assert s.observer.eye_height_m == 2.4 and s.observer.pressure_hpa == 1008.0
    assert s.images == [("i01", 5.3612, None), ("i02", 7.902, None)]
    assert s.track.t0_us == 1880431200 * 1000000      # 2029-08-03T06:00:00Z: POSIX seconds from Python datetime
    assert s.track.course_deg == 212.0 and s.track.known is False
    c = s.contacts
    assert [x.index for x in c] == [0, 1] and c[0].image == "i02" and c[1].image is None
    assert c[0].t_us - s.track.t0_us == (41 * 60 + 12) * 1000000 + 250000
    assert s.deviation_of("i02") == 7.902


def test_extras_kept_and_round_trip():
    d = copy.deepcopy(EXAMPLE)
    d["vessel"] = {"name": "our own"}
    d["contacts"][0]["note"] = "good horizon"
    d["instrument"]["images"][0]["source"] = "calibrated"
    d["observer"]["humidity"] = 0.7
    d["track"]["source"] = "log"
    s = parse_session(json.dumps(d).encode())
    assert s.extra == {"vessel": {"name": "our own"}} and s.contacts[0].extra == {"note": "good horizon"}
    out = s.to_dict()
    assert out["vessel"] == {"name": "our own"} and out["contacts"][0]["note"] == "good horizon"
    assert out["instrument"]["images"][0]["source"] == "calibrated"
    assert out["observer"]["humidity"] == 0.7 and out["track"]["source"] == "log"
    again = session_from_dict(out)
    assert again.to_dict() == out


def _mut(path, value, delete=False):
    d = copy.deepcopy(EXAMPLE)
    obj = d
    for k in path[:-1]:
        obj = obj[k]
    if delete:
        del obj[path[-1]]
    else:
        obj[path[-1]] = value
    return d


CASES = [
    (_mut(["format"], "limbclock-session/2"), "format: expected"),
    (_mut(["format"], None, True), "format: missing"),
    (_mut(["observer"], None, True), "observer: missing"),
    (_mut(["observer", "eye_height_m"], None, True), "observer.eye_height_m: missing"),
    (_mut(["observer", "eye_height_m"], "2.4"), "observer.eye_height_m: must be a number"),
    (_mut(["observer", "eye_height_m"], True), "observer.eye_height_m: must be a number"),
    (_mut(["observer", "temperature_c"], float("nan")), "observer.temperature_c: must be a finite number"),
    (_mut(["observer", "pressure_hpa"], float("inf")), "observer.pressure_hpa: must be a finite number"),
    (_mut(["instrument", "images"], []), "instrument.images: must be a non-empty list"),
    (_mut(["instrument", "images", 1, "deviation_deg"], None, True), "instrument.images[1].deviation_deg: missing"),
    (_mut(["instrument", "images", 1, "id"], "i01"), "instrument.images[1].id: 'i01' repeats"),
    (_mut(["instrument", "images", 0, "sigma_arcmin"], -1.0), "instrument.images[0].sigma_arcmin"),
    (_mut(["track", "utc"], "2029-08-03 06:00"), "track.utc:"),
    (_mut(["track", "lat_deg"], 95.0), "track.lat_deg: 95.0 outside"),
    (_mut(["track", "known"], "yes"), "track.known: must be true or false"),
    (_mut(["contacts"], []), "contacts: empty"),
    (_mut(["contacts"], {"utc": 1}), "contacts: must be a list"),
    (_mut(["contacts", 1, "utc"], "2029-08-03T06:55:40.918"), "contacts[1].utc:"),
    (_mut(["contacts", 1, "utc"], "2029-02-30T06:55:40Z"), "contacts[1].utc:"),
    (_mut(["contacts", 0, "body"], "venus"), "contacts[0].body: must be one of sun, moon"),
    (_mut(["contacts", 0, "limb"], "centre"), "contacts[0].limb: must be one of lower, upper"),
    (_mut(["contacts", 0, "image"], "i09"), "contacts[0].image: 'i09' is not in the instrument"),
    (_mut(["contacts", 0, "image"], 2), "contacts[0].image: must be an image id"),
    (_mut(["contacts", 0, "sigma_s"], -0.5), "contacts[0].sigma_s"),
    (_mut(["contacts", 0], "x"), "contacts[0]: must be an object"),
    (_mut(["dut1_s"], 1.5), "session.dut1_s: 1.5 outside"),
    (_mut(["observer", "yaw_sigma_deg"], 30.0), "observer.yaw_sigma_deg: 30.0 outside"),
    (_mut(["track", "velocity_sigma_kn"], "fast"), "track.velocity_sigma_kn: must be a number"),
    (_mut(["instrument", "reaction_delay_s"], 5.0), "instrument.reaction_delay_s: 5.0 outside"),
    (_mut(["instrument", "reaction_delay_sigma_s"], float("nan")), "instrument.reaction_delay_sigma_s: must be a finite"),
]


@pytest.mark.parametrize("doc, message", CASES)
def test_each_problem_names_its_field(doc, message):
    with pytest.raises(SessionError) as e:
        parse_session(json.dumps(doc))
    assert message in str(e.value)


def test_not_json_and_not_object():
    for text, msg in (("{", "not valid JSON"), ("[1, 2]", "must be a JSON object"), (b"\xff\xfe", "not UTF-8"),
                      (42, "expected JSON text")):
        with pytest.raises(SessionError, match=msg):
            parse_session(text)


def test_outside_almanac_span():
    alm = almanac.load()
    d = _mut(["contacts", 1, "utc"], "2099-01-01T00:00:00Z")
    with pytest.raises(SessionError, match=r"contacts\[1\]\.utc: .* outside the almanac's span"):
        parse_session(json.dumps(d), alm)
    parse_session(json.dumps(EXAMPLE), alm)   # inside: fine


json_values = st.recursive(
    st.none() | st.booleans() | st.integers(-10**6, 10**6) | st.floats(allow_nan=True, allow_infinity=True)
    | st.text(max_size=12),
    lambda inner: st.lists(inner, max_size=3) | st.dictionaries(st.text(max_size=8), inner, max_size=3),
    max_leaves=8)


def _paths(obj, prefix=()):
    yield prefix
    if isinstance(obj, dict):
        for k, v in obj.items():
            yield from _paths(v, prefix + (k,))
    elif isinstance(obj, list):
        for i, v in enumerate(obj):
            yield from _paths(v, prefix + (i,))


ALL_PATHS = [p for p in _paths(EXAMPLE) if p]


@settings(max_examples=300, deadline=None)
@given(st.sampled_from(ALL_PATHS), json_values, st.booleans())
def test_fuzz_only_session_errors(path, value, delete):
    d = _mut(path, value, delete)
    text = json.dumps(d)                 # NaN and Infinity become the non-JSON tokens the reader must refuse
    try:
        s = parse_session(text)
    except SessionError as e:
        assert str(e) and ":" in str(e)
        return
    assert s.contacts


@settings(max_examples=200, deadline=None)
@given(st.binary(max_size=60) | st.text(max_size=60))
def test_fuzz_garbage_text(raw):
    with pytest.raises(SessionError):
        parse_session(raw)


def test_planning_accepts_an_empty_contact_list():
    # planning needs only the track and the instrument (DEVELOPERS.md: plan ignores the session's contacts)
    data = copy.deepcopy(EXAMPLE)
    data["contacts"] = []
    s = parse_session(json.dumps(data), need_contacts=False)
    assert s.contacts == [] and len(s.images) == len(data["instrument"]["images"])
    with pytest.raises(SessionError, match="contacts: empty"):
        parse_session(json.dumps(data))
