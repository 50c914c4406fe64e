"""Fuzzing the four session commands (``fix``, ``plan``, ``identify``, ``calibrate``) through the
command line's entry point, in-process: the harness of ``tests/test_fuzz_cli.py`` (a bounded run
in ``make test``) and of ``bench/bench_input.py`` (a longer run in ``make bench``).

The contract checked (DEVELOPERS.md "Trust rules": every input checked before arithmetic, errors at the edges as one line): every input either
gives exit 0 with output that is valid JSON holding only finite numbers, or exit 2 with exactly
ONE line on stderr (``limbclock CMD: error: ...``) and nothing on stdout.  Anything else - exit 70
(``host.cli`` met an exception that is not one of the project's refusals), an exception escaping
``main``, a second line - is a defect; ``check`` then re-runs the input with ``--debug`` so the
traceback of the crash is what the failure shows.

The seed corpus is ``vectors/sessions/*.json``; each command gets its own form of a seed
(``identify``: every third contact unlabelled; ``calibrate``: the true track, ``known``), cut to a
few contacts so that a run takes a fraction of a second.  Mutations: delete a key, change a type,
extreme and boundary numbers, huge integers, NaN/Infinity tokens, non-ASCII digits in times, deep
nesting, repeated contacts, long strings, empty lists, damaged text.
"""
import contextlib
import copy
import glob
import io
import json
import os

from hypothesis import strategies as st

from engine import limits
from host import cli

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
COMMANDS = ("fix", "plan", "identify", "calibrate")
MAX_SEED_CONTACTS = 12


def _load_seeds():
    seeds = []
    for path in sorted(glob.glob(os.path.join(ROOT, "vectors", "sessions", "*.json"))):
        with open(path) as f:
            seeds.append((os.path.basename(path)[:-5], json.load(f)))
    return seeds


SEEDS = _load_seeds()


def seed_for(command, doc):
    """The form of a seed session a command is driven with."""
    d = copy.deepcopy(doc)
    if command == "identify":
        for k, c in enumerate(d["contacts"]):
            if k % 3 == 1:
                c["image"] = None
    elif command == "calibrate":
        d["track"] = dict(d["truth"]["track"], known=True)
    return d


def argv_for(command, path, doc, json_out=True):
    """The command line for a session file; ``plan``'s window is the seed's first 12 hours.
    ``json_out=False``: the human output (tables and the cautions) instead of ``--json``."""
    tail = ["--json"] if json_out else []
    if command == "plan":
        t0 = doc["track"]["utc"]
        from engine import timescale
        t1 = timescale.format_utc(timescale.parse_utc(t0) + 12 * 3600 * 1000000, 0)
        return ["plan", path, "--from", t0, "--to", t1] + tail
    return [command, path] + tail


# ----------------------------------------------------------------------------------------------- running

def run_cli(argv):
    """``host.cli.main(argv)`` in-process -> (exit code, stdout, stderr).  Only SystemExit is
    turned into an exit code; any other exception escapes to the caller (a crash)."""
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        try:
            rc = cli.main(argv)
        except SystemExit as e:
            rc = e.code if isinstance(e.code, int) else 1
    return rc, out.getvalue(), err.getvalue()


def _no_constant(token):
    raise AssertionError("output holds %s: not finite" % token)


def finite_json(text):
    """Parse output JSON, refusing NaN/Infinity tokens and any float that overflows to inf."""
    value = json.loads(text, parse_constant=_no_constant)
    stack = [value]
    while stack:
        v = stack.pop()
        if isinstance(v, dict):
            stack.extend(v.values())
        elif isinstance(v, list):
            stack.extend(v)
        elif isinstance(v, float):
            assert v == v and v - v == 0.0, "output holds a non-finite number %r" % v
    return value


def check(command, argv, rc, out, err):
    """Assert the contract for one run; on a crash re-run with --debug so the traceback shows.
    Returns "ok" or the refusal line.  Human output (no ``--json``) must end with the cautions."""
    if rc == 0:
        if "--json" in argv:
            finite_json(out)
        else:
            from host.cautions import CAUTION_TEXT
            assert out.rstrip().endswith(CAUTION_TEXT), out[-500:]
        return "ok"
    if rc == 2:
        lines = err.splitlines()
        assert len(lines) == 1, "exit 2 with %d lines on stderr:\n%s" % (len(lines), err)
        assert lines[0].startswith("limbclock %s: error: " % command), lines[0]
        assert "Traceback" not in err
        assert out == "", "a refusal printed output too:\n%s" % out[:500]
        return lines[0]
    # a crash: show the real traceback (the exception escapes main with --debug)
    run_cli(["--debug"] + list(argv))
    raise AssertionError("exit %r (not 0 or 2); stderr:\n%s" % (rc, err))


