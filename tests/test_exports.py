"""Exports: GPX 1.1 structure and namespace, GeoJSON (RFC 7946) geometry types, coordinate
order and ring rules, CSV columns, and the geometry of lines of position and ellipses.

Outside references:
- GPX 1.1 schema, http://www.topografix.com/GPX/1/1/gpx.xsd: root ``gpx`` with
  ``version="1.1"`` and ``creator``, namespace ``http://www.topografix.com/GPX/1/1``;
  ``wpt``/``trkpt`` carry ``lat`` in [-90, 90] and ``lon`` in [-180, 180).
- RFC 7946 (GeoJSON): positions are [longitude, latitude] (section 3.1.1); a
  polygon ring is closed (first == last) and exterior rings counter-clockwise (3.1.6).
- Marcq St Hilaire method (Bowditch, NGA Pub. 9, ch. 20 [from memory]): the line of
  position is perpendicular to the azimuth, at the intercept from the reference
  point toward the body.
- The distance checks use the haversine formula (Sinnott, Sky & Telescope 68, 158, 1984
  [from memory]) written out here, independent of engine.sphere.
"""
import csv
import io
import json
import math
import xml.etree.ElementTree as ET

import pytest

from engine import timescale
from engine.fix import lop_points
from host import archive, exports

GPX = "{http://www.topografix.com/GPX/1/1}"

# An invented fix (demo-like numbers), every field non-zero so a swapped lat/lon shows.
FIX = {"format": "limbclock-fix/1", "utc": "2031-05-14T08:10:00.000Z", "lat_deg": 41.30, "lon_deg": -9.85,
       "ellipse_95": {"major_nm": 3.0, "minor_nm": 1.2, "major_axis_deg": 60.0}, "contacts_used": 3,
       "rejected": [2], "sigma0": 0.9,
       "contacts": [{"index": 0, "utc": "2031-05-14T07:50:00.000Z", "zn_deg": 95.0, "residual_nm": 0.6,
                     "image": "i02", "used": True},
                    {"index": 1, "utc": "2031-05-14T08:00:00.000Z", "zn_deg": 140.0, "residual_nm": -0.3,
                     "image": "i03", "used": True},
                    {"index": 2, "utc": "2031-05-14T08:10:00.000Z", "zn_deg": 200.0, "residual_nm": 5.5,
                     "image": None, "used": False}]}
TRACK = {"utc": "2031-05-14T06:00:00Z", "lat_deg": 41.0, "lon_deg": -10.2, "course_deg": 45.0, "speed_kn": 6.0}


def haversine_nm(lat1, lon1, lat2, lon2):
    p1, p2 = math.radians(lat1), math.radians(lat2)
    a = math.sin((p2 - p1) / 2) ** 2 + math.cos(p1) * math.cos(p2) * math.sin(math.radians(lon2 - lon1) / 2) ** 2
    return 2 * math.asin(math.sqrt(a)) * 180 / math.pi * 60


def bearing_deg(lat1, lon1, lat2, lon2):
    p1, p2, dl = math.radians(lat1), math.radians(lat2), math.radians(lon2 - lon1)
    return math.degrees(math.atan2(math.sin(dl) * math.cos(p2),
                                   math.cos(p1) * math.sin(p2) - math.sin(p1) * math.cos(p2) * math.cos(dl))) % 360


def test_gpx_is_gpx_1_1():
    t0 = timescale.parse_utc(TRACK["utc"])
    pts = exports.track_points(TRACK, t0, t0 + 3600 * 1000000)
    root = ET.fromstring(exports.gpx([FIX], [("DR", pts)]))
    assert root.tag == GPX + "gpx" and root.get("version") == "1.1" and root.get("creator")
    wpts = root.findall(GPX + "wpt")
    assert len(wpts) == 1
    assert float(wpts[0].get("lat")) == pytest.approx(41.30, abs=1e-7)
    assert float(wpts[0].get("lon")) == pytest.approx(-9.85, abs=1e-7)
    assert wpts[0].find(GPX + "time").text == "2031-05-14T08:10:00.000Z"
    trkpts = root.findall(GPX + "trk/" + GPX + "trkseg/" + GPX + "trkpt")
    assert len(trkpts) == 13      # every 5 minutes for an hour, both ends
    for p in wpts + trkpts:
        assert -90 <= float(p.get("lat")) <= 90 and -180 <= float(p.get("lon")) < 180
    # one hour at 6 kn on 045: 6 nmi from the start, bearing 045 (rhumb ~ great circle here)
    first, last = trkpts[0], trkpts[-1]
    d = haversine_nm(float(first.get("lat")), float(first.get("lon")), float(last.get("lat")), float(last.get("lon")))
    assert d == pytest.approx(6.0, abs=0.01)
    assert bearing_deg(float(first.get("lat")), float(first.get("lon")),
                       float(last.get("lat")), float(last.get("lon"))) == pytest.approx(45.0, abs=0.1)


