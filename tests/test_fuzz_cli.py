"""Every bad input gets one clear line: a property-based fuzz of ``fix``, ``plan``, ``identify`` and
``calibrate`` through ``host.cli.main`` (in-process), the cases of the issue that started it, and a
few runs of the real process.

The contract (DEVELOPERS.md "Trust rules": every input is checked before arithmetic, a refusal is one
line naming the field, errors at the edges; exit status 2 for bad input is common
practice, 70 is EX_SOFTWARE of sysexits.h): exit 0 with finite JSON, or exit 2 with exactly one
line on stderr.  Only the project's own exception types (and OSError for files) are refusals
(``host.cli.is_refusal``); a builtin ValueError such as "math domain error" is a crash (exit 70),
so this test never treats a broad ValueError as clean.

Work is bounded by the readers' limits (engine.limits), not by a clock: no wall-clock asserts
here; ``make bench`` (bench/bench_input.py) runs the fuzz longer and times every command at
100, 1 000 and 10 000 contacts.
"""
import json
import math
import subprocess
import sys

import pytest
from hypothesis import HealthCheck, given, settings, strategies as st

import fuzz_sessions as fz
from engine import limits
from engine.session import parse_session
from waiting import HANG_GUARD_S

ROOT = fz.ROOT
EXAMPLES_PER_COMMAND = 50       # make test: 200 inputs in all; make bench runs many more


@pytest.fixture(scope="module")
def workdir(tmp_path_factory):
    return str(tmp_path_factory.mktemp("fuzz"))