def drive(command, text, directory):
    """Write ``text`` (str or bytes) as a session file and run ``command`` on it; returns the
    outcome of ``check``."""
    path = os.path.join(directory, "session.json")
    with open(path, "wb") as f:
        f.write(text if isinstance(text, bytes) else text.encode("utf-8", "surrogatepass"))
    return path


def run_one(command, doc_for_argv, text, directory, json_out=True):
    path = drive(command, text, directory)
    argv = argv_for(command, path, doc_for_argv, json_out)
    rc, out, err = run_cli(argv)
    return check(command, argv, rc, out, err)


def refusal_kind(line):
    """A short name for the kind of a refusal line (for the bench's tally)."""
    msg = line.split(": error: ", 1)[-1]
    for words, kind in (("not valid JSON", "not JSON"), ("not UTF-8", "not UTF-8"),
                        ("nested deeper", "nesting"), ("bytes", "file size"),
                        ("contacts; at most", "contact count"), ("images; at most", "image count"),
                        ("must be a finite number", "non-finite number"), ("limit for any integer", "huge integer"),
                        ("integer beyond", "huge integer"), ("ASCII digits", "bad digits"),
                        (" outside ", "out of range"), ("must be a number", "not a number"),
                        ("missing", "missing field"), ("must be one of", "bad choice"), ("empty (", "empty list"),
                        ("is not ISO 8601", "bad time"), ("must be UTC", "bad time"),
                        ("characters", "text too long"), ("time ", "bad time"), ("format", "format tag"),
                        ("must be", "wrong type"), ("not in the instrument", "unknown image")):
        if words in msg:
            return kind
    return "engine: " + msg.split(":")[0][:40]


# ------------------------------------------------------------------------------------------- mutations

RAW = {   # JSON text that json.dumps cannot write or that must reach the reader verbatim
    "nan": "NaN", "inf": "Infinity", "-inf": "-Infinity", "1e400": "1e400", "-1e400": "-1e400",
    "int400": "1" + "0" * 400, "-int400": "-1" + "0" * 400, "int19": "10000000000000000000",
    "deep5000": "[" * 5000 + "]" * 5000, "deep40": '{"a": ' * 40 + "1" + "}" * 40,
    "deep33": "[" * 33 + "]" * 33, "tiny": "5e-324",
}
_MARK = "@@raw:%s@@"

_DEVANAGARI = "\u0966\u0967\u0968\u0969\u096a\u096b\u096c\u096d\u096e\u096f"
_FULLWIDTH = "\uff10\uff11\uff12\uff13\uff14\uff15\uff16\uff17\uff18\uff19"


def _digits_to(s, table):
    return "".join(table[ord(ch) - 48] if "0" <= ch <= "9" else ch for ch in s)


def _paths(obj, prefix=()):
    yield prefix
    if isinstance(obj, dict):
        for k in obj:
            yield from _paths(obj[k], prefix + (k,))
    elif isinstance(obj, list):
        for i in range(len(obj)):
            yield from _paths(obj[i], prefix + (i,))


def _get(obj, path):
    for k in path:
        obj = obj[k]
    return obj


json_leaf = (st.none() | st.booleans() | st.integers(-10 ** 6, 10 ** 6) | st.floats(allow_nan=False, allow_infinity=False)
             | st.text(max_size=12))
json_value = st.recursive(json_leaf, lambda inner: st.lists(inner, max_size=3)
                          | st.dictionaries(st.text(max_size=8), inner, max_size=3), max_leaves=6)

_BOUNDS = sorted(set(v for lo, hi in limits.RANGES.values() for v in (lo, hi)))
special_number = st.sampled_from(
    [0, -0.0, 1, -1, 0.5, 1e-9, 1e308, -1e308, 2 ** 53 + 1, 10 ** 18, -10 ** 18, 10 ** 15, 89.0, -89.0, 360.0,
     180.0, 90.0, 100.0] + _BOUNDS + [b + d for b in _BOUNDS for d in (-1e-9, 1e-9)])
raw_token = st.sampled_from(sorted(RAW))


