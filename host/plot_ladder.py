"""Plot of an image ladder: images against deviation, brightness on a log scale (matplotlib)."""
import math

from host.cautions import CAUTION_SHORT


def plot_ladder(lad, path, title=None):
    """Draw ``lad`` (an ``engine.instrument.Ladder``) to ``path`` (PNG, PDF or SVG by extension)."""
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fig, ax = plt.subplots(figsize=(9.0, 5.2))
    fig.subplots_adjust(bottom=0.2, top=0.88)
    floor = min(im.fraction for im in lad.images) / 10.0
    xmax = max(im.deviation_deg for im in lad.images) * 1.08 + 0.5
    min_gap = xmax * 0.045          # label width in degrees of the axis, about
    last_x = []                     # per label level, the deviation of the last label placed there
    for im in lad.images:
        colour = "0.6" if im.faint else ("tab:red" if im.unsafe else "tab:blue")
        ax.vlines(im.deviation_deg, floor, im.fraction, colors=colour, lw=2.0)
        ax.plot([im.deviation_deg], [im.fraction], "o", color=colour, ms=5)
        level = 0
        while level < len(last_x) and im.deviation_deg - last_x[level] < min_gap:
            level += 1
        if level == len(last_x):
            last_x.append(im.deviation_deg)
        last_x[level] = im.deviation_deg
        ax.annotate("%s\n%s" % (im.id, "+".join(str(c) for c in im.coef)), (im.deviation_deg, im.fraction),
                    textcoords="offset points", xytext=(0, 6 + 20 * level), ha="center", fontsize=7,
                    arrowprops=dict(arrowstyle="-", color="0.7", lw=0.5) if level else None)
    ymax = max(im.fraction for im in lad.images) * 30.0 * (3.0 ** max(len(last_x) - 1, 0))
    for a, b, sep in lad.pairs:
        da, db = lad.by_id(a).deviation_deg, lad.by_id(b).deviation_deg
        ax.axvspan(da - 0.05, db + 0.05, color="orange", alpha=0.35, lw=0)
        ax.annotate("confusable %.2f\u00b0" % sep, ((da + db) / 2.0, ymax / 3.0), ha="center", fontsize=7,
                    color="darkorange")
    limit = max(im.fraction for im in lad.images) * lad.faint_ratio
    ax.axhline(max(limit, lad.min_fraction), color="0.5", ls=":", lw=1)
    ax.annotate("faint below", (0.2, max(limit, lad.min_fraction)), fontsize=7, color="0.4", va="bottom")
    ax.set_yscale("log")
    ax.set_ylim(floor, ymax)
    ax.set_xlim(0.0, xmax)
    ax.set_xlabel("deviation (degrees) = sextant altitude of the contact")
    ax.set_ylabel("fraction of the body's light (shade OD %.1f)" % lad.shade_od)
    ax.set_title(title or "Image ladder: plates %s\u00b0, orders 1..%d, incidence %.0f\u00b0" % (
        ", ".join("%g" % a for a in lad.plate_angles_deg), lad.max_order, lad.incidence_deg), fontsize=10)
    ax.grid(True, which="major", alpha=0.3)
    mags = "direct image %.1f mag" % (-2.5 * math.log10(lad.direct.fraction))
    fig.text(0.01, 0.06, "blue: visible  grey: faint  red: unsafe for the Sun (passes more than 3.2e-5)  "
             "orange: images closer than %.2f\u00b0.  %s." % (lad.confuse_deg, mags), fontsize=7)
    fig.text(0.01, 0.02, CAUTION_SHORT, fontsize=6, color="0.3")
    fig.savefig(path, dpi=120)
    plt.close(fig)
    return path
