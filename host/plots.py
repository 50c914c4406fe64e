"""Plots: the plotting sheet around a fix and the contact timeline (matplotlib, Agg, PNG/SVG).

Figures are built with ``matplotlib.figure.Figure`` and an Agg canvas, so no
global pyplot state or display is involved; the file type follows the
extension (``.png`` or ``.svg``).  Every figure carries the cautions.

Plotting sheet
--------------
A local Mercator-correct chart: longitude across, latitude up, in degrees,
with the axes' aspect 1/cos(latitude of the fix) so that a nautical mile is
as long east-west as north-south (on a Mercator chart the scale of longitude
is cos(lat) of that of latitude; over a few miles that is constant).
- each line of position, at the fix epoch: perpendicular to ``zn_deg`` through
  the point ``residual_nm`` from the fix toward ``zn_deg``; labelled with the
  contact's time and image; rejected lines dashed and grey; a short arrow
  marks the direction of the body (azimuth) at the foot of each line;
- the fix, its 95 % ellipse, the DR track and the DR position at the fix
  epoch, the truth when known (the demo), a scale bar in nmi, lat/lon ticks
  in degrees and minutes.

Contact timeline
----------------
Upper panel: per image, the predicted contacts (from ``engine.plan`` at the DR
track, when given) as open marks and the timed contacts as filled marks.
Lower panel: each contact's residual from the fix (nmi along its azimuth) with
its 1-sigma error bar; rejected contacts grey.
"""
import math
import textwrap

from engine import sphere, timescale
from engine.fix import lop_points
from engine.angles import cosd, fmt_lat, fmt_lon, norm180, sind, split_dm
from host import exports
from host.cautions import CAUTION_SHORT

COLOURS = ("#1f77b4", "#d62728", "#2ca02c", "#9467bd", "#ff7f0e", "#17becf", "#8c564b", "#e377c2",
           "#7f7f7f", "#bcbd22")
REJECTED = "0.55"
UNKNOWN = "k"


def image_colour(image_id):
    """One colour per image, the same on every plot (by the image number of ids like ``i07``)."""
    if not image_id:
        return UNKNOWN
    digits = "".join(ch for ch in image_id if ch.isdigit())
    k = int(digits) - 1 if digits else sum(ord(ch) for ch in image_id)
    return COLOURS[k % len(COLOURS)]


def _figure(w_in, h_in):
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    fig = Figure(figsize=(w_in, h_in), dpi=110)
    FigureCanvasAgg(fig)
    return fig


def _save(fig, path):
    low = path.lower()
    if not (low.endswith(".png") or low.endswith(".svg")):
        from host.errors import UserError
        raise UserError("plot file %r: the name must end in .png or .svg" % path)
    fig.savefig(path, format="svg" if low.endswith(".svg") else "png")
    return path


def _cautions(fig, y=0.012):
    fig.text(0.5, y, "\n".join(textwrap.wrap(CAUTION_SHORT, 130)), ha="center", va="bottom", fontsize=6.5,
             color="0.3", style="italic")


def _hhmmss(utc):
    return utc[11:19] if isinstance(utc, str) else timescale.format_utc(utc, 0)[11:19]


def _body_limb(c):
    """'' for the Sun's lower limb (the usual case), else e.g. 'Moon UL '."""
    body = c.get("body") or "sun"
    limb = c.get("limb") or "lower"
    if body == "sun" and limb == "lower":
        return ""
    return "%s %s " % (body.capitalize(), "LL" if limb == "lower" else "UL")


def _label_spot(residual_nm, zn_deg, r_nm, placed, n):
    """Distance (nmi, signed) along a line of position from its foot for its label: the first
    candidate inside the view and farthest from the labels already placed (appended to ``placed``)."""
    n0, e0 = residual_nm * cosd(zn_deg), residual_nm * sind(zn_deg)
    best = None
    sign = 1 if n % 2 else -1
    for f in (0.5, 0.7, 0.35, 0.85, 0.6, 0.45, 0.78):
        for side in (sign, -sign):
            along = side * f * r_nm
            pn, pe = n0 - along * sind(zn_deg), e0 + along * cosd(zn_deg)
            if abs(pn) > 0.85 * r_nm or abs(pe) > 0.8 * r_nm:
                continue
            gap = min([((pn - qn) ** 2 + (pe - qe) ** 2) ** 0.5 for qn, qe in placed] or [9e9])
            if best is None or gap > best[0] + 1e-9:
                best = (gap, along, pn, pe)
            if gap >= 0.3 * r_nm:
                placed.append((pn, pe))
                return along
    if best is None:
        return sign * 0.5 * r_nm
    placed.append((best[2], best[3]))
    return best[1]


