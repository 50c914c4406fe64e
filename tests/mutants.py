"""Mutation check: small deliberate bugs put into a copy of the tree must each make a test fail.

``make mutants`` runs ``python tests/mutants.py [NAME ...] [--jobs N] [--list] [--timeout S]``.

It copies the files git tracks into a scratch directory, and for each mutant in ``MUTANTS``
replaces exact pieces of source text (each must occur exactly once in its file: a mutant whose text
no longer exists is reported STALE, so the list cannot silently rot when the code changes), runs the
test files named with it (``pytest -x``, with ``PYTHONPATH`` pointing at the copy and the hypothesis
profile ``mutants``: derandomized, no example database, so a run is reproducible), and puts the
files back.  A mutant is CAUGHT when the tests fail (the first failing test is shown), SURVIVED when
they pass, TIMEOUT when they run longer than ``--timeout`` (default 1800 s).  A mutant listed as
``equivalent`` (an edit measured to change no answer; the reason is given with it) is run all the
same and reported EQUIVAL when it survives, so the claim is re-checked on every run.  The run prints one line
per mutant and a summary, and exits non-zero when any mutant survived, timed out or is stale.

Each mutant is one of the faults a careless edit could make in the statistics, the time scales,
the planner or the timer (a constant, a sign, a threshold, a checksum, an order of operations); the
tests listed with it are the ones that ought to catch it (all part of ``make test``), so the run
stays minutes long, not hours.  ``--list`` prints the mutants and the tests meant to catch them.
"""
import os
import shutil
import subprocess
import sys
import tempfile
import time

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))


class Mutant:
    __slots__ = ("name", "edits", "tests", "why", "equivalent")

    def __init__(self, name, edits, tests, why, equivalent=None):
        self.name, self.edits, self.tests, self.why, self.equivalent = name, edits, tests, why, equivalent

    @property
    def path(self):
        return self.edits[0][0]


MUTANTS = []


def add(name, path, old, new, tests, why, also=(), equivalent=None):
    """A mutant: in ``path`` replace ``old`` (which must occur exactly once) by ``new``, plus the
    further ``(path, old, new)`` edits in ``also``; ``tests``: test files (or node ids) meant to
    catch it; ``why``: what the bug means, in a few words.  ``equivalent``: for an edit that
    changes no answer (measured), why - it is run all the same and reported EQUIVALENT when the
    tests pass, so the claim is checked on every run and stays visible."""
    if isinstance(tests, str):
        tests = [tests]
    MUTANTS.append(Mutant(name, [(path, old, new)] + list(also), list(tests), why, equivalent))


FIX_TESTS = ["tests/test_fix_coverage.py", "tests/test_fix_reference.py", "tests/test_fix_properties.py",
             "tests/test_fix_perturbed.py", "tests/test_fix_rejection.py"]


