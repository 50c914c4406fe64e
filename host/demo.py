"""The end-to-end demo on an invented scenario: timer -> sync -> archive -> fix -> plots, exports.

The scenario (invented for limbclock; no real voyage): the ketch *Grey Petrel*
crosses the Bay of Biscay from Brest toward A Coruna on 18 January 2032.  In
winter at 45-46 N the Sun stays below 24 deg all day, rising in the south-east
and setting in the south-west, so one day of contacts of a low-deviation
instrument crosses well.  The navigator's instrument is a three-plate stack
with plate angles X = 2.85 deg and Y = 4.40 deg (images 2(mX + nY), orders 1
and 2), calibrated in harbour a week before; height of eye 2.6 m, 9 C,
1021 hPa.

Truth and dead reckoning.  The ship really makes good 208 deg at 5.8 kn from
45 41.0'N 005 52.0'W at 08:00Z; the navigator's DR has her 4 nmi off at 08:00
and reckoning 207 deg at 5.7 kn (a little leeway and a weak current she does not know about).

Contacts.  For every image and each crossing (Sun rising, Sun setting) the
instant the lower limb meets the horizon is found with the engine's forward
model (``engine.plan.schedule`` on the *true* track, with the *true*
deviations), then delayed by the navigator's reaction (0.2 s), jittered by a
timing noise (0.3 s) and by an altitude noise (0.4' of abnormal refraction and
sea) divided by the Sun's rate.  A fixed seed makes the run repeatable.  The
navigator's notes name the image of most contacts; three are left unlabelled
(the engine's identification labels them) and one is mislabelled (the fix
rejects it, finds the image it fits and reads it as that image).

Chain.  The virtual timer (``device.sim``) is switched on 25 min before the first
contact; the host pushes it the instrument and the session's DR track with the
observer over the timer link (``host.sync.push`` through ``host.timer_client``, as
``limbclock push`` does: checked, sent in CRC-checked frames, read back; the
transport is the virtual timer's in-process loopback with the same 0.2 % byte
faults, so simulated time stands still while the host talks), and
the timer shows its next predicted contact and countdown.  The contact times
are pressed in simulated time; 90 s after the last one the navigator holds the
button for the on-board fix, and the timer reduces the session itself (no
notes: it identifies every contact).  The demo prints the timer's display at
three moments and compares its fix with the host's.  Then the host syncs the log over the pseudo-terminal
(whose link damages 0.2 % of the bytes) into a fresh archive, syncs again to
show that nothing is stored twice, attaches conditions, instrument and DR track to the
session, reduces it (``engine.reduce_session``), stores the fix, draws the
plotting sheet and contact timeline, writes CSV, GPX and GeoJSON, and prints
the fix against the truth.  When the virtual timer is not available the demo
says so and stores the contacts in the archive directly.
"""
import json
import os
import random
import sys
import time

from engine import almanac, instrument, model, plan, sphere, timescale
from engine.angles import cosd, fmt_lat, fmt_lon
from host import archive, exports
from host.cautions import CAUTION_TEXT

SEED = 20320118
SHIP = "Grey Petrel"
PASSAGE = "Brest toward A Coruna, Bay of Biscay"
DAY = "2032-01-18"
PLATE_ANGLES_DEG = (2.85, 4.40)          # nominal X, Y
TRUE_PLATE_ANGLES_DEG = (2.8509, 4.3993)  # as made (the calibration found these, within its noise)
CALIBRATION_SIGMA_ARCMIN = 0.25
OBSERVER = {"eye_height_m": 2.6, "temperature_c": 9.0, "pressure_hpa": 1021.0}
TRUE_TRACK = {"utc": DAY + "T08:00:00Z", "lat_deg": 45.0 + 41.0 / 60, "lon_deg": -(5.0 + 52.0 / 60),
              "course_deg": 208.0, "speed_kn": 5.8, "known": True}
