"""Bounded input: a long fuzz of the four session commands, and their times at 100, 1 000 and
10 000 contacts.

1. Fuzz (``tests/fuzz_sessions.py``, the harness of ``tests/test_fuzz_cli.py`` with many more
   examples and a fresh random seed each run): every input must give exit 0 with finite JSON, or
   exit 2 with one line.  Prints how many inputs were tried per command, the outcomes, one
   example line per kind of refusal, and every crash found (the input and the traceback).
   ``LIMBCLOCK_FUZZ_EXAMPLES`` sets the examples per command (default 500).
2. Size: sessions of 100, 1 000 and 10 000 contacts (a station - speed 0 - timed over as many days
   as it takes, contact times from ``engine.plan.schedule``, the model the fix inverts, with the
   images of ``vectors/sessions/both_sides.json``), each command run as its own process through the
   real command line; the wall time and the peak memory are printed.  A run still going after
   ``LIMBCLOCK_SIZE_TIMEOUT`` seconds (default 120) is stopped and shown as "> N s": the figure
   says the command is not yet bounded in practice at that size.  The reader's own time (parse
   and validate) is printed beside them, and the refusal of 10 001 contacts.
"""
import json
import os
import subprocess
import sys
import tempfile
import time
import traceback

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
if os.path.join(ROOT, "tests") not in sys.path:
    sys.path.insert(0, os.path.join(ROOT, "tests"))

SIZES = (100, 1000, 10000)


def fuzz(examples):
    from hypothesis import HealthCheck, given, settings, strategies as st
    import fuzz_sessions as fz

    print("1. Fuzz: %d examples per command through host.cli.main (in-process), random seed" % examples)
    print("   %-10s %7s %6s %8s %7s %9s" % ("command", "inputs", "exit 0", "exit 2", "crashes", "s/input"))
    kinds = {}
    crashes = []
    total = 0
    for command in fz.COMMANDS:
        tally = {"n": 0, "ok": 0, "refused": 0, "crash": 0}
        with tempfile.TemporaryDirectory() as work:
            @settings(max_examples=examples, deadline=None, database=None,
                      suppress_health_check=list(HealthCheck))
            @given(st.data())
            def one(data):
                name, seed = data.draw(st.sampled_from(fz.SEEDS))
                doc = fz.seed_for(command, seed)
                text, what = data.draw(fz.mutated(doc))
                json_out = data.draw(st.sampled_from((True, True, True, False)))
                tally["n"] += 1
                try:
                    outcome = fz.run_one(command, doc, text, work, json_out)
                except BaseException as exc:      # a crash: keep going, report it below
                    if isinstance(exc, KeyboardInterrupt):
                        raise
                    tally["crash"] += 1
                    crashes.append((command, name, what, text, traceback.format_exc()))
                    return
                if outcome == "ok":
                    tally["ok"] += 1
                else:
                    tally["refused"] += 1
                    kind = fz.refusal_kind(outcome)
                    kinds.setdefault(kind, [0, outcome])[0] += 1
            t0 = time.perf_counter()
            one()
            dt = time.perf_counter() - t0
        total += tally["n"]
        print("   %-10s %7d %6d %8d %7d %9.3f" % (command, tally["n"], tally["ok"], tally["refused"], tally["crash"],
                                                 dt / max(tally["n"], 1)))
    print("   %d inputs in all; refusals by kind (count, one example line):" % total)
    for kind in sorted(kinds, key=lambda k: -kinds[k][0]):
        n, line = kinds[kind]
        print("   %5d  %-18s %s" % (n, kind, line if len(line) <= 150 else line[:147] + "..."))
    if not crashes:
        print("   crashes: none")
    for command, name, what, text, tb in crashes[:10]:
        shown = text if isinstance(text, str) else repr(text)
        print("   CRASH in %s (seed %s, mutations %s); input (first 400 characters):" % (command, name, what))
        print("     " + shown[:400].replace("\n", " "))
        print("     " + tb.strip().replace("\n", "\n     ")[-3000:])
    if len(crashes) > 10:
        print("   ... and %d more crashes" % (len(crashes) - 10))
    return total


def make_session(n, alm=None):
    """A station session of ``n`` contacts (text) from the engine's schedule at the track."""
    from engine import almanac, plan, timescale
    from engine.model import Track
    from engine.session import parse_session
    alm = alm or almanac.load()
    with open(os.path.join(ROOT, "vectors", "sessions", "both_sides.json")) as f:
        doc = json.load(f)
    s = parse_session(json.dumps(doc))
    tr = Track(s.track.t0_us, s.track.lat_deg, s.track.lon_deg, 0.0, 0.0)
    out = []
    t = tr.t0_us
    window = 8 * 86400 * 1000000
    while len(out) < n:
        out.extend(plan.schedule(alm, s.images, tr, s.observer, t, t + window, ("sun", "moon"), ("lower", "upper"),
                                 step_s=600))
        t += window
    out = out[:n]
    doc["track"] = {"utc": timescale.format_utc(tr.t0_us, 0), "lat_deg": tr.lat_deg, "lon_deg": tr.lon_deg,
                    "course_deg": 0.0, "speed_kn": 0.0}
    doc["contacts"] = [{"utc": timescale.format_utc(c.t_us, 3), "body": c.body, "limb": c.limb, "image": c.image}
                       for c in out]
    return json.dumps(doc, indent=1), out[-1].t_us - tr.t0_us


