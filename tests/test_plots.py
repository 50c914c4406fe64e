"""Plots are produced and well formed: PNG signature and size (PNG specification, ISO/IEC
15948:2004 section 5.2: the 8-byte signature 89 50 4E 47 0D 0A 1A 0A, then an IHDR chunk
with width and height), SVG parses as XML in the SVG namespace (W3C SVG 1.1), and every
plot carries the cautions (host/cautions.py)."""
import struct
import xml.etree.ElementTree as ET

import pytest

from host import plots
from test_exports import FIX, TRACK

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
SVG = "{http://www.w3.org/2000/svg}"

FIX_FULL = dict(FIX, dr={"lat_deg": 41.33, "lon_deg": -9.80},
                contacts=[dict(c, sigma_nm=0.5, body="moon" if k == 1 else "sun",
                               limb="upper" if k == 1 else "lower") for k, c in enumerate(FIX["contacts"])])


def read(path):
    with open(path, encoding="utf-8") as f:
        return f.read()


def png_size(path):
    with open(path, "rb") as f:
        head = f.read(24)
    assert head[:8] == PNG_SIGNATURE and head[12:16] == b"IHDR"
    return struct.unpack(">II", head[16:24])


def test_plotting_sheet_png_and_svg(tmp_path):
    png = plots.plotting_sheet(FIX_FULL, str(tmp_path / "sheet.png"), track=TRACK, truth=(41.31, -9.86))
    w, h = png_size(png)
    assert (w, h) == (round(8.2 * 110), round(9.4 * 110))
    assert (tmp_path / "sheet.png").stat().st_size > 20000     # a drawn chart, not an empty canvas
    svg = plots.plotting_sheet(FIX_FULL, str(tmp_path / "sheet.svg"), track=TRACK)
    root = ET.parse(svg).getroot()
    assert root.tag == SVG + "svg"
    text = read(svg)
    assert "shade glass" in text and "07:50:00 i02" in text and "(rejected)" in text
    assert "08:00:00 Moon UL i03" in text


def test_a_doubtful_fix_is_drawn_with_its_doubts(tmp_path):
    doubts = [{"code": "far_from_dr", "message": "the fix is 363 nmi from the DR, far beyond the DR's stated "
                                                 "uncertainty"},
              {"code": "likely_slip", "message": "likely slip in the DR's latitude sign"}]
    svg = plots.plotting_sheet(dict(FIX_FULL, doubts=doubts), str(tmp_path / "sheet.svg"), track=TRACK)
    text = read(svg)
    assert "DOUBTS about this fix (2)" in text and "[far_from_dr] the fix is 363 nmi" in text
    assert "[likely_slip]" in text
    many = [{"code": "c%d" % k, "message": "m%d" % k} for k in range(6)]
    text = read(plots.plotting_sheet(dict(FIX_FULL, doubts=many), str(tmp_path / "many.svg")))
    assert "[c3] m3" in text and "[c4]" not in text and "and 2 more" in text
    clean = read(plots.plotting_sheet(dict(FIX_FULL, doubts=[]), str(tmp_path / "clean.svg")))
    assert "DOUBTS" not in clean


def test_contact_timeline(tmp_path):
    pred = [{"utc": "2031-05-14T07:49:58Z", "image": "i02"}, {"utc": "2031-05-14T08:10:30Z", "image": "i04"}]
    w, h = png_size(plots.contact_timeline(FIX_FULL, str(tmp_path / "t.png"), predicted=pred))
    assert w > 800 and h > 600
    svg = plots.contact_timeline(FIX_FULL, str(tmp_path / "t.svg"))
    assert ET.parse(svg).getroot().tag == SVG + "svg"
    assert "shade glass" in read(svg)


def test_bad_extension(tmp_path):
    with pytest.raises(ValueError, match="must end in .png or .svg"):
        plots.plotting_sheet(FIX_FULL, str(tmp_path / "sheet.jpg"))


def test_sheet_is_mercator_correct():
    """On a Mercator chart a minute of longitude is cos(lat) of a minute of latitude (Bowditch,
    NGA Pub. 9, chart projections [from memory]): the axes' aspect is 1/cos(lat) and the view
    spans the same distance in nmi both ways."""
    import math
    for lat in (41.3, -55.0, 5.0):
        fix = dict(FIX_FULL, lat_deg=lat)
        ax = plots.sheet_figure(fix).axes[0]
        assert ax.get_aspect() == pytest.approx(1.0 / math.cos(math.radians(lat)), rel=1e-12)
        (x0, x1), (y0, y1) = ax.get_xlim(), ax.get_ylim()
        assert (x1 - x0) * 60 * math.cos(math.radians(lat)) == pytest.approx((y1 - y0) * 60, rel=1e-9)
        assert x0 < fix["lon_deg"] < x1 and y0 < lat < y1


def test_sheet_across_the_antimeridian():
    """A fix at 179 deg 59' E: every drawn longitude is continuous with the fix's (no line
    wrapping round the world), and the tick labels read E on one side and W on the other."""
    fix = dict(FIX_FULL, lat_deg=-16.5, lon_deg=179.99, dr={"lat_deg": -16.45, "lon_deg": -179.95})
    track = {"utc": "2031-05-14T06:00:00Z", "lat_deg": -16.8, "lon_deg": 179.5, "course_deg": 80.0, "speed_kn": 7.0}
    fig = plots.sheet_figure(fix, track=track, truth=(-16.52, -179.99))
    ax = fig.axes[0]
    for line in ax.lines:
        xs = [float(x) for x in line.get_xdata()]
        assert all(abs(x - 179.99) < 3.0 for x in xs), xs
    fig.canvas.draw()
    labels = [t.get_text() for t in ax.get_xticklabels() if t.get_text()]
    assert any(lab.endswith("E") for lab in labels) and any(lab.endswith("W") for lab in labels), labels