def define():
    """The mutants: the statistics of the fix and identification, the time scales, the planner, the
    timer and the sync (see the module docstring)."""
    # ---- statistics of the fix (engine/fix.py) ----
    add("fix-ellipse-68", "engine/fix.py",
        "k2 = ellipse_k2(s0, dof)", "k2 = ellipse_k2(s0, dof, 0.68)",
        FIX_TESTS, "the 95 % ellipse computed at 68 %")
    add("fix-blunder-w-8", "engine/fix.py",
        "REJECT_W = 3.0 ", "REJECT_W = 8.0 ",
        FIX_TESTS, "the blunder threshold |w| > 3 moved to 8")
    add("fix-prepass-never-drops", "engine/fix.py",
        "if ratios[worst] <= PRESCREEN_K * scale:", "if True:",
        FIX_TESTS, "the robust pre-pass never drops a gross blunder")
    add("fix-timing-sigma-x4", "engine/fix.py",
        '"sigma_time_s": 0.25', '"sigma_time_s": 1.0',
        FIX_TESTS, "the timing sigma 0.25 s taken x4")
    add("fix-image-correlation-dropped", "engine/fix.py",
        "        sg = sig_img[c.image]\n        if sg > 0.0:",
        "        sg = sig_img[c.image]\n        var_l[k] += sg * sg\n        if False:",
        FIX_TESTS, "the per-image correlation (one deviation error shared by its contacts) dropped: each "
                   "contact's image error taken as independent")
    add("fix-reaction-delay-sign", "engine/fix.py",
        "t_us = c.t_us - delay_us if delay_us else c.t_us", "t_us = c.t_us + delay_us if delay_us else c.t_us",
        FIX_TESTS, "the reaction delay added to the contact times instead of taken off")
    add("fix-yaw-mean-sign", "engine/fix.py",
        "dev_l[k] = dev if calibrated else dev - yaw_mean / 60.0",
        "dev_l[k] = dev if calibrated else dev + yaw_mean / 60.0",
        FIX_TESTS, "the mean yaw loss added to the deviation instead of taken off")
    add("fix-rejection-limit-half", "engine/fix.py",
        "MAX_REJECTED_DIV = 3 ", "MAX_REJECTED_DIV = 2 ",
        FIX_TESTS, "up to half of the contacts rejected as blunders before the fix gives up (a third)")
    add("fix-epoch-not-last-used", "engine/fix.py",
        "        if at_us is not None:\n            break\n        last = max(use,",
        "        if True:\n            break\n        last = max(use,",
        FIX_TESTS, "the epoch left at the last contact even when it was rejected (not the last one used)")
    add("fix-time-gap-48h", "engine/fix.py",
        "TIME_GAP_H = 12.0 ", "TIME_GAP_H = 48.0 ",
        FIX_TESTS, "a contact a day away from the others not named a time blunder")
    add("fix-offset-never-estimated", "engine/fix.py",
        "return var_free < var_held + per_arcmin2 * s_off * s_off", "return False",
        FIX_TESTS, "the equal-altitude offset never estimated by 'auto', even where the geometry determines it")
    # ---- doubts (engine/doubts.py) and duplicates (engine/session.py) ----
    add("doubts-far-from-dr-never", "engine/doubts.py",
        "MAHALANOBIS2 = 13.8 ", "MAHALANOBIS2 = 1e30 ",
        ["tests/test_doubts.py"], "a fix far from the DR for its stated uncertainty never doubted")
    add("doubts-residuals-high-never", "engine/doubts.py",
        "        if chi2 > q:", "        if False:",
        ["tests/test_doubts.py"], "residuals far beyond the error model never doubted")
    add("doubts-many-rejected-third", "engine/doubts.py",
        "if usable and 4 * rejected >= usable:", "if usable and 3 * rejected > usable:",
        ["tests/test_doubts.py"], "rejections doubted only beyond a third (never: the fix refuses those) instead of "
                                  "from a quarter")
    add("doubts-long-run-never", "engine/doubts.py",
        "    if run_h < LONG_RUN_H:", "    if True:",
        ["tests/test_doubts.py"], "a long running fix on an assumed course and speed never doubted")
    add("duplicate-window-zero", "engine/limits.py",
        "DUPLICATE_US = 500000", "DUPLICATE_US = 0",
        ["tests/test_session.py", "tests/test_fuzz_cli.py"], "a contact timed twice within 0.5 s used twice")
    # ---- identification (engine/identify.py) ----
    add("identify-confidence-0.6", "engine/identify.py",
        "DEFAULT_CONFIDENCE = 0.99", "DEFAULT_CONFIDENCE = 0.6",
        ["tests/test_identify.py"], "an identification called confident at 0.6 instead of 0.99")
    add("identify-near-dr-only", "engine/identify.py",
        "_search(p, count, radius_nm, False, use_dr), use_dr), \"globe\"",
        "_search(p, count, radius_nm, True, use_dr), use_dr), \"globe\"",
        ["tests/test_identify_calibration.py", "tests/test_doubts.py", "tests/test_identify.py"],
        "identification searches only near the DR (4 DR sigma + 60 nmi), not the whole globe")
    # ---- time scales (engine/timescale.py) ----
    add("leap-second-moved", "engine/timescale.py",
        "(days_from_civil(1985, 7, 1), 23)", "(days_from_civil(1985, 9, 1), 23)",
        ["tests/test_timescale.py"], "the 1985 leap second moved two months inside its half-year")
    add("leap-table-valid-150-days-longer", "engine/timescale.py",
        "_EXTRAPOLATED_FROM_DAY = days_from_civil(2027, 7, 1)",
        "_EXTRAPOLATED_FROM_DAY = days_from_civil(2027, 7, 1) + 150",
        ["tests/test_timescale.py"], "the leap table trusted 150 days past its end")
    # ---- the contact schedule (engine/plan.py) ----
    add("plan-tolerance-x16", "engine/plan.py",
        "DEFAULT_TOL_US = 50000", "DEFAULT_TOL_US = 800000",
        ["tests/test_plan.py"], "the schedule's refinement stops at a 0.8 s bracket instead of 50 ms",
        equivalent="the answer is the secant of the final bracket's true values: a 0.8 s bracket moves "
                   "no reference contact by more than 2 us (tests/test_plan.py::"
                   "test_schedule_is_the_forward_models_root checks that 0.8 s and 50 ms agree within 1 ms)")
    add("plan-final-step-halved-values", "engine/plan.py",
        "return ta + int((tb - ta) * (ga / (ga - gb)))", "return ta + int((tb - ta) * (fa / (fa - fb)))",
        ["tests/test_plan.py"], "the refinement answers with the Illinois-halved values (contacts up to 8 ms off)")
    add("plan-moon-elongation-5", "engine/plan.py",
        "MOON_MIN_ELONGATION_DEG = 15.0", "MOON_MIN_ELONGATION_DEG = 5.0",
        ["tests/test_plan.py"], "Moon contacts kept down to 5 deg from the Sun instead of 15")
    add("plan-dark-plus-6", "engine/plan.py",
        "DARK_SUN_ALT_DEG = -6.0", "DARK_SUN_ALT_DEG = 6.0",
        ["tests/test_plan.py"], "'dark' flagged with the Sun below +6 deg instead of -6 deg")
    # ---- the timer: NMEA, PPS pairing, holdover (device/nmea.py, device/clock.py) ----
    add("nmea-checksum-span", "device/nmea.py",
        "if checksum(body) != want:", "if checksum(body[2:]) != want:",
        ["tests/test_device_nmea.py"], "the NMEA checksum XORed over the wrong span (talker id left out)")
    add("nmea-checksum-skipped", "device/nmea.py",
        "if checksum(body) != want:", "if False:",
        ["tests/test_device_nmea.py"], "the NMEA checksum never checked")
    add("pps-window-lower-bound", "device/clock.py",
        "if d < rx.label_min_us or d > rx.label_max_us:", "if d > rx.label_max_us:",
        ["tests/test_device_clock.py", "tests/test_device_timer.py"],
        "a label within 20 ms after an edge paired (the receiver's delay window loses its start)")
    add("pps-window-upper-bound", "device/clock.py",
        "if d < rx.label_min_us or d > rx.label_max_us:", "if d < rx.label_min_us:",
        ["tests/test_device_clock.py", "tests/test_device_timer.py"],
        "a label within 50 ms before the next edge paired (the delay window loses its 950 ms end)")
    add("pps-window-next-receiver", "device/clock.py",
        "if rx.label_min_us <= d <= rx.label_max_us:", "if d <= rx.label_max_us:",
        ["tests/test_device_clock.py", "tests/test_device_timer.py"],
        "a 'next' receiver pairs a label within 20 ms before an edge (the window's start)")
    add("holdover-drift-term-dropped", "device/clock.py",
        "u = base_us + (3.0 * self.drift_sigma_ppm + tolerance_ppm) * dt_s",
        "u = base_us + (tolerance_ppm) * dt_s",
        ["tests/test_device_clock.py", "tests/test_device_timer.py"],
        "holdover uncertainty without the learned drift's own uncertainty")
    add("holdover-aging-halved", "device/clock.py",
        "0.5 * (p.aging_ppm_per_day / 86400.0) * dt_s * dt_s", "0.25 * (p.aging_ppm_per_day / 86400.0) * dt_s * dt_s",
        ["tests/test_device_clock.py", "tests/test_device_timer.py"],
        "holdover uncertainty with half the oscillator's aging")
    add("holdover-wander-dropped", "device/clock.py",
        "unc = self.holdover_unc_us(dt, self.profile.sigma_lock_us + self.jump_us, self.profile.wander_ppm)",
        "unc = self.holdover_unc_us(dt, self.profile.sigma_lock_us + self.jump_us, 0.0)",
        ["tests/test_device_clock.py", "tests/test_device_timer.py"],
        "holdover uncertainty without the oscillator's wander (temperature)")
    # ---- the timer's log and link (device/log.py, device/frame.py, device/protocol.py) ----
    add("log-crc-unchecked", "device/log.py",
        "    if binascii.crc32(data[i:i + RECORD_LEN - 4]) & 0xFFFFFFFF != \\\n",
        "    if False and binascii.crc32(data[i:i + RECORD_LEN - 4]) & 0xFFFFFFFF != \\\n",
        ["tests/test_device_log.py"], "a log record read back without checking its CRC-32")
    add("log-crc-span", "device/log.py",
        "    if binascii.crc32(data[i:i + RECORD_LEN - 4]) & 0xFFFFFFFF != \\\n",
        "    if binascii.crc32(data[i + 2:i + RECORD_LEN - 4]) & 0xFFFFFFFF != \\\n",
        ["tests/test_device_log.py"], "the record CRC-32 checked over the payload only, magic and length left out",
        also=[("device/log.py", "        head = bytes((REC_MAGIC, PAYLOAD_LEN)) + payload\n"
               "        return head + struct.pack(\"<I\", binascii.crc32(head) & 0xFFFFFFFF)",
               "        head = bytes((REC_MAGIC, PAYLOAD_LEN)) + payload\n"
               "        return head + struct.pack(\"<I\", binascii.crc32(payload) & 0xFFFFFFFF)")])
    add("frame-crc-unchecked", "device/frame.py",
        "if binascii.crc32(raw[:-4]) & 0xFFFFFFFF != crc:", "if False:",
        ["tests/test_device_link.py"], "a link frame accepted without checking its CRC-32")
    add("frame-crc-span", "device/frame.py",
        "if binascii.crc32(raw[:-4]) & 0xFFFFFFFF != crc:", "if binascii.crc32(raw[2:-4]) & 0xFFFFFFFF != crc:",
        ["tests/test_device_link.py"], "the frame CRC-32 checked over the body only (type and seq unprotected)",
        also=[("device/frame.py", 'raw += struct.pack("<I", binascii.crc32(raw) & 0xFFFFFFFF)',
               'raw += struct.pack("<I", binascii.crc32(raw[2:]) & 0xFFFFFFFF)')])
    add("ack-proof-unchecked", "device/protocol.py",
        "if held != crc:", "if False:",
        ["tests/test_device_link.py", "tests/test_sync.py"],
        "the timer reclaims records on an ACK whose proof does not match what it holds")
    add("press-dropped-before-written", "device/firmware.py",
        "            try:\n                self._write(self.pending[0])\n            except LogError as err:\n"
        "                self._blocked(err, now)\n                return\n            self.pending.pop(0)\n",
        "            entry = self.pending.pop(0)\n            try:\n                self._write(entry)\n"
        "            except LogError as err:\n                self._blocked(err, now)\n                return\n",
        ["tests/test_device_log.py", "tests/test_device_timer.py", "tests/test_device_sim.py"],
        "a press leaves the pending list before it is durably written")
    # ---- the archive and the sync (host/sync.py, host/archive.py) ----
    add("sync-quick-check-skipped", "host/sync.py",
        "problems = archive.quick_check(probe)", "problems = []",
        ["tests/test_sync.py"], "no SQLite quick_check of the archive before an ACK")
    add("archive-open-quick-check-skipped", "host/archive.py",
        "        problems = quick_check(conn)\n        if problems:\n            conn.close()",
        "        problems = []\n        if problems:\n            conn.close()",
        ["tests/test_archive.py", "tests/test_sync.py"], "a damaged archive opened for writing without SQLite's quick_check")


