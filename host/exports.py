"""Exports: CSV of contacts and fixes, GPX 1.1, GeoJSON (RFC 7946), JSON of the archive.

Core functions take plain values (rows as dicts, fix result dicts in the
``limbclock-fix/1`` shape, track dicts in the session-file shape) and return
text; ``write_all`` reads an archive and writes the files.

Geometry
--------
- A line of position at the fix epoch is the line perpendicular to the
  contact's azimuth ``zn_deg`` through the point ``residual_nm`` from the fix
  toward ``zn_deg`` (Marcq St Hilaire; ``engine.fix.lop_points``); exported
  ``LOP_HALF_LENGTH_NM`` each side of that point.
- The 95 % ellipse has semi-axes ``major_nm``/``minor_nm`` and its major axis
  at ``major_axis_deg`` true; exported as a closed ring of ``ELLIPSE_POINTS``.
- Local offsets in nmi go to latitude/longitude with ``engine.sphere.move_nm``;
  the DR track with ``engine.sphere.dr_position`` (rhumb line).

GeoJSON coordinates are ``[lon, lat]`` (RFC 7946 section 3.1.1), rings are
closed and counter-clockwise (section 3.1.6).  GPX is version 1.1 in the
namespace ``http://www.topografix.com/GPX/1/1`` (fixes as ``wpt``, the DR
track as ``trk``).
"""
import csv
import io
import json
import math
from xml.sax.saxutils import escape, quoteattr

from engine import sphere, timescale
from engine.fix import lop_points
from engine.angles import cosd, fmt_lat, fmt_lon, norm180, sind

GPX_NS = "http://www.topografix.com/GPX/1/1"
LOP_HALF_LENGTH_NM = 4.0
ELLIPSE_POINTS = 72
TRACK_STEP_S = 300

CONTACT_COLUMNS = ("device", "seq", "utc", "body", "limb", "session_no", "image", "void",
                   "time_quality", "time_uncertainty_us", "log_id")
FIX_COLUMNS = ("fix_id", "session_id", "utc", "lat_deg", "lon_deg", "lat", "lon", "major_nm", "minor_nm",
               "major_axis_deg", "contacts_used", "rejected", "sigma0")


# --------------------------------------------------------------------------- geometry

def ellipse_points(fix, npoints=ELLIPSE_POINTS, ellipse=None):
    """Closed ring (first point repeated last) of (lat_deg, lon_deg) on the 95 % ellipse,
    counter-clockwise seen from above (north up, east right)."""
    e = ellipse or fix["ellipse_95"]
    a, b, th = e["major_nm"], e["minor_nm"], e["major_axis_deg"]
    ring = []
    for k in range(npoints):
        # parameter runs counter-clockwise in the (east, north) plane
        u = 2.0 * math.pi * k / npoints
        pa, pb = a * math.cos(u), b * math.sin(u)
        # major axis unit vector (north, east) = (cos th, sin th); minor axis 90 deg to its left
        # in the (east, north) plane, i.e. (north, east) = (sin th, -cos th)
        north = pa * cosd(th) + pb * sind(th)
        east = pa * sind(th) - pb * cosd(th)
        ring.append(sphere.move_nm(fix["lat_deg"], fix["lon_deg"], north, east))
    ring.append(ring[0])
    return ring


def track_points(track, t_from_us, t_to_us, step_s=TRACK_STEP_S):
    """DR positions ``[(t_us, lat_deg, lon_deg)]`` from ``t_from_us`` to ``t_to_us`` along
    a session-file track dict (rhumb line at constant course and speed)."""
    t0 = timescale.parse_utc(track["utc"])
    if t_to_us < t_from_us:
        t_from_us, t_to_us = t_to_us, t_from_us
    out = []
    t = t_from_us
    step = step_s * 1000000
    while True:
        lat, lon = sphere.dr_position(track["lat_deg"], track["lon_deg"], track.get("course_deg", 0.0),
                                      track.get("speed_kn", 0.0), t - t0)
        out.append((t, lat, lon))
        if t >= t_to_us:
            break
        t = min(t + step, t_to_us)
    return out


# --------------------------------------------------------------------------- CSV