@st.composite
def time_text(draw, base):
    """Times near ``base`` (a valid ISO text) and broken ones."""
    kind = draw(st.integers(0, 9))
    if kind == 0:
        return _digits_to(base, _DEVANAGARI)
    if kind == 1:
        return _digits_to(base, _FULLWIDTH)
    if kind == 2:
        k = draw(st.integers(0, len(base) - 1))
        return base[:k] + _DEVANAGARI[draw(st.integers(0, 9))] + base[k + 1:]
    if kind == 3:
        return draw(st.sampled_from(["2016-12-31T23:59:60Z", "2032-12-31T23:59:60Z", "2029-02-29T00:00:00Z",
                                     "2028-02-29T12:00:00Z", "1971-12-31T23:59:59Z", "2099-12-31T23:59:59.999999Z",
                                     "2025-01-01T00:00:00Z", "2050-12-31T23:59:59Z", "2024-12-31T23:59:59Z",
                                     "2051-01-01T00:00:00Z", " 2030-01-01T00:00Z ", "2030-01-01T00:00:00+00:00",
                                     "2030-01-01t00:00:00z", "2030-01-01T00:00:00.1234567895Z", "", "Z",
                                     "2030-01-01T24:00:00Z", "2030-1-01T00:00:00Z", "+2030-01-01T00:00:00Z"]))
    if kind == 4:
        return base[:-1] + "." + "9" * draw(st.integers(1, 60)) + "Z"
    if kind == 5:    # shift by up to +-20 years (outside the almanac, far from the DR's epoch)
        from engine import timescale
        days = draw(st.integers(-20 * 366, 20 * 366))
        try:
            return timescale.format_utc(timescale.parse_utc(base) + days * 86400 * 1000000, 3)
        except timescale.TimeError:
            return base
    if kind == 6:
        return draw(st.text(max_size=30))
    if kind == 7:
        return base * draw(st.integers(2, 400))
    k = draw(st.integers(0, len(base)))
    return base[:k] + draw(st.text(min_size=1, max_size=3)) + base[k:]


_NUMERIC = {   # where a number the engine uses lives -> its RANGES entry
    ("observer", "eye_height_m"): "eye_height_m", ("observer", "temperature_c"): "temperature_c",
    ("observer", "pressure_hpa"): "pressure_hpa", ("observer", "yaw_sigma_deg"): "yaw_sigma_deg",
    ("observer", "contact_sigma_arcmin"): "contact_sigma_arcmin", ("track", "lat_deg"): "lat_deg",
    ("track", "lon_deg"): "lon_deg", ("track", "course_deg"): "course_deg", ("track", "speed_kn"): "speed_kn",
    ("track", "velocity_sigma_kn"): "velocity_sigma_kn", ("dut1_s",): "dut1_s", ("dr_sigma_nm",): "dr_sigma_nm",
    ("instrument", "reaction_delay_s"): "reaction_delay_s",
    ("instrument", "reaction_delay_sigma_s"): "reaction_delay_sigma_s",
}


@st.composite
def valid_edit(draw, d):
    """An edit the reader must accept: a number anywhere in its range (ends included), another
    valid choice, a time moved, a contact voided or unlabelled.  These reach the engine."""
    kind = draw(st.sampled_from(("number", "image number", "contact", "time", "known")))
    contacts = d.get("contacts") if isinstance(d.get("contacts"), list) else []
    images = (d.get("instrument") or {}).get("images") if isinstance(d.get("instrument"), dict) else None
    if kind == "number":
        path = draw(st.sampled_from(sorted(_NUMERIC)))
        lo, hi = limits.RANGES[_NUMERIC[path]]
        parent = d
        for k in path[:-1]:
            if not isinstance(parent.get(k), dict):
                return
            parent = parent[k]
        parent[path[-1]] = draw(st.sampled_from((lo, hi)) | st.floats(lo, hi))
    elif kind == "image number" and isinstance(images, list) and images:
        im = images[draw(st.integers(0, len(images) - 1))]
        if isinstance(im, dict):
            key = draw(st.sampled_from(("deviation_deg", "sigma_arcmin")))
            lo, hi = limits.RANGES[key]
            im[key] = draw(st.sampled_from((lo, hi)) | st.floats(lo, hi))
            if key == "sigma_arcmin" and im[key] == 0.0:
                im[key] = 1e-6
    elif kind == "contact" and contacts:
        c = contacts[draw(st.integers(0, len(contacts) - 1))]
        if isinstance(c, dict):
            key = draw(st.sampled_from(("body", "limb", "image", "void", "sigma_s")))
            if key == "body":
                c[key] = draw(st.sampled_from(("sun", "moon")))
            elif key == "limb":
                c[key] = draw(st.sampled_from(("lower", "upper")))
            elif key == "image":
                ids = [im.get("id") for im in images if isinstance(im, dict)] if isinstance(images, list) else []
                c[key] = draw(st.sampled_from([None] + [i for i in ids if isinstance(i, str)]))
            elif key == "void":
                c[key] = draw(st.booleans())
            else:
                c[key] = draw(st.sampled_from((0.0, 60.0)) | st.floats(0.0, 60.0))
    elif kind == "time" and contacts:
        c = contacts[draw(st.integers(0, len(contacts) - 1))]
        if isinstance(c, dict) and isinstance(c.get("utc"), str):
            from engine import timescale
            dt_us = draw(st.sampled_from((1, 499999, 500000, 500001, 3600 * 10 ** 6, 86400 * 10 ** 6, 8 * 86400 * 10 ** 6))
                         | st.integers(-8 * 86400 * 10 ** 6, 8 * 86400 * 10 ** 6))
            try:
                c["utc"] = timescale.format_utc(timescale.parse_utc(c["utc"]) + dt_us, 6)
            except timescale.TimeError:
                pass
    elif kind == "known" and isinstance(d.get("track"), dict):
        d["track"]["known"] = draw(st.booleans())