def _nice_scale(span_nm):
    """A round scale-bar length (nmi) about a quarter of ``span_nm``."""
    target = span_nm / 4.0
    for v in (0.1, 0.2, 0.25, 0.5, 1, 2, 5, 10, 20, 50, 100):
        if v >= target:
            return v
    return 100


def _dm_formatter(kind):
    from matplotlib.ticker import FuncFormatter

    def f(v, _pos):
        _sign, _d, m = split_dm(v, 1)
        text = fmt_lat(v, 1) if kind == "lat" else fmt_lon(norm180(v), 1)
        return text if m != 0 else text.replace("00.0'", "")
    return FuncFormatter(f)


def _minute_locator(span_deg):
    from matplotlib.ticker import MultipleLocator
    span_min = span_deg * 60.0
    for step in (0.5, 1, 2, 5, 10, 15, 30, 60, 120, 300):
        if span_min / step <= 7:
            return MultipleLocator(step / 60.0)
    return MultipleLocator(10.0)


def plotting_sheet(fix, path, track=None, truth=None, title=None, radius_nm=None):
    """Draw the plotting sheet of ``fix`` (a ``limbclock-fix/1`` dict) to ``path``.

    ``track``: the session's DR track dict (session-file form) or None;
    ``truth``: (lat_deg, lon_deg) of the true position at the fix epoch, or None."""
    return _save(sheet_figure(fix, track, truth, title, radius_nm), path)