DR_TRACK = {"utc": DAY + "T08:00:00Z", "lat_deg": 45.0 + 44.0 / 60, "lon_deg": -(5.0 + 47.5 / 60),
            "course_deg": 207.0, "speed_kn": 5.7, "known": False}
REACTION_S = 0.20
TIMING_SIGMA_S = 0.30
ALTITUDE_SIGMA_ARCMIN = 0.40
UNLABELLED = 3
DEVICE_ID = "LC-DEMO-07"
LINK_FAULTS = 0.002          # fraction of serial bytes the virtual link drops or corrupts
SWITCH_ON_S = 25 * 60        # the timer is switched on this long before the first contact
FIX_AFTER_S = 90             # the navigator holds the button for the on-board fix this long after the last contact


_OUT = [sys.stdout]


def say(msg=""):
    _OUT[0].write(msg + "\n")
    _OUT[0].flush()


def build_instrument():
    """(instrument dict as the navigator has it, true deviations by image id)."""
    nominal = instrument.ladder(list(PLATE_ANGLES_DEG), max_order=2, shade_od=4.0)
    true = instrument.ladder(list(TRUE_PLATE_ANGLES_DEG), max_order=2, shade_od=4.0)
    rng = random.Random(SEED + 1)
    true_dev = {}
    images = []
    for a, b in zip(nominal.images, true.images):
        if a.faint:
            continue
        true_dev[a.id] = b.deviation_deg
        cal = b.deviation_deg + rng.gauss(0.0, CALIBRATION_SIGMA_ARCMIN) / 60.0
        images.append(instrument.InstrumentImage(a.id, round(cal, 4), CALIBRATION_SIGMA_ARCMIN, "calibrated",
                                                 "2032-01-11T10:30:00Z", list(a.coef)))
    inst = instrument.Instrument(images, "Grey Petrel three-plate stack", list(PLATE_ANGLES_DEG), REACTION_S, 0.1)
    return inst.to_dict(), true_dev


def _track(d):
    return model.Track(timescale.parse_utc(d["utc"]), d["lat_deg"], d["lon_deg"], d["course_deg"], d["speed_kn"],
                       d.get("known", False))


def contact_times(alm, true_dev):
    """The scenario's timed contacts: list of dicts ``utc_us, body, limb, image (true), note (label)``."""
    obs = model.Observer(OBSERVER["eye_height_m"], OBSERVER["temperature_c"], OBSERVER["pressure_hpa"])
    t0 = timescale.parse_utc(DAY + "T07:30:00Z")
    t1 = timescale.parse_utc(DAY + "T17:30:00Z")
    images = [(iid, dev) for iid, dev in sorted(true_dev.items())]
    found = plan.schedule(alm, images, _track(TRUE_TRACK), obs, t0, t1, bodies=("sun",), limbs=("lower",))
    rng = random.Random(SEED)
    out = []
    for c in found:
        rate = abs(c.rate_arcmin_per_s)
        if rate < 0.03:            # too close to noon: the navigator does not wait for such a slow contact
            continue
        dt_s = REACTION_S + rng.gauss(0.0, TIMING_SIGMA_S) + rng.gauss(0.0, ALTITUDE_SIGMA_ARCMIN) / rate * \
            (1 if c.direction == "rising" else -1)
        out.append({"utc_us": c.t_us + int(round(dt_s * 1e6)), "body": c.body, "limb": c.limb, "image": c.image,
                    "note": c.image, "direction": c.direction, "zn_deg": c.zn_deg})
    # the navigator's notes: three without a label, one with the neighbouring image's label
    idx = list(range(len(out)))
    rng.shuffle(idx)
    for k in idx[:UNLABELLED]:
        out[k]["note"] = None
    ids = [iid for iid, _ in images]
    k = idx[UNLABELLED]
    j = ids.index(out[k]["image"])
    out[k]["note"] = ids[j + 1] if j + 1 < len(ids) else ids[j - 1]
    out.sort(key=lambda c: c["utc_us"])
    return out


def truth_at(t_us):
    return _track(TRUE_TRACK).position_at(t_us)