@st.composite
def mutated(draw, doc):
    """(session text, name of the mutations) from a seed dict."""
    d = copy.deepcopy(doc)
    names = []
    if draw(st.booleans()):           # fewer contacts: faster runs, and the smallest sessions
        n = draw(st.integers(0, min(MAX_SEED_CONTACTS, len(d["contacts"]))))
        d["contacts"] = d["contacts"][:n]
    else:
        d["contacts"] = d["contacts"][:MAX_SEED_CONTACTS]
    raws = {}
    for _ in range(draw(st.integers(1, 3))):
        paths = [p for p in _paths(d) if p]
        what = draw(st.sampled_from(("valid", "valid", "valid", "repeat", "delete", "value", "number", "raw", "time",
                                     "long", "empty", "wrap")))
        names.append(what)
        if what == "valid":
            draw(valid_edit(d))
            continue
        if what == "repeat" and d.get("contacts") and isinstance(d["contacts"], list):
            k = draw(st.integers(0, len(d["contacts"]) - 1))
            c = copy.deepcopy(d["contacts"][k])
            if isinstance(c, dict) and isinstance(c.get("utc"), str) and draw(st.booleans()):
                from engine import timescale
                try:
                    t = timescale.parse_utc(c["utc"]) + draw(st.integers(-600000, 600000))
                    c["utc"] = timescale.format_utc(t, 6)
                except timescale.TimeError:
                    pass
            d["contacts"].insert(draw(st.integers(0, len(d["contacts"]))), c)
            continue
        if not paths:
            continue
        path = draw(st.sampled_from(paths))
        parent = _get(d, path[:-1])
        key = path[-1]
        if what == "delete":
            del parent[key]
        elif what == "value":
            parent[key] = draw(json_value)
        elif what == "number":
            parent[key] = draw(special_number)
        elif what == "raw":
            token = draw(raw_token)
            parent[key] = _MARK % token
            raws[_MARK % token] = RAW[token]
        elif what == "time":
            base = parent[key] if isinstance(parent[key], str) and len(parent[key]) >= 16 else "2030-10-20T19:38:52.569Z"
            parent[key] = draw(time_text(base))
        elif what == "long":
            parent[key] = draw(st.sampled_from(("x", "\u0967", "\n", "\x00", "\ud7ff"))) * draw(
                st.sampled_from((33, 41, 1000, 100000)))
        elif what == "empty":
            parent[key] = draw(st.sampled_from(([], {}, "", None)))
        elif what == "wrap":
            parent[key] = draw(st.sampled_from(([parent[key]], {"value": parent[key]})))
    text = json.dumps(d, indent=draw(st.sampled_from((None, 1))), ensure_ascii=draw(st.booleans()))
    for mark, raw in raws.items():
        text = text.replace('"%s"' % mark, raw)
    damage = draw(st.sampled_from(("none",) * 18 + ("truncated", "encoded")))
    if damage == "truncated":
        text = text[:len(text) - draw(st.integers(1, len(text)))]
        names.append("truncated")
    elif damage == "encoded":
        names.append("encoded")
        return draw(st.sampled_from((b"\xef\xbb\xbf" + text.encode(), text.encode("utf-16"),
                                     text.encode()[:-1] + b"\xff", b""))), names
    return text, names