def tracked_files():
    out = subprocess.run(["git", "ls-files"], cwd=ROOT, capture_output=True, text=True, check=True).stdout
    return [f for f in out.splitlines() if f and not f.startswith("tests/mp/node_modules/")]


def make_copy(dest):
    for f in tracked_files():
        src = os.path.join(ROOT, f)
        if not os.path.isfile(src):
            continue
        dst = os.path.join(dest, f)
        os.makedirs(os.path.dirname(dst), exist_ok=True)
        shutil.copy2(src, dst)
    nm = os.path.join(ROOT, "tests", "mp", "node_modules")
    if os.path.isdir(nm):
        os.symlink(nm, os.path.join(dest, "tests", "mp", "node_modules"))


def check_texts(copy, m):
    """None when every edit's text occurs exactly once and every test file exists, else why the
    mutant is stale."""
    for t in m.tests:
        if not os.path.exists(os.path.join(copy, t.split("::")[0])):
            return "no test file %s" % t
    for path, old, _new in m.edits:
        try:
            with open(os.path.join(copy, path)) as f:
                text = f.read()
        except OSError:
            return "no file %s" % path
        count = text.count(old)
        if count != 1:
            return "text found %d times in %s: %r" % (count, path, old[:60])
    return None


def first_failure(out):
    """The first ``FAILED``/``ERROR`` node id in pytest's short summary, else the last line."""
    for line in out.splitlines():
        if line.startswith("FAILED ") or line.startswith("ERROR "):
            return line.split(" - ")[0]
    return (out.strip().splitlines() or [""])[-1]