def contacts_csv(rows):
    """CSV text of archived contacts (dicts as from ``archive.contacts``)."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(CONTACT_COLUMNS)
    for c in rows:
        w.writerow((c["device_id"], c["seq"], timescale.format_utc(c["utc_us"], 6), c["body"], c["limb"],
                    "" if c["session_no"] is None else c["session_no"], c.get("image") or "",
                    int(bool(c.get("void"))), c["quality"], c["uncertainty_us"], _log(c.get("log_id", 0))))
    return buf.getvalue()


def fixes_csv(rows):
    """CSV text of stored fixes (dicts as from ``archive.fixes``: columns + ``result``)."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(FIX_COLUMNS)
    for f in rows:
        r = f["result"]
        e = r.get("ellipse_95") or {}
        w.writerow((f.get("fix_id", ""), f.get("session_id", ""), r["utc"], "%.6f" % r["lat_deg"],
                    "%.6f" % r["lon_deg"], fmt_lat(r["lat_deg"], 2), fmt_lon(r["lon_deg"], 2),
                    _num(e.get("major_nm")), _num(e.get("minor_nm")), _num(e.get("major_axis_deg"), 1),
                    r.get("contacts_used", ""), " ".join(str(i) for i in r.get("rejected", [])),
                    _num(r.get("sigma0"))))
    return buf.getvalue()


def _log(log_id):
    from host.archive import log_label
    return log_label(log_id)


def _num(v, decimals=3):
    return "" if v is None else ("%." + str(decimals) + "f") % v


# --------------------------------------------------------------------------- GPX 1.1

def gpx(fixes, tracks=(), creator="limbclock"):
    """GPX 1.1 text: each fix (result dict) a ``wpt``; each ``(name, [(t_us, lat, lon)])`` a ``trk``."""
    out = ['<?xml version="1.0" encoding="UTF-8"?>',
           '<gpx version="1.1" creator=%s xmlns="%s">' % (quoteattr(creator), GPX_NS),
           "  <metadata><name>limbclock fixes and DR track</name>"
           "<desc>Backup celestial fixes: cross-check with every other means.</desc></metadata>"]
    for k, r in enumerate(fixes):
        e = r.get("ellipse_95") or {}
        desc = "95%% ellipse %.2f x %.2f nmi, major axis %03.0f T; %s contacts used" % (
            e.get("major_nm", float("nan")), e.get("minor_nm", float("nan")), e.get("major_axis_deg", float("nan")),
            r.get("contacts_used", "?"))
        out.append('  <wpt lat="%.7f" lon="%.7f">' % (r["lat_deg"], r["lon_deg"]))
        out.append("    <time>%s</time>" % timescale.format_utc(timescale.parse_utc(r["utc"]), 3))
        out.append("    <name>%s</name>" % escape(r.get("name") or "fix %d" % (k + 1)))
        out.append("    <desc>%s</desc>" % escape(desc))
        out.append("    <sym>Waypoint</sym>")
        out.append("  </wpt>")
    for name, pts in tracks:
        out.append("  <trk><name>%s</name><trkseg>" % escape(name))
        for t_us, lat, lon in pts:
            out.append('    <trkpt lat="%.7f" lon="%.7f"><time>%s</time></trkpt>'
                       % (lat, lon, timescale.format_utc(t_us, 0)))
        out.append("  </trkseg></trk>")
    out.append("</gpx>")
    return "\n".join(out) + "\n"


# --------------------------------------------------------------------------- GeoJSON (RFC 7946)

def _ll(p):
    return [round(p[1], 7), round(p[0], 7)]


def _unwrap(points):
    """[(lat, lon)] -> [[x, y]] with x = longitude made continuous from the first point."""
    out = []
    for lat, lon in points:
        x = lon if not out else out[-1][0] + norm180(lon - out[-1][0])
        out.append([x, lat])
    return out


def _shift_into_range(part):
    """Move a piece lying on one side of the 180th meridian into [-180, 180] as a whole, so an
    end on the cut keeps the sign of its own piece (+180 for the west piece, -180 for the east)."""
    mid = sum(p[0] for p in part) / len(part)
    k = 360.0 * round(mid / 360.0)
    return [[round(x - k, 7), round(y, 7)] for x, y in part]


def _edges_between(x0, x1):
    """The cut meridians (odd multiples of 180) strictly between two unwrapped longitudes."""
    lo, hi = min(x0, x1), max(x0, x1)
    k = math.ceil((lo - 180.0) / 360.0)
    out = []
    while 180.0 + 360.0 * k < hi:
        e = 180.0 + 360.0 * k
        if e > lo:
            out.append(e)
        k += 1
    return out if x1 >= x0 else out[::-1]