def _timer_session(contacts, inst):
    """The session file the virtual timer presses from (times only; the timer knows no images)."""
    return {"format": "limbclock-session/1", "observer": OBSERVER,
            "instrument": {"images": [{"id": im["id"], "deviation_deg": im["deviation_deg"]} for im in inst["images"]]},
            "track": DR_TRACK,
            "contacts": [{"utc": timescale.format_utc(c["utc_us"], 6), "body": c["body"], "limb": c["limb"],
                          "image": None} for c in contacts]}


def _show_display(when, lines):
    say("  [timer %s] %s" % (when, " | ".join(lines)))


def _timer_day(session_path, inst_path, state_dir, db_path, expect):
    """The virtual timer's day: the host pushes the instrument and the session's DR track + observer
    over the link (``host.sync.push``, what ``limbclock push`` does), the timer shows the next contact
    while the navigator presses the button at the contacts, then the fix gesture (an 8-11 s hold)
    reduces on board; last the host syncs the log over a pseudo-terminal.  Returns ``(sync summary,
    timer dict)``, or ``(None, None)`` when the virtual timer is not available in this build."""
    try:
        from device.sim import VirtualTimer
        from host import sync
        from host.timer_client import TimerClient
    except ImportError as exc:
        say("  (virtual timer not available in this build: %s)" % exc)
        return None, None
    with open(session_path, "r", encoding="utf-8") as f:
        text = f.read()
    presses = json.loads(text)["contacts"]
    first_us = timescale.parse_utc(presses[0]["utc"])
    last_us = timescale.parse_utc(presses[-1]["utc"])
    fix_at_us = last_us + FIX_AFTER_S * 1000000
    vt = VirtualTimer(session=text, state_dir=state_dir, device_id=DEVICE_ID, link_faults=LINK_FAULTS, seed=SEED,
                      fix_at_us=fix_at_us, start_us=first_us - SWITCH_ON_S * 1000000)
    vt.advance_to(vt.start_us + 30000000)            # switched on: the clock locks to GPS
    client = TimerClient(vt.loopback())               # the same frames and link faults as the serial port
    timer = {"pushed": [], "display": []}
    for slot, path in (("instrument", inst_path), ("track", session_path)):
        with open(path, "rb") as f:
            res = sync.push(client, slot, f.read())
        timer["pushed"].append({"slot": slot, "size": res["size"], "crc32": res["crc32"]})
        say("  pushed %s (%s, %d bytes) over the link: read back and verified, CRC-32 %s"
            % (slot, os.path.basename(path), res["size"], res["crc32"]))
    timer["retried"] = client.retried

    def look(when):
        lines = list(client.status()["display"])
        timer["display"].append({"when": when, "utc": timescale.format_utc(vt.now_us(), 0), "lines": lines})
        _show_display(when, lines)
    look("before the first contact")
    mid = presses[len(presses) // 3]
    vt.advance_to(timescale.parse_utc(mid["utc"]) + 60000000)
    look("a minute after a contact")
    vt.advance_to(fix_at_us + 20000000)              # the last presses, then the fix gesture
    look("after the fix gesture")
    st = client.status()
    timer["onboard_fix"] = st["onboard_fix"]
    timer["onboard_fix_error"] = st["onboard_fix_error"]
    if vt.fw is not None:
        # what the timer reduced, exactly (read before the sync lets it reclaim the records)
        from device.onboard import iter_records
        log = vt.fw.log
        try:
            timer["session_text"] = vt.fw.onboard.session_text(lambda: iter_records(log), vt.fw.session)
        except ValueError:
            timer["session_text"] = None
    vt.advance_to(max(vt.now_us(), vt.end_contacts_us))
    port = vt.start()
    try:
        say("  virtual timer %s on %s: %d presses logged; the link damages %.1f %% of the bytes"
            % (DEVICE_ID, port, len(vt.contacts), 100 * LINK_FAULTS))
        total = {"new": 0, "duplicates": 0, "device": None, "syncs": 0}
        deadline = time.time() + 20.0
        while time.time() < deadline:
            summary = sync.sync_port(port, db_path, progress=False)
            total["new"] += summary["new"]
            total["duplicates"] += summary["duplicates"]
            total["device"] = summary["device"]
            total["syncs"] += 1
            conn = archive.connect(db_path)
            have = len(archive.contacts(conn))
            conn.close()
            if have >= expect:
                break
            time.sleep(0.2)
        again = sync.sync_port(port, db_path, progress=False)      # idempotent: nothing new, nothing twice
        total["again"] = {"new": again["new"], "duplicates": again["duplicates"]}
        return total, timer
    finally:
        vt.stop()


def run(out_dir="demo-out", stream=None):
    """Run the whole demo into ``out_dir``, telling the story on ``stream`` (default stdout);
    return a summary dict."""
    _OUT[0] = stream or sys.stdout
    try:
        return _run(out_dir)
    finally:
        _OUT[0] = sys.stdout


def _run(out_dir):
    t_start = time.time()
    os.makedirs(out_dir, exist_ok=True)
    alm = almanac.load()
    say("limbclock demo: the ketch %s, %s, %s (an invented scenario)" % (SHIP, PASSAGE, DAY))
    inst, true_dev = build_instrument()
    inst_path = os.path.join(out_dir, "instrument.json")
    with open(inst_path, "w", encoding="utf-8") as f:
        json.dump(inst, f, indent=1)
    say("  instrument: plates X = %.2f deg, Y = %.2f deg, %d images %s"
        % (PLATE_ANGLES_DEG[0], PLATE_ANGLES_DEG[1], len(inst["images"]),
           " ".join("%s=%.2f" % (im["id"], im["deviation_deg"]) for im in inst["images"])))
    contacts = contact_times(alm, true_dev)
    say("  %d Sun lower-limb contacts timed between %s and %s (%d unlabelled, 1 mislabelled in the notes)"
        % (len(contacts), timescale.format_utc(contacts[0]["utc_us"], 0)[11:19],
           timescale.format_utc(contacts[-1]["utc_us"], 0)[11:19], UNLABELLED))

    timer_session = os.path.join(out_dir, "timer-presses.json")
    with open(timer_session, "w", encoding="utf-8") as f:
        json.dump(_timer_session(contacts, inst), f, indent=1)
    db_path = os.path.join(out_dir, "archive.sqlite3")
    for suffix in ("", "-wal", "-shm"):
        if os.path.exists(db_path + suffix):
            os.remove(db_path + suffix)
    state_dir = os.path.join(out_dir, "timer-state")
    if os.path.isdir(state_dir):
        import shutil
        shutil.rmtree(state_dir)
    say("step 1: the timer: instrument and DR track pushed, button presses, on-board fix, sync over the serial link")
    summary, timer = _timer_day(timer_session, inst_path, state_dir, db_path, len(contacts))
    conn = archive.connect(db_path)
    if summary is None:
        say("  storing the contacts in the archive directly instead")
        with archive.transaction(conn):
            archive.ensure_device(conn, DEVICE_ID)
            archive.store_records(conn, DEVICE_ID, [
                {"seq": k, "kind": "contact", "utc_us": c["utc_us"], "body": c["body"], "limb": c["limb"],
                 "session": 1, "quality": "locked", "uncertainty_us": 2} for k, c in enumerate(contacts)])
        summary = {"new": len(contacts), "duplicates": 0, "device": DEVICE_ID, "via": "direct"}
    else:
        summary["via"] = "virtual timer"
        say("  synced: %d new records, %d duplicates from timer %s" % (summary["new"], summary["duplicates"],
                                                                      summary["device"]))
        say("  synced again: %d new, %d duplicates" % (summary["again"]["new"], summary["again"]["duplicates"]))

    say("step 2: the session in the archive, with conditions, instrument, DR track and the notes")
    sessions = archive.refresh_sessions(conn)
    s = max(sessions, key=lambda r: r["contacts"])
    sid = s["session_id"]
    with archive.transaction(conn):
        iid = archive.add_instrument(conn, inst)
    archive.attach_conditions(conn, sid, OBSERVER, DR_TRACK, iid)
    rows = archive.session_contacts(conn, s)
    labels = {}
    for row in rows:       # the notes go with the timer's stamps (nearest scenario contact)
        c = min(contacts, key=lambda c: abs(c["utc_us"] - row["utc_us"]))
        labels[row["seq"]] = c["note"]
    archive.set_image_labels(conn, s["device_id"], labels)
    session_path = os.path.join(out_dir, "session.json")
    with open(session_path, "w", encoding="utf-8") as f:
        f.write(archive.session_text(conn, sid) + "\n")
    say("  session %d: %d contacts, written to %s" % (sid, len(rows), session_path))

    say("step 3: identification and fix")
    from host.cmd_archive import fix_session, print_fix
    fix_id, result = fix_session(conn, sid)
    t_fix = timescale.parse_utc(result["utc"])
    true_lat, true_lon = truth_at(t_fix)
    err_nm = sphere.distance_nm(result["lat_deg"], result["lon_deg"], true_lat, true_lon)
    inside = _inside_ellipse(result, true_lat, true_lon)
    print_fix(result, out=_OUT[0], indent="  ")
    dr = result.get("dr") or {}
    dr_err = sphere.distance_nm(dr["lat_deg"], dr["lon_deg"], true_lat, true_lon) if dr else None
    images = result.get("images") or []
    ok_id = sum(1 for c, got in zip(contacts, images) if got == c["image"])
    say("  image labels after identification: %d of %d match the truth" % (ok_id, len(contacts)))
    onboard = _compare_onboard(timer, result, session_path)

    say("step 4: plots and exports in %s" % out_dir)
    from host import plots
    obs = model.Observer(OBSERVER["eye_height_m"], OBSERVER["temperature_c"], OBSERVER["pressure_hpa"])
    predicted = plan.schedule(alm, [(im["id"], im["deviation_deg"]) for im in inst["images"]], _track(DR_TRACK), obs,
                              contacts[0]["utc_us"] - 1800000000, contacts[-1]["utc_us"] + 600000000,
                              bodies=("sun",), limbs=("lower",))
    title = "%s, %s: fix at %sZ" % (SHIP, DAY, result["utc"][11:19])
    written = [plots.plotting_sheet(result, os.path.join(out_dir, "plotting-sheet.png"), track=DR_TRACK,
                                    truth=(true_lat, true_lon), title="Plotting sheet \u2014 " + title),
               plots.plotting_sheet(result, os.path.join(out_dir, "plotting-sheet.svg"), track=DR_TRACK,
                                    truth=(true_lat, true_lon), title="Plotting sheet \u2014 " + title),
               plots.contact_timeline(result, os.path.join(out_dir, "contact-timeline.png"),
                                      predicted=[p.to_dict() for p in predicted],
                                      title="Contact timeline \u2014 " + title)]
    written += exports.write_all(conn, csv_dir=out_dir, gpx_path=os.path.join(out_dir, "fixes.gpx"),
                                 geojson_path=os.path.join(out_dir, "fixes.geojson"))
    with open(os.path.join(out_dir, "fix.json"), "w", encoding="utf-8") as f:
        json.dump(dict(result, fix_id=fix_id), f, indent=1)
    written.append(os.path.join(out_dir, "fix.json"))
    for p in written:
        say("  wrote %s" % p)

    say("")
    say("against the scenario's truth at %s: %s %s" % (result["utc"], fmt_lat(true_lat, 2), fmt_lon(true_lon, 2)))
    say("  fix error %.2f nmi, %s the 95%% ellipse%s" % (
        err_nm, "inside" if inside else "OUTSIDE", "" if dr_err is None else "; the DR alone was %.2f nmi off" % dr_err))
    if onboard and onboard["fix"]:
        ob_err = sphere.distance_nm(onboard["fix"]["lat_deg"], onboard["fix"]["lon_deg"], true_lat, true_lon)
        onboard["error_nm"] = ob_err
        say("  the timer's own fix: error %.2f nmi, %s its 95%% ellipse" % (
            ob_err, "inside" if _inside_ellipse(onboard["fix"], true_lat, true_lon) else "OUTSIDE"))
    elapsed = time.time() - t_start
    say("  (demo wall time %.1f s)" % elapsed)
    say("")
    say(CAUTION_TEXT)
    conn.close()
    return {"fix": result, "error_nm": err_nm, "inside_ellipse": inside, "dr_error_nm": dr_err,
            "sync": summary, "contacts": len(contacts), "labels_correct": ok_id, "wall_s": elapsed,
            "written": written, "timer": timer, "onboard": onboard}


def _compare_onboard(timer, result, session_path):
    """Say how the timer's own fix compares with the host's fix, and with the host's reduction of
    exactly the session the timer reduced; returns ``{"fix", "error", "distance_nm",
    "same_content_nm", "reaction_delay_s"}`` (None without the virtual timer)."""
    if timer is None:
        return None
    f = timer.get("onboard_fix")
    if f is None:
        say("  the timer's own fix failed: %s" % timer.get("onboard_fix_error"))
        return {"fix": None, "error": timer.get("onboard_fix_error"), "distance_nm": None,
                "same_content_nm": None, "reaction_delay_s": None}
    d_nm = sphere.distance_nm(f["lat_deg"], f["lon_deg"], result["lat_deg"], result["lon_deg"])
    say("  the timer's own fix: %s %s at %sZ, %d contacts used, %d rejected (it has no notes: it identified "
        "every contact itself)" % (fmt_lat(f["lat_deg"], 2), fmt_lon(f["lon_deg"], 2), f["utc"][11:19],
                                   f["contacts_used"], f["rejected"]))
    same_nm = None
    if timer.get("session_text"):
        import engine
        r = engine.reduce_session(timer["session_text"])
        same_nm = sphere.distance_nm(f["lat_deg"], f["lon_deg"], r["lat_deg"], r["lon_deg"])
    with open(session_path, "r", encoding="utf-8") as fh:
        archived = json.load(fh)["instrument"]
    delay_s = None
    if timer.get("session_text"):
        delay_s = json.loads(timer["session_text"])["instrument"].get("reaction_delay_s")
    why = ""
    if delay_s and "reaction_delay_s" not in archived:
        # the Sun's hour angle turns 15 deg/h = 0.25'/s; one arcminute of longitude is cos(lat) nmi
        shift_nm = delay_s * 0.25 * cosd(f["lat_deg"])
        why = ": the timer applies the pushed instrument's %.1f s reaction delay, the archive's session file " \
              "carries none (0.25'/s of the Sun's hour angle: %.3f nmi of longitude here)" % (delay_s, shift_nm)
    say("  %.3f nmi from the host's fix%s" % (d_nm, why))
    if same_nm is not None:
        say("  %.3f nmi from the host's reduction of the very session the timer reduced" % same_nm)
    return {"fix": f, "error": None, "distance_nm": d_nm, "same_content_nm": same_nm, "reaction_delay_s": delay_s}


def _inside_ellipse(result, lat, lon):
    """Is the position inside the 95 % ellipse of the fix? (Mahalanobis form of the ellipse)"""
    from engine.angles import sind
    e = result.get("ellipse_95")
    if not e:
        return False
    n, east = sphere.offset_nm(result["lat_deg"], result["lon_deg"], lat, lon)
    th = e["major_axis_deg"]
    u = n * cosd(th) + east * sind(th)          # along the major axis
    v = -n * sind(th) + east * cosd(th)         # along the minor axis
    return (u / e["major_nm"]) ** 2 + (v / e["minor_nm"]) ** 2 <= 1.0