def sheet_figure(fix, track=None, truth=None, title=None, radius_nm=None):
    """The plotting sheet as a matplotlib ``Figure`` (its first axes is the chart)."""
    lat0, lon0 = fix["lat_deg"], fix["lon_deg"]
    t_fix = timescale.parse_utc(fix["utc"])
    e = fix.get("ellipse_95") or {}
    contacts = fix.get("contacts") or []
    reach = [4.0, 1.6 * (e.get("major_nm") or 0.0)]
    # the view holds the used lines; a rejected line far off (a blunder) is left outside it
    reach += [abs(c["residual_nm"]) + 1.5 for c in contacts
              if c.get("residual_nm") is not None and c.get("used", True)]
    dr = fix.get("dr")
    if dr:
        reach.append(1.3 * sphere.distance_nm(lat0, lon0, dr["lat_deg"], dr["lon_deg"]) + 1.0)
    if truth:
        reach.append(1.3 * sphere.distance_nm(lat0, lon0, truth[0], truth[1]) + 1.0)
    r_nm = radius_nm or min(max(reach), 60.0)

    fig = _figure(8.2, 9.4)
    ax = fig.add_axes([0.13, 0.2, 0.80, 0.72])
    k = 1.0 / cosd(lat0)
    dlat = r_nm / 60.0
    dlon = r_nm / 60.0 * k
    def ux(lon):
        """Longitude unwrapped next to the fix's (a sheet may straddle the 180th meridian)."""
        return lon0 + norm180(lon - lon0)

    ax.set_xlim(lon0 - dlon, lon0 + dlon)
    ax.set_ylim(lat0 - dlat, lat0 + dlat)
    ax.set_aspect(k)
    ax.xaxis.set_major_locator(_minute_locator(2 * dlon))
    ax.yaxis.set_major_locator(_minute_locator(2 * dlat))
    ax.xaxis.set_major_formatter(_dm_formatter("lon"))
    ax.yaxis.set_major_formatter(_dm_formatter("lat"))
    ax.tick_params(labelsize=8)
    ax.grid(True, color="#b9d3e6", lw=0.6)
    ax.set_facecolor("#f7fbff")

    # DR track over the contacts' span, and the DR position at the fix epoch
    if track:
        times = [timescale.parse_utc(c["utc"]) for c in contacts if c.get("utc")] + [t_fix]
        pts = exports.track_points(track, min(times) - 600000000, max(times) + 600000000, 60)
        ax.plot([ux(p[2]) for p in pts], [p[1] for p in pts], color="0.25", lw=1.2, zorder=2, label="DR track")
        for p in pts[::10]:
            ax.plot([ux(p[2])], [p[1]], marker="o", ms=2.5, color="0.25", zorder=2)
    if dr:
        ax.plot([ux(dr["lon_deg"])], [dr["lat_deg"]], marker="s", mfc="white", mec="0.2", ms=7, zorder=4, ls="none",
                label="DR at fix time")

    # lines of position
    legend_rejected = False
    placed = []
    for n, c in enumerate(contacts):
        if c.get("residual_nm") is None or c.get("zn_deg") is None:
            continue
        used = c.get("used", True)
        colour = image_colour(c.get("image")) if used else REJECTED
        a, b = lop_points(fix, c, half_length_nm=2.5 * r_nm)
        ax.plot([ux(a[1]), ux(b[1])], [a[0], b[0]], color=colour, lw=1.6 if used else 1.0, ls="-" if used else "--",
                zorder=3, label=None if used or legend_rejected else "rejected line")
        legend_rejected = legend_rejected or not used
        foot = lop_points(fix, c, half_length_nm=0.0)[0]
        # the azimuth arrow at the foot, a tenth of the view long
        tip = sphere.move_nm(foot[0], foot[1], 0.12 * r_nm * cosd(c["zn_deg"]), 0.12 * r_nm * sind(c["zn_deg"]))
        ax.annotate("", xy=(ux(tip[1]), tip[0]), xytext=(ux(foot[1]), foot[0]),
                    arrowprops=dict(arrowstyle="->", color=colour, lw=1.0), zorder=3)
        # label along the line, placed where the line is inside the view
        # the label goes where the line is inside the view and no other label is near
        along = _label_spot(c["residual_nm"], c["zn_deg"], r_nm, placed, n)
        lab = sphere.move_nm(foot[0], foot[1], -along * sind(c["zn_deg"]), along * cosd(c["zn_deg"]))
        # on a Mercator-correct sheet the screen angle is the true one: line direction
        # (north, east) = (-sin Zn, cos Zn)
        angle = math.degrees(math.atan2(-sind(c["zn_deg"]), cosd(c["zn_deg"])))
        if angle > 90:
            angle -= 180
        elif angle < -90:
            angle += 180
        text = "%s %s%s" % (_hhmmss(c.get("utc", "")), _body_limb(c), c.get("image") or "?")
        if not used:
            text += " (rejected)"
        ax.text(ux(lab[1]), lab[0], text, color=colour, fontsize=7.5, rotation=angle, rotation_mode="anchor",
                ha="center", va="bottom", zorder=5,
                bbox=dict(boxstyle="round,pad=0.15", fc="white", ec="none", alpha=0.75))

    # the 95 % ellipse and the fix
    if e.get("major_nm") is not None:
        ring = exports.ellipse_points(fix)
        ax.fill([ux(p[1]) for p in ring], [p[0] for p in ring], color="#ffcc00", alpha=0.30, zorder=4, lw=0)
        ax.plot([ux(p[1]) for p in ring], [p[0] for p in ring], color="#b8860b", lw=1.2, zorder=4,
                label="95%% ellipse %.1f \u00d7 %.1f nmi" % (e["major_nm"], e["minor_nm"]))
    ax.plot([lon0], [lat0], marker="+", color="k", ms=16, mew=2.0, zorder=6, ls="none",
            label="fix %s %s %sZ" % (fmt_lat(lat0), fmt_lon(lon0), _hhmmss(fix["utc"])))
    if truth:
        miss = sphere.distance_nm(lat0, lon0, truth[0], truth[1])
        ax.plot([ux(truth[1])], [truth[0]], marker="*", color="#2ca02c", mec="k", mew=0.6, ms=14, zorder=6, ls="none",
                label="true position (scenario), %.2f nmi from fix" % miss)

    # scale bar, lower left, along a parallel
    bar = _nice_scale(2 * r_nm)
    y_bar = lat0 - 0.86 * dlat
    x_bar = lon0 - 0.88 * dlon
    x_end = x_bar + bar / (60.0 * cosd(y_bar))
    ax.plot([x_bar, x_end], [y_bar, y_bar], color="k", lw=3, solid_capstyle="butt", zorder=6)
    ax.plot([x_bar, x_bar], [y_bar - 0.015 * dlat, y_bar + 0.015 * dlat], color="k", lw=1, zorder=6)
    ax.text((x_bar + x_end) / 2, y_bar + 0.025 * dlat, "%g nmi" % bar, ha="center", va="bottom", fontsize=8,
            zorder=6)
    # north arrow, upper left
    ax.annotate("N", xy=(lon0 - 0.9 * dlon, lat0 + 0.92 * dlat), xytext=(lon0 - 0.9 * dlon, lat0 + 0.72 * dlat),
                ha="center", va="center", fontsize=9, fontweight="bold",
                arrowprops=dict(arrowstyle="-|>", color="k", lw=1.2))

    ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.07), ncol=2, fontsize=7.5, frameon=False)
    ax.set_xlabel("longitude", fontsize=9)
    ax.set_ylabel("latitude", fontsize=9)
    used = sum(1 for c in contacts if c.get("used", True))
    sub = ["%d lines used, %d rejected" % (used, len(contacts) - used)] if contacts else []
    if fix.get("sigma0") is not None:
        sub.append("sigma0 %.2f" % fix["sigma0"])
    fig.text(0.5, 0.972, title or "Plotting sheet: fix at %s" % fix["utc"], ha="center", fontsize=11.5,
             fontweight="bold")
    fig.text(0.5, 0.947, "; ".join(["Mercator-correct local chart, lines of position at the fix epoch"] + sub),
             ha="center", fontsize=8.5, color="0.25")
    _doubts_box(ax, fix.get("doubts"))
    _cautions(fig)
    return fig