def _line_geometry(points):
    """LineString of (lat, lon) points, cut at the 180th meridian into a MultiLineString
    when it crosses it (RFC 7946 section 3.1.9)."""
    xy = _unwrap(points)
    parts = [[xy[0]]]
    for a, b in zip(xy, xy[1:]):
        for e in _edges_between(a[0], b[0]):
            cut = _cross(a, b, e)
            parts[-1].append(cut)
            parts.append([list(cut)])
        parts[-1].append(b)
    parts = [_shift_into_range(p) for p in parts if len(p) > 1]
    if len(parts) == 1:
        return {"type": "LineString", "coordinates": parts[0]}
    return {"type": "MultiLineString", "coordinates": parts}


def _clip(ring, edge, keep_below):
    """Sutherland-Hodgman clip of a closed convex ring [[x, y]] to x <= edge (or x >= edge)."""
    inside = (lambda p: p[0] <= edge) if keep_below else (lambda p: p[0] >= edge)
    out = []
    pts = ring[:-1]
    for k, cur in enumerate(pts):
        prev = pts[k - 1]
        if inside(cur):
            if not inside(prev):
                out.append(_cross(prev, cur, edge))
            out.append(cur)
        elif inside(prev):
            out.append(_cross(prev, cur, edge))
    if out:
        out.append(list(out[0]))
    return out


def _cross(a, b, edge):
    f = (edge - a[0]) / (b[0] - a[0])
    return [edge, a[1] + f * (b[1] - a[1])]


def _polygon_geometry(ring_points):
    """Polygon of a small closed convex ring of (lat, lon), cut at the 180th meridian into a
    MultiPolygon when it crosses it (RFC 7946 section 3.1.9); the rings stay counter-clockwise."""
    xy = _unwrap(ring_points)
    xs = [p[0] for p in xy]
    edges = _edges_between(min(xs), max(xs))
    if edges:
        e = edges[0]
        pieces = [_shift_into_range(_clip(xy, e, True)), _shift_into_range(_clip(xy, e, False))]
        return {"type": "MultiPolygon", "coordinates": [[p] for p in pieces]}
    return {"type": "Polygon", "coordinates": [_shift_into_range(xy)]}


def geojson(fixes, tracks=()):
    """A GeoJSON FeatureCollection (dict): per fix a Point, its 95 % ellipse (Polygon) and
    one LineString per contact's line of position; per track a LineString."""
    feats = []
    for k, r in enumerate(fixes):
        name = r.get("name") or "fix %d" % (k + 1)
        e = r.get("ellipse_95")
        feats.append({"type": "Feature", "geometry": {"type": "Point", "coordinates": _ll((r["lat_deg"], r["lon_deg"]))},
                      "properties": {"kind": "fix", "name": name, "utc": r["utc"], "ellipse_95": e,
                                     "contacts_used": r.get("contacts_used")}})
        if e and e.get("major_nm") is not None:
            feats.append({"type": "Feature",
                          "geometry": _polygon_geometry(ellipse_points(r)),
                          "properties": {"kind": "ellipse_95", "name": name}})
        for c in r.get("contacts", []):
            if c.get("residual_nm") is None or c.get("zn_deg") is None:
                continue
            a, b = lop_points(r, c, LOP_HALF_LENGTH_NM)
            feats.append({"type": "Feature", "geometry": _line_geometry([a, b]),
                          "properties": {"kind": "lop", "fix": name, "index": c.get("index"), "utc": c.get("utc"),
                                         "image": c.get("image"), "zn_deg": c["zn_deg"],
                                         "residual_nm": c["residual_nm"], "used": c.get("used", True)}})
    for name, pts in tracks:
        feats.append({"type": "Feature", "geometry": _line_geometry([(p[1], p[2]) for p in pts]),
                      "properties": {"kind": "dr_track", "name": name,
                                     "utc_from": timescale.format_utc(pts[0][0], 0),
                                     "utc_to": timescale.format_utc(pts[-1][0], 0)}})
    return {"type": "FeatureCollection", "features": feats}


# --------------------------------------------------------------------------- from the archive