def test_gpx_escapes_names():
    root = ET.fromstring(exports.gpx([dict(FIX, name="fix <A> & B")]))
    assert root.find(GPX + "wpt/" + GPX + "name").text == "fix <A> & B"


def shoelace(ring):
    return sum(a[0] * b[1] - b[0] * a[1] for a, b in zip(ring, ring[1:])) / 2


def test_geojson_types_order_and_rings():
    gj = json.loads(json.dumps(exports.geojson([FIX])))
    kinds = [(f["geometry"]["type"], f["properties"]["kind"]) for f in gj["features"]]
    assert kinds == [("Point", "fix"), ("Polygon", "ellipse_95")] + [("LineString", "lop")] * 3
    assert gj["features"][0]["geometry"]["coordinates"] == [-9.85, 41.30]    # RFC 7946: lon, lat
    ring = gj["features"][1]["geometry"]["coordinates"][0]
    assert ring[0] == ring[-1] and len(ring) == exports.ELLIPSE_POINTS + 1
    assert shoelace(ring) > 0                                                # counter-clockwise
    # the ellipse: farthest points at major_nm along 060/240, nearest at minor_nm along 150/330
    dists = [(haversine_nm(41.30, -9.85, p[1], p[0]), bearing_deg(41.30, -9.85, p[1], p[0])) for p in ring[:-1]]
    far, near = max(dists), min(dists)
    assert far[0] == pytest.approx(3.0, abs=0.005) and far[1] % 180 == pytest.approx(60.0, abs=0.2)
    assert near[0] == pytest.approx(1.2, abs=0.005) and near[1] % 180 == pytest.approx(150.0, abs=0.2)


def test_lop_is_perpendicular_to_azimuth_at_the_residual():
    for c in FIX["contacts"]:
        a, b = lop_points(FIX, c, exports.LOP_HALF_LENGTH_NM)
        mid = lop_points(FIX, c, half_length_nm=0.0)[0]
        # the foot of the line lies residual_nm from the fix toward Zn (away if negative)
        d = haversine_nm(FIX["lat_deg"], FIX["lon_deg"], mid[0], mid[1])
        assert d == pytest.approx(abs(c["residual_nm"]), abs=0.002)
        toward = c["zn_deg"] if c["residual_nm"] > 0 else (c["zn_deg"] + 180) % 360
        assert bearing_deg(FIX["lat_deg"], FIX["lon_deg"], mid[0], mid[1]) == pytest.approx(toward, abs=0.1)
        # the line runs at Zn +- 90 and is 2 * LOP_HALF_LENGTH_NM long
        assert haversine_nm(a[0], a[1], b[0], b[1]) == pytest.approx(2 * exports.LOP_HALF_LENGTH_NM, abs=0.01)
        assert (bearing_deg(a[0], a[1], b[0], b[1]) - c["zn_deg"]) % 180 == pytest.approx(90.0, abs=0.1)


def read_csv(path):
    with io.open(path, encoding="utf-8", newline="") as f:
        return list(csv.DictReader(f))


def test_csv_from_archive(tmp_path):
    conn = archive.connect(str(tmp_path / "a.sqlite3"))
    t0 = timescale.parse_utc("2031-05-14T07:50:00Z")
    with archive.transaction(conn):
        archive.ensure_device(conn, "T-9")
        archive.store_records(conn, "T-9", [
            {"seq": 0, "kind": "contact", "utc_us": t0 + 250000, "body": "sun", "limb": "lower", "session": 1,
             "quality": "locked", "uncertainty_us": 300},
            {"seq": 1, "kind": "void", "voided_seq": 0, "utc_us": t0 + 9000000}])
    sid = archive.refresh_sessions(conn)[0]["session_id"]
    archive.attach_conditions(conn, sid, track=TRACK)
    archive.store_fix(conn, sid, FIX)
    paths = exports.write_all(conn, csv_dir=str(tmp_path / "csv"), gpx_path=str(tmp_path / "x.gpx"),
                              geojson_path=str(tmp_path / "x.geojson"))
    assert len(paths) == 4
    rows = read_csv(paths[0])
    assert rows == [{"device": "T-9", "seq": "0", "utc": "2031-05-14T07:50:00.250000Z", "body": "sun",
                     "limb": "lower", "session_no": "1", "image": "", "void": "1", "time_quality": "locked",
                     "time_uncertainty_us": "300", "log_id": "legacy"}]
    fx = read_csv(paths[1])
    assert fx[0]["lat"] == "41°18.00'N" and fx[0]["lon"] == "009°51.00'W" and fx[0]["rejected"] == "2"
    root = ET.parse(paths[2]).getroot()
    assert len(root.findall(GPX + "trk")) == 1
    with open(paths[3]) as f:
        gj = json.load(f)
    assert gj["features"][-1]["properties"]["kind"] == "dr_track"
    out = exports.archive_json(conn)
    assert out["contacts"][0]["utc"] == "2031-05-14T07:50:00.250000Z"
    assert {k: out["contacts"][0][k] for k in ("seq", "device", "void", "log_id")} == \
        {"seq": 0, "device": "T-9", "void": True, "log_id": "legacy"}
    assert out["fixes"][0]["lat_deg"] == 41.30