DOUBTS_SHOWN = 4


def _doubts_box(ax, doubts):
    """The fix's doubts (``limbclock-fix/1`` ``doubts``) in a red-edged box across the top of the
    chart: a doubtful fix is never drawn without them (at most ``DOUBTS_SHOWN``, then how many more)."""
    if not doubts:
        return
    lines = ["DOUBTS about this fix (%d): read them before you use it" % len(doubts)]
    for d in doubts[:DOUBTS_SHOWN]:
        lines += textwrap.wrap("[%s] %s" % (d["code"], d["message"]), 115, initial_indent="- ",
                               subsequent_indent="  ")
    if len(doubts) > DOUBTS_SHOWN:
        lines.append("... and %d more (limbclock fix)" % (len(doubts) - DOUBTS_SHOWN))
    ax.text(0.5, 0.985, "\n".join(lines), transform=ax.transAxes, ha="center", va="top", fontsize=6.8, multialignment="left",
            color="#a00000", zorder=10, linespacing=1.25,
            bbox=dict(boxstyle="round,pad=0.4", facecolor="white", edgecolor="#a00000", alpha=0.92))


def contact_timeline(fix, path, predicted=None, title=None):
    """Draw the contact timeline of ``fix`` (``limbclock-fix/1`` dict) to ``path``.

    ``predicted``: contacts predicted at the DR track (``engine.plan`` / ``limbclock plan``
    dicts with ``utc``, ``image``), or None.  Each timed contact is marked with its
    difference from the nearest prediction of the same image (seconds, when within 10 min)."""
    import datetime as _dt
    from matplotlib.dates import DateFormatter

    contacts = fix.get("contacts") or []
    predicted = predicted or []

    def when(u):
        return _dt.datetime(1970, 1, 1) + _dt.timedelta(microseconds=timescale.parse_utc(u))

    ids = []
    for c in list(predicted) + list(contacts):
        im = c.get("image") or "?"
        if im not in ids:
            ids.append(im)
    ids.sort(key=lambda s: (s == "?", s))
    row = dict((im, k) for k, im in enumerate(ids))

    fig = _figure(9.5, 7.0)
    ax1 = fig.add_axes([0.09, 0.52, 0.88, 0.33])
    ax2 = fig.add_axes([0.09, 0.13, 0.88, 0.31], sharex=ax1)
    for p in predicted:
        im = p.get("image") or "?"
        ax1.plot([when(p["utc"])], [row[im]], marker="|", ms=20, mew=1.2, color="0.5", ls="none", zorder=2)
    pred_us = {}
    for p in predicted:
        pred_us.setdefault(p.get("image"), []).append(timescale.parse_utc(p["utc"]))
    for c in contacts:
        im = c.get("image") or "?"
        used = c.get("used", True)
        colour = image_colour(c.get("image")) if used else REJECTED
        ax1.plot([when(c["utc"])], [row[im]], marker="o" if used else "X", ms=6.5, ls="none", zorder=3,
                 color=colour, mec="white" if used else colour, mew=0.6)
        near = [t for t in pred_us.get(c.get("image"), [])]
        if near:
            t = timescale.parse_utc(c["utc"])
            best = min(near, key=lambda u: abs(u - t))
            if abs(best - t) < 600000000:
                ax1.annotate("%+.0f s" % ((t - best) / 1e6), (when(c["utc"]), row[im]), textcoords="offset points",
                             xytext=(0, -13), ha="center", fontsize=6.5, color=colour)
    ax1.plot([], [], marker="|", ms=12, mew=1.2, color="0.5", ls="none", label="predicted at the DR (plan)")
    ax1.plot([], [], marker="o", ms=6.5, color=COLOURS[0], ls="none", label="timed contact (timed - predicted)")
    ax1.plot([], [], marker="X", ms=6.5, color=REJECTED, ls="none", label="timed, rejected by the fix")
    ax1.set_yticks(range(len(ids)))
    ax1.set_yticklabels(ids, fontsize=8)
    ax1.set_ylim(-0.8, len(ids) - 0.4)
    ax1.set_ylabel("image", fontsize=9)
    ax1.grid(True, axis="x", alpha=0.3)
    ax1.legend(loc="lower left", bbox_to_anchor=(0.0, 1.01), fontsize=7.5, ncol=3, frameon=False)
    ax1.tick_params(labelbottom=False)

    # residuals: the scale follows the used contacts; far-off rejected ones are pinned to the edge
    span = 0.5
    for c in contacts:
        if c.get("residual_nm") is not None and c.get("used", True):
            span = max(span, abs(c["residual_nm"]) + (c.get("sigma_nm") or 0.0))
    span *= 1.25
    for c in contacts:
        if c.get("residual_nm") is None:
            continue
        used = c.get("used", True)
        colour = image_colour(c.get("image")) if used else REJECTED
        r = c["residual_nm"]
        x = when(c["utc"])
        if abs(r) > span:
            y = span * 0.92 * (1 if r > 0 else -1)
            ax2.plot([x], [y], marker="^" if r > 0 else "v", ms=7, color=colour, ls="none")
            ax2.annotate("%s %+.1f nmi" % (c.get("image") or "?", r), (x, y), textcoords="offset points",
                         xytext=(6, -3), fontsize=7, color=colour)
            continue
        ax2.errorbar([x], [r], yerr=[c.get("sigma_nm") or 0.0], marker="o" if used else "X", ms=5.5, color=colour,
                     capsize=3, lw=1.1, ls="none")
        ax2.annotate(c.get("image") or "?", (x, r), textcoords="offset points", xytext=(5, 3), fontsize=7,
                     color=colour)
    ax2.axhline(0.0, color="k", lw=0.8)
    ax2.set_ylim(-span, span)
    ax2.set_ylabel("residual from the fix\n(nmi along Zn, + toward the body)", fontsize=8.5)
    ax2.set_xlabel("UTC", fontsize=9)
    ax2.grid(True, alpha=0.3)
    ax2.xaxis.set_major_formatter(DateFormatter("%H:%M"))
    ax2.tick_params(labelsize=8)
    fig.text(0.5, 0.955, title or "Contact timeline, fix at %s" % fix["utc"], ha="center", fontsize=11.5,
             fontweight="bold")
    fig.text(0.5, 0.925, "upper: predicted and timed contacts per image; lower: each line's offset from the fix "
             "with its 1-sigma bar", ha="center", fontsize=8.5, color="0.25")
    _cautions(fig)
    return _save(fig, path)