def archive_json(conn):
    """The whole archive as one JSON-ready dict: devices, contacts, sessions, fixes."""
    from host import archive
    contacts = []
    for c in archive.contacts(conn):
        contacts.append({"utc": timescale.format_utc(c["utc_us"], 6), "seq": c["seq"], "device": c["device_id"],
                         "log_id": _log(c["log_id"]), "void": c["void"], "body": c["body"], "limb": c["limb"],
                         "session_no": c["session_no"], "image": c["image"], "time_quality": c["quality"],
                         "time_uncertainty_us": c["uncertainty_us"]})
    sessions = []
    for s in archive.sessions(conn):
        sessions.append({"session_id": s["session_id"], "device": s["device_id"], "log_id": _log(s["log_id"]),
                         "session_no": s["session_no"],
                         "first_utc": timescale.format_utc(s["first_us"], 3),
                         "last_utc": timescale.format_utc(s["last_us"], 3), "contacts": s["contacts"],
                         "observer": json.loads(s["observer"]) if s["observer"] else None,
                         "track": json.loads(s["track"]) if s["track"] else None,
                         "instrument_id": s["instrument_id"], "fixes": s["fixes"]})
    fixes = [dict(f["result"], fix_id=f["fix_id"], session_id=f["session_id"]) for f in archive.fixes(conn)]
    logs = [{"device": g["device_id"], "log_id": _log(g["log_id"]), "origin_seq": g["origin_seq"],
             "last_seq": g["last_seq"], "missing_on_timer": [q for d, lid, q in archive.gaps(conn, g["device_id"],
                                                                                            g["log_id"])]}
            for g in archive.logs(conn)]
    return {"format": "limbclock-export/1", "devices": [
        {"device": d["device_id"], "protocol": d["protocol"], "firmware": d["firmware"], "last_seq": d["last_seq"]}
        for d in archive.devices(conn)], "logs": logs, "contacts": contacts, "sessions": sessions, "fixes": fixes}


def session_tracks(conn):
    """``[(name, points)]`` DR tracks of sessions that have a track, over their contacts' span."""
    from host import archive
    out = []
    for s in archive.sessions(conn):
        if not s["track"]:
            continue
        tr = json.loads(s["track"])
        last = s["last_us"]
        for f in archive.fixes(conn, s["session_id"]):
            last = max(last, f["utc_us"])
        out.append(("DR session %d (%s #%s)" % (s["session_id"], s["device_id"], s["session_no"]),
                    track_points(tr, s["first_us"], last)))
    return out


def write_all(conn, csv_dir=None, gpx_path=None, geojson_path=None, sessions_dir=None, plots_dir=None):
    """Write the requested files; return the list of paths written.  ``sessions_dir``: one
    ``limbclock-session/1`` file per session whose conditions are attached; ``plots_dir``: the
    plotting sheet and contact timeline (PNG) of every stored fix."""
    import os
    from host import archive
    written = []
    if plots_dir:
        from host import plots
        os.makedirs(plots_dir, exist_ok=True)
        for f in archive.fixes(conn):
            s = archive.get_session(conn, f["session_id"])
            track = json.loads(s["track"]) if s["track"] else None
            title = "fix %d (session %d, timer %s) at %s" % (f["fix_id"], f["session_id"], s["device_id"],
                                                             f["result"]["utc"])
            written.append(plots.plotting_sheet(f["result"], os.path.join(plots_dir, "sheet-%d.png" % f["fix_id"]),
                                                track=track, title="Plotting sheet: " + title))
            written.append(plots.contact_timeline(f["result"], os.path.join(plots_dir, "timeline-%d.png" % f["fix_id"]),
                                                  title="Contact timeline: " + title))
    if sessions_dir:
        os.makedirs(sessions_dir, exist_ok=True)
        for s in archive.sessions(conn):
            if s["observer"] is None or s["track"] is None or s["instrument_id"] is None:
                continue
            path = os.path.join(sessions_dir, "session-%d.json" % s["session_id"])
            with open(path, "w", encoding="utf-8") as f:
                f.write(archive.session_text(conn, s["session_id"]) + "\n")
            written.append(path)
    fx = archive.fixes(conn)
    results = [dict(f["result"], name="fix %d (session %d)" % (f["fix_id"], f["session_id"])) for f in fx]
    tracks = session_tracks(conn)
    if csv_dir:
        os.makedirs(csv_dir, exist_ok=True)
        for name, text in (("contacts.csv", contacts_csv(archive.contacts(conn))), ("fixes.csv", fixes_csv(fx))):
            path = os.path.join(csv_dir, name)
            with open(path, "w", encoding="utf-8", newline="") as f:
                f.write(text)
            written.append(path)
    if gpx_path:
        with open(gpx_path, "w", encoding="utf-8") as f:
            f.write(gpx(results, tracks))
        written.append(gpx_path)
    if geojson_path:
        with open(geojson_path, "w", encoding="utf-8") as f:
            json.dump(geojson(results, tracks), f, indent=1)
        written.append(geojson_path)
    return written