from hypothesis import given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402


@settings(max_examples=60, deadline=None)
@given(lat=st.floats(-70, 70), lon=st.floats(-179.5, 179.5), major=st.floats(0.2, 20.0),
       ratio=st.floats(0.05, 1.0), axis=st.floats(0.0, 180.0))
def test_ellipse_ring_any_shape(lat, lon, major, ratio, axis):
    """Every ring point lies on the ellipse (x/a)^2 + (y/b)^2 = 1 in the local plane of the fix
    (measured with the haversine distance and initial bearing written out above); the ring is
    closed and counter-clockwise (RFC 7946 3.1.6)."""
    minor = major * ratio
    fix = {"lat_deg": lat, "lon_deg": lon, "ellipse_95": {"major_nm": major, "minor_nm": minor,
                                                           "major_axis_deg": axis}}
    ring = exports.ellipse_points(fix, npoints=24)
    assert ring[0] == ring[-1]
    pts = [(p[1], p[0]) for p in ring]
    # unwrap longitudes near the antimeridian before the signed area
    pts = [((x - lon + 540) % 360 - 180, y) for x, y in pts]
    assert shoelace(pts) > 0
    for p in ring[:-1]:
        d = haversine_nm(lat, lon, p[0], p[1])
        # mean of the forward and the reversed back bearing: the bearing at mid-path, where the
        # convergence of the meridians cancels to first order
        fwd = bearing_deg(lat, lon, p[0], p[1])
        back = (bearing_deg(p[0], p[1], lat, lon) + 180.0) % 360
        mid = fwd + ((back - fwd + 180.0) % 360 - 180.0) / 2
        b = math.radians(mid - axis)
        u, v = d * math.cos(b), d * math.sin(b)
        # the local plane (engine.sphere.move_nm) differs from great-circle distance and bearing by
        # the convergence of the meridians: a few metres over 20 nmi.  A point off by tol_nm moves
        # F = (u/a)^2 + (v/b)^2 by at most 2 tol_nm / b.
        tol_nm = 0.001 + 1e-4 * major
        assert abs((u / major) ** 2 + (v / minor) ** 2 - 1.0) <= 2 * tol_nm / minor


def test_geojson_cut_at_the_antimeridian():
    """RFC 7946 section 3.1.9: a geometry crossing the 180th meridian is cut in two; every
    longitude stays within [-180, 180], the rings stay closed and counter-clockwise."""
    fix = {"utc": "2031-05-14T08:10:00.000Z", "lat_deg": -16.5, "lon_deg": 179.99,
           "ellipse_95": {"major_nm": 3.0, "minor_nm": 1.0, "major_axis_deg": 80.0},
           "contacts": [{"index": 0, "utc": "2031-05-14T08:00:00.000Z", "zn_deg": 0.0, "residual_nm": 0.4},
                        {"index": 1, "utc": "2031-05-14T08:05:00.000Z", "zn_deg": 90.0, "residual_nm": -0.2}]}
    t0 = timescale.parse_utc("2031-05-14T06:00:00Z")
    track = {"utc": "2031-05-14T06:00:00Z", "lat_deg": -16.6, "lon_deg": 179.9, "course_deg": 80.0, "speed_kn": 7.0}
    gj = exports.geojson([fix], [("DR", exports.track_points(track, t0, t0 + 2 * 3600 * 1000000))])
    geoms = [f["geometry"] for f in gj["features"]]
    assert [g["type"] for g in geoms] == ["Point", "MultiPolygon", "MultiLineString", "LineString",
                                          "MultiLineString"]
    ell = geoms[1]["coordinates"]
    for (ring,) in ell:
        assert ring[0] == ring[-1] and shoelace(ring) > 0
        assert all(-180.0 <= x <= 180.0 for x, _ in ring)
    assert max(x for x, _ in ell[0][0]) == 180.0 and min(x for x, _ in ell[1][0]) == -180.0
    for g in (geoms[2], geoms[4]):                 # the E-W line of position, the DR track
        west, east = g["coordinates"]
        assert west[-1][0] == 180.0 and east[0][0] == -180.0 and west[-1][1] == east[0][1]
        assert all(-180.0 <= x <= 180.0 for part in (west, east) for x, _ in part)
    assert geoms[3]["coordinates"][0][0] > 179.9     # the N-S line stays whole, west of the cut