def run_one(copy, m, python, timeout):
    """(status, seconds, detail) of one mutant in the scratch tree ``copy``."""
    stale = check_texts(copy, m)
    if stale:
        return "STALE", 0.0, stale
    originals = {}
    for path, old, new in m.edits:
        full = os.path.join(copy, path)
        if full not in originals:
            with open(full) as f:
                originals[full] = f.read()
        with open(full) as f:
            text = f.read()
        with open(full, "w") as f:
            f.write(text.replace(old, new))
    env = dict(os.environ)
    env["PYTHONPATH"] = copy
    env["PYTHONDONTWRITEBYTECODE"] = "1"
    env["LIMBCLOCK_HYPOTHESIS_PROFILE"] = "mutants"
    t0 = time.monotonic()
    try:
        p = subprocess.run([python, "-m", "pytest", "-x", "-q", "-rfE", "-p", "no:cacheprovider", "-W", "error"]
                           + m.tests, cwd=copy, env=env, capture_output=True, text=True, timeout=timeout)
        status = "SURVIVED" if p.returncode == 0 else "CAUGHT"
        if status == "SURVIVED" and m.equivalent:
            status = "EQUIVAL"
        detail = first_failure(p.stdout) if p.returncode else (p.stdout.strip().splitlines() or [""])[-1]
        if m.equivalent:
            detail = ("listed as equivalent (%s); caught anyway by %s" % (m.equivalent, detail) if p.returncode
                      else "equivalent: %s" % m.equivalent)
        if p.returncode in (2, 3):            # interrupted (a collection error: the mutant broke an import)
            detail = "pytest exit %d: %s" % (p.returncode, detail)
        elif p.returncode > 3:                # usage error, nothing collected: the list is wrong, not the code
            status, detail = "STALE", "pytest exit %d: %s" % (p.returncode, detail)
    except subprocess.TimeoutExpired:
        status, detail = "TIMEOUT", "tests still running after %d s" % timeout
    finally:
        for full, text in originals.items():
            with open(full, "w") as f:
                f.write(text)
    return status, time.monotonic() - t0, detail