def _timed(argv, timeout_s):
    """(seconds or None when stopped, exit code, peak RSS MB, first stderr line) of one run."""
    code = ("import resource, sys\nfrom host.cli import main\nrc = main(sys.argv[1:])\n"
            "sys.stderr.write('@@rss %d\\n' % resource.getrusage(resource.RUSAGE_SELF).ru_maxrss)\nsys.exit(rc)\n")
    t0 = time.perf_counter()
    p = subprocess.Popen([sys.executable, "-c", code] + argv, cwd=ROOT, stdout=subprocess.DEVNULL,
                         stderr=subprocess.PIPE, text=True)
    try:
        _, err = p.communicate(timeout=timeout_s)
    except subprocess.TimeoutExpired:
        p.kill()
        p.communicate()
        return None, None, None, ""
    dt = time.perf_counter() - t0
    rss = None
    first = ""
    for line in err.splitlines():
        if line.startswith("@@rss "):
            rss = int(line[6:]) / 1024.0
        elif not first:
            first = line
    return dt, p.returncode, rss, first


def sizes(timeout_s):
    from engine import almanac, timescale
    from engine.session import parse_session
    alm = almanac.load()
    print()
    print("2. Size: each command as its own process on a station session of N contacts "
          "(stopped after %d s)" % timeout_s)
    print("   %6s %9s %9s %s" % ("N", "bytes", "read ms", "   ".join("%-16s" % c for c in ("fix", "plan", "identify",
                                                                                         "calibrate"))))
    with tempfile.TemporaryDirectory() as work:
        for n in SIZES:
            text, span_us = make_session(n, alm)
            t0 = time.perf_counter()
            s = parse_session(text, alm)
            read_ms = (time.perf_counter() - t0) * 1000.0
            path = os.path.join(work, "s%d.json" % n)
            with open(path, "w") as f:
                f.write(text)
            known = json.loads(text)
            known["track"]["known"] = True
            kpath = os.path.join(work, "k%d.json" % n)
            with open(kpath, "w") as f:
                json.dump(known, f)
            t_from = timescale.format_utc(s.track.t0_us, 0)
            t_to = timescale.format_utc(s.track.t0_us + 86400 * 1000000, 0)
            cells = []
            for argv in (["fix", path, "--json"], ["plan", path, "--from", t_from, "--to", t_to, "--json"],
                         ["identify", path, "--json"], ["calibrate", kpath, "--json"]):
                dt, rc, rss, first = _timed(argv, timeout_s)
                if dt is None:
                    cells.append("> %d s (stopped)" % timeout_s)
                else:
                    cells.append("%.1f s %s%s" % (dt, "%.0f MB" % rss if rss else "", "" if rc == 0 else " rc %d" % rc))
                    if rc != 0:
                        print("      (%s at %d: %s)" % (argv[0], n, first))
                sys.stdout.flush()
            print("   %6d %9d %9.1f %s   (%.0f days of contacts)" % (n, len(text), read_ms,
                                                                   "   ".join("%-16s" % c for c in cells),
                                                                   span_us / 86400e6))
            sys.stdout.flush()
        over, _ = make_session(10001, alm)
        path = os.path.join(work, "over.json")
        with open(path, "w") as f:
            f.write(over)
        for command in ("fix", "plan", "identify", "calibrate"):
            argv = [command, path, "--json"] + (["--from", t_from] if command == "plan" else [])
            dt, rc, rss, first = _timed(argv, timeout_s)
            print("   10001 contacts, %-9s exit %s in %.2f s: %s" % (command, rc, dt or 0.0, first))
    print("   (peak memory: resident set of the process; plan's window is the first day, it ignores the contacts)")


def run():
    examples = int(os.environ.get("LIMBCLOCK_FUZZ_EXAMPLES", "500"))
    timeout_s = int(os.environ.get("LIMBCLOCK_SIZE_TIMEOUT", "120"))
    t0 = time.perf_counter()
    n = fuzz(examples)
    print("   fuzz: %d inputs in %.0f s" % (n, time.perf_counter() - t0))
    sizes(timeout_s)


if __name__ == "__main__":
    run()