@pytest.mark.parametrize("command", fz.COMMANDS)
def test_fuzz_command(command, workdir):
    @settings(max_examples=EXAMPLES_PER_COMMAND, deadline=None, derandomize=True, database=None,
              suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
    @given(st.data())
    def one(data):
        name, seed = data.draw(st.sampled_from(fz.SEEDS), label="seed")
        doc = fz.seed_for(command, seed)
        text, what = data.draw(fz.mutated(doc), label="mutations")
        fz.run_one(command, doc, text, workdir, data.draw(st.sampled_from((True, True, True, False)), label="json"))
    one()


@pytest.mark.parametrize("command", fz.COMMANDS)
def test_every_seed_is_accepted(command, workdir):
    """The seeds themselves run to exit 0 (else the fuzz would only ever test refusals)."""
    for name, seed in fz.SEEDS:
        doc = fz.seed_for(command, seed)
        doc["contacts"] = doc["contacts"][:fz.MAX_SEED_CONTACTS]
        assert fz.run_one(command, doc, json.dumps(doc), workdir) == "ok", name


# ------------------------------------------------------------------------ the harness catches crashes

def test_an_injected_math_domain_error_fails_the_check(workdir, monkeypatch):
    """A builtin ValueError raised inside a command is a crash: exit 70, one 'internal error' line,
    and the fuzz check fails (re-running with --debug lets the exception itself escape)."""
    from engine import fix

    def broken(*args, **kwargs):
        return math.sqrt(-1.0)          # ValueError: math domain error
    monkeypatch.setattr(fix, "solve_fix", broken)
    name, seed = fz.SEEDS[0]
    doc = fz.seed_for("fix", seed)
    path = fz.drive("fix", json.dumps(doc), workdir)
    rc, out, err = fz.run_cli(["fix", path, "--json"])
    assert rc == 70 and out == ""
    assert len(err.splitlines()) == 1 and "internal error" in err and "ValueError: math domain error" in err
    assert "(tests/test_fuzz_cli.py:" in err          # where it was raised
    with pytest.raises(ValueError, match="math domain error"):
        fz.run_one("fix", doc, json.dumps(doc), workdir)


def test_non_finite_output_fails_the_check():
    with pytest.raises(AssertionError):
        fz.finite_json('{"lat_deg": NaN}')
    with pytest.raises(AssertionError):
        fz.finite_json('{"x": [1, 1e999]}')
    assert fz.finite_json('{"x": [1, 2.5]}') == {"x": [1, 2.5]}


# --------------------------------------------------------------- the cases of the issue, one by one

def _seed(command="fix"):
    return fz.seed_for(command, fz.SEEDS[0][1])


def _refusal(command, text, workdir):
    doc = _seed(command)
    line = fz.run_one(command, doc, text, workdir)
    assert line != "ok", "accepted: %s" % text[:200]
    return line.split(": error: ", 1)[1]


@pytest.mark.parametrize("command", fz.COMMANDS)
def test_huge_integer_is_refused_naming_the_field(command, workdir):
    doc = _seed(command)
    text = json.dumps(doc).replace('"eye_height_m": 2.4', '"eye_height_m": 1' + "0" * 400)
    assert "1" + "0" * 400 in text
    msg = _refusal(command, text, workdir)
    assert msg == "observer.eye_height_m: an integer beyond 1e18 (the limit for any integer in a limbclock file)"


@pytest.mark.parametrize("command", fz.COMMANDS)
def test_deep_nesting_is_refused(command, workdir):
    doc = _seed(command)
    doc["contacts"][0]["note"] = "@@deep@@"
    deep = json.dumps(doc).replace('"@@deep@@"', "[" * 5000 + "]" * 5000)
    assert _refusal(command, deep, workdir) == "session: nested deeper than 32 levels"
    doc["contacts"][0]["note"] = "@@deep@@"
    not_so = json.dumps(doc).replace('"@@deep@@"', "[" * 40 + "]" * 40)
    assert _refusal(command, not_so, workdir) == "contacts[0].note[0][0][0]...: nested deeper than 32 levels"


@pytest.mark.parametrize("command", ("fix", "identify", "calibrate"))
def test_non_ascii_digits_are_not_a_date(command, workdir):
    doc = _seed(command)
    utc = doc["contacts"][3]["utc"]
    doc["contacts"][3]["utc"] = "".join(chr(0x0966 + int(ch)) if ch.isdigit() else ch for ch in utc)
    msg = _refusal(command, json.dumps(doc, ensure_ascii=False), workdir)
    assert msg.startswith("contacts[3].utc: time '\u0968\u0966\u0969\u096a-") and "ASCII digits 0-9 only" in msg


@pytest.mark.parametrize("token", ["NaN", "Infinity", "-Infinity", "1e400"])
def test_non_finite_tokens_are_refused_anywhere(token, workdir):
    doc = _seed()
    doc["provenance"]["weight"] = "@@x@@"      # an extra key: kept and written back, so checked too
    msg = _refusal("fix", json.dumps(doc).replace('"@@x@@"', token), workdir)
    assert msg.startswith("provenance.weight: must be a finite number, got "), msg


def test_bool_is_not_a_number(workdir):
    doc = _seed()
    doc["track"]["speed_kn"] = True
    assert _refusal("fix", json.dumps(doc), workdir) == "track.speed_kn: must be a number, got true"


def _many_contacts(n):
    doc = _seed()
    c0 = doc["contacts"][0]
    from engine import timescale
    t0 = timescale.parse_utc(c0["utc"])
    doc["contacts"] = [dict(c0, utc=timescale.format_utc(t0 + k * 1000000, 3)) for k in range(n)]
    return doc


@pytest.mark.parametrize("command", fz.COMMANDS)
def test_too_many_contacts_are_refused_naming_the_limit(command, workdir):
    doc = _many_contacts(limits.MAX_CONTACTS + 1)
    msg = _refusal(command, json.dumps(doc), workdir)
    assert msg == "contacts: 10001 contacts; at most 10000 per session (split the file)"


def test_at_the_contact_limit_the_reader_accepts():
    s = parse_session(json.dumps(_many_contacts(limits.MAX_CONTACTS)), need_contacts=False)
    assert len(s.contacts) == 10000 and s.warnings == []      # 1 s apart: no repeats


@pytest.mark.parametrize("command", fz.COMMANDS)
def test_a_file_above_4_mib_is_refused_naming_the_limit(command, workdir):
    doc = _seed(command)
    doc["padding"] = ""
    base = len(json.dumps(doc))
    doc["padding"] = "x" * (limits.MAX_FILE_BYTES + 1 - base)
    text = json.dumps(doc)
    assert len(text) == limits.MAX_FILE_BYTES + 1
    msg = _refusal(command, text, workdir)
    assert msg.endswith("bytes; at most 4194304 bytes (4 MiB) per file") and "419430" in msg, msg
    doc["padding"] = "x" * (limits.MAX_FILE_BYTES - base)
    assert len(json.dumps(doc)) == limits.MAX_FILE_BYTES
    assert fz.run_one(command, doc, json.dumps(doc), workdir) == "ok"       # at the limit: read


def test_the_reader_itself_refuses_text_above_the_limit():
    from engine.session import SessionError
    with pytest.raises(SessionError, match=r"^session: 4194305 bytes; at most 4194304 bytes \(4 MiB\) per file$"):
        parse_session(b" " * (limits.MAX_FILE_BYTES + 1))


# ---------------------------------------------------------------- duplicates, end to end through fix

def test_a_repeated_contact_through_fix(workdir):
    doc = _seed()
    doc["contacts"] = doc["contacts"][:12]
    rep = dict(doc["contacts"][4])
    from engine import timescale
    rep["utc"] = timescale.format_utc(timescale.parse_utc(rep["utc"]) + 300000, 6)     # 0.3 s later
    doc["contacts"].append(rep)
    text = json.dumps(doc)
    # what the reader guarantees: the repeat is marked, warned about, and keeps its index
    s = parse_session(text)
    assert [c.dup_of for c in s.contacts] == [None] * 12 + [4]
    assert s.warnings == ["contacts[12] repeats contacts[4] (sun lower %s, 0.300 s apart): used once"
                          % doc["contacts"][4]["image"]]
    path = fz.drive("fix", text, workdir)
    rc, out, err = fz.run_cli(["fix", path, "--json"])
    assert fz.check("fix", ["fix", path, "--json"], rc, out, err) == "ok"
    r = fz.finite_json(out)
    assert len(r["contacts"]) == 13 and [c["index"] for c in r["contacts"]] == list(range(13))


def test_fix_uses_a_repeated_contact_once(workdir):
    """engine/fix.py honours Contact.dup_of: the repeat is not used, its
    reason says 'duplicate of contact 4', and the fix equals the fix without the repeat."""
    doc = _seed()
    doc["contacts"] = doc["contacts"][:12]
    single = fz.run_cli(["fix", fz.drive("fix", json.dumps(doc), workdir), "--json"])
    rep = dict(doc["contacts"][4])
    doc["contacts"].append(rep)
    rc, out, err = fz.run_cli(["fix", fz.drive("fix", json.dumps(doc), workdir), "--json"])
    assert rc == 0, err
    r, r1 = json.loads(out), json.loads(single[1])
    assert r["contacts"][12]["used"] is False and "duplicate of contact 4" in r["contacts"][12]["reason"]
    assert r["contacts_used"] == r1["contacts_used"]
    assert abs(r["lat_deg"] - r1["lat_deg"]) < 1e-9 and abs(r["lon_deg"] - r1["lon_deg"]) < 1e-9


# --------------------------------------------------------------------- the real process, no traceback

def _process(*argv):
    p = subprocess.run([sys.executable, "-m", "host"] + list(argv), cwd=ROOT, capture_output=True, text=True,
                       timeout=HANG_GUARD_S)
    return p.returncode, p.stdout, p.stderr


@pytest.mark.parametrize("command, edit, expect", [
    ("fix", lambda t: t.replace('"eye_height_m": 2.4', '"eye_height_m": 1' + "0" * 400),
     "observer.eye_height_m: an integer beyond 1e18 (the limit for any integer in a limbclock file)"),
    ("plan", lambda t: t.replace('"format"', '"x": ' + "[" * 5000 + "]" * 5000 + ', "format"', 1),
     "session: nested deeper than 32 levels"),
    ("identify", lambda t: t.replace("2034", "\u0968\u0966\u0969\u096a", 2),
     "time '\u0968\u0966\u0969\u096a-"),
    ("calibrate", lambda t: t.replace('"speed_kn": 5.8', '"speed_kn": NaN'),
     "track.speed_kn: must be a finite number, got nan"),
])
def test_refusals_in_the_real_process(command, edit, expect, tmp_path):
    doc = _seed(command)
    path = tmp_path / "s.json"
    path.write_text(edit(json.dumps(doc, ensure_ascii=False)), encoding="utf-8")
    rc, out, err = _process(*fz.argv_for(command, str(path), doc))
    assert rc == 2 and out == "" and "Traceback" not in err, err
    assert len(err.splitlines()) == 1 and err.startswith("limbclock %s: error: " % command), err
    assert expect in err, err


def test_a_crash_in_the_real_process_is_one_line_and_exit_70(tmp_path):
    """A bug (here a math domain error injected into the fix through a sitecustomize-free shim:
    ``python -c`` patches engine.fix, then runs the CLI) prints one line and exits 70; --debug
    prints the traceback."""
    doc = _seed()
    path = tmp_path / "s.json"
    path.write_text(json.dumps(doc))
    code = ("import math, sys; import engine.fix as f; "
            "f.solve_fix = lambda *a, **k: math.sqrt(-1.0); "
            "from host.cli import main; sys.exit(main(sys.argv[1:]))")
    p = subprocess.run([sys.executable, "-c", code, "fix", str(path), "--json"], cwd=ROOT, capture_output=True,
                       text=True, timeout=HANG_GUARD_S)
    assert p.returncode == 70 and p.stdout == "" and "Traceback" not in p.stderr
    assert len(p.stderr.splitlines()) == 1 and "internal error" in p.stderr
    assert "ValueError: math domain error (<string>:1)" in p.stderr, p.stderr
    p = subprocess.run([sys.executable, "-c", code, "--debug", "fix", str(path), "--json"], cwd=ROOT,
                       capture_output=True, text=True, timeout=HANG_GUARD_S)
    assert p.returncode == 1 and "Traceback" in p.stderr and p.stderr.strip().endswith("math domain error")


def test_os_errors_are_refusals_and_name_the_file(tmp_path):
    rc, out, err = fz.run_cli(["fix", str(tmp_path / "nowhere.json"), "--json"])
    assert rc == 2 and len(err.splitlines()) == 1 and "nowhere.json" in err and "No such file" in err
    rc, out, err = fz.run_cli(["calibrate", str(tmp_path), "--json"])      # a directory
    assert rc == 2 and len(err.splitlines()) == 1 and "Is a directory" in err