def main(argv):
    define()
    jobs = 1
    timeout = 1800
    names = []
    i = 0
    while i < len(argv):
        if argv[i] in ("--jobs", "--timeout") and i + 1 < len(argv):
            if argv[i] == "--jobs":
                jobs = max(1, int(argv[i + 1]))
            else:
                timeout = int(argv[i + 1])
            i += 2
            continue
        if argv[i] == "--list":
            for m in MUTANTS:
                print("%-32s %-20s %s\n%32s %-20s %s: %s" % (m.name, m.path, m.why, "", "",
                                                           "equivalent" if m.equivalent else "caught by",
                                                           m.equivalent or " ".join(m.tests)))
            return 0
        if argv[i].startswith("-"):
            print("usage: python tests/mutants.py [NAME ...] [--jobs N] [--timeout S] [--list]")
            return 2
        names.append(argv[i])
        i += 1
    unknown = set(names) - set(m.name for m in MUTANTS)
    if unknown:
        print("unknown mutant(s): %s" % ", ".join(sorted(unknown)))
        return 2
    todo = [m for m in MUTANTS if not names or m.name in names]
    python = sys.executable
    print("%d mutants, %d job(s); tree copied from %s" % (len(todo), jobs, ROOT), flush=True)
    results = []
    copies = []
    t_start = time.monotonic()

    def show(m, r):
        print("%-8s %-32s %6.1f s  %s\n%41s -> %s" % (r[0], m.name, r[1], m.why, "", r[2]), flush=True)

    try:
        for _ in range(jobs):
            d = tempfile.mkdtemp(prefix="limbclock-mutants-")
            copies.append(d)
            make_copy(d)
        if jobs == 1:
            for m in todo:
                r = run_one(copies[0], m, python, timeout)
                show(m, r)
                results.append((m, r))
        else:
            from concurrent.futures import ThreadPoolExecutor, as_completed
            import threading
            free = list(copies)
            lock = threading.Lock()

            def work(m):
                with lock:
                    d = free.pop()
                try:
                    return m, run_one(d, m, python, timeout)
                finally:
                    with lock:
                        free.append(d)
            with ThreadPoolExecutor(jobs) as ex:
                for fut in as_completed([ex.submit(work, m) for m in todo]):
                    m, r = fut.result()
                    show(m, r)
                    results.append((m, r))
    finally:
        for d in copies:
            shutil.rmtree(d, ignore_errors=True)
    caught = sum(1 for _, r in results if r[0] == "CAUGHT")
    equiv = [m.name for m, r in results if r[0] == "EQUIVAL"]
    bad = dict((k, [m.name for m, r in results if r[0] == k]) for k in ("SURVIVED", "TIMEOUT", "STALE"))
    print("caught %d of %d in %.0f s; equivalent (listed so, survived): %s; survived: %s; timed out: %s; "
          "stale: %s" % (caught, len(results), time.monotonic() - t_start, ", ".join(equiv) or "none",
                         ", ".join(bad["SURVIVED"]) or "none", ", ".join(bad["TIMEOUT"]) or "none",
                         ", ".join(bad["STALE"]) or "none"))
    return 0 if caught + len(equiv) == len(results) else 1


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
