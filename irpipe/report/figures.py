"""Report pictures as PNG bytes: the corrected-temperature image with region outlines and
numbered finding markers, the histogram of all valid values, and the per-frame trend of
region means.

Matplotlib is imported inside the functions (start-up speed of the command line) and used
through its object interface with the Agg canvas, so no global backend is switched.
Colour map: matplotlib's perceptually uniform ``inferno`` for temperature.
"""
from __future__ import annotations

import io

import numpy as np

TEMPERATURE_CMAP = "inferno"       # matplotlib name; perceptually uniform
LINE_CMAP = "viridis"              # line colours of the trend plot, sampled evenly
INVALID_COLOUR = "#8c8c8c"
DPI = 110
WIDTH_IN = 7.4
PLOT_H_IN = 2.9           # height of the histogram and trend plots [in]
_INK = "#1b1b1b"


def _new_figure(w, h):
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(w, h), dpi=DPI)
    FigureCanvasAgg(fig)
    return fig


def _png(fig):
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=DPI, metadata={"Software": None})
    return buf.getvalue()


def _style(ax):
    ax.tick_params(labelsize=7.5, colors=_INK, length=3)
    for s in ax.spines.values():
        s.set_linewidth(0.6)
        s.set_color("#555555")


def colour_range(image):
    """(vmin, vmax) of the colour scale [C]: the range of the valid values, widened to at
    least 0.5 K so that a uniform scene does not show as noise; None if nothing is valid."""
    v = np.asarray(image, float)
    v = v[np.isfinite(v)]
    if v.size == 0:
        return None
    lo, hi = float(v.min()), float(v.max())
    if hi - lo < 0.5:
        mid = 0.5 * (lo + hi)
        lo, hi = mid - 0.25, mid + 0.25
    return lo, hi


def _outline(ax, mask, halo, colour="white"):
    """Outline of a boolean mask along pixel edges, as one LineCollection of the edge
    segments between region and non-region pixels (memory in proportion to the
    perimeter, not to the image)."""
    from matplotlib.collections import LineCollection

    m = np.pad(np.asarray(mask, bool), 1)
    segs = []
    # vertical edges: between columns c and c+1 (padded coordinates) -> x = c - 0.5
    rr, cc = np.nonzero(m[:, 1:] != m[:, :-1])
    x = cc - 0.5
    y = rr - 1.0
    segs.append(np.stack([np.stack([x, y - 0.5], -1), np.stack([x, y + 0.5], -1)], 1))
    rr, cc = np.nonzero(m[1:, :] != m[:-1, :])
    y = rr - 0.5
    x = cc - 1.0
    segs.append(np.stack([np.stack([x - 0.5, y], -1), np.stack([x + 0.5, y], -1)], 1))
    lc = LineCollection(np.concatenate(segs), colors=colour, linewidths=1.1)
    lc.set_path_effects(halo(2.6))
    ax.add_collection(lc)


def thermogram(picture, stack_findings, title=None):
    """PNG of the frame-averaged corrected temperature with a colour bar in degrees Celsius,
    the outlines and names of the regions and the numbered findings.

    ``stack_findings``: this stack's rows of :func:`irpipe.report.tables.build_findings`."""
    import matplotlib
    from matplotlib import patheffects as pe

    img = np.asarray(picture["mean_c"], float)
    rows, cols = img.shape
    rng = colour_range(img)
    cmap = matplotlib.colormaps[TEMPERATURE_CMAP].with_extremes(bad=INVALID_COLOUR)
    aspect = rows / cols
    plot_w = WIDTH_IN - 1.35
    top = 0.35 if title else 0.15                 # [in] above the image
    fig_h = plot_w * aspect + 0.45 + top
    bottom = 0.45 / fig_h
    fig = _new_figure(WIDTH_IN, fig_h)
    ax = fig.add_axes([0.07, bottom, plot_w / WIDTH_IN - 0.05, 1 - bottom - top / fig_h])
    vmin, vmax = rng if rng else (0.0, 1.0)
    im = ax.imshow(img, cmap=cmap, vmin=vmin, vmax=vmax, interpolation="nearest", origin="upper")
    ax.set_xlim(-0.5, cols - 0.5)
    ax.set_ylim(rows - 0.5, -0.5)
    ax.set_xlabel("column [pixel]", fontsize=8, color=_INK)
    ax.set_ylabel("row [pixel]", fontsize=8, color=_INK)
    _style(ax)
    if title:
        ax.set_title(title, fontsize=9, color=_INK, loc="left")

    def halo(w):
        return [pe.Stroke(linewidth=w, foreground="black"), pe.Normal()]

    for name, mask in (picture.get("masks") or {}).items():
        mask = np.asarray(mask, bool)
        if mask.shape != img.shape or not mask.any():
            continue
        _outline(ax, mask, halo)
        r, c = np.nonzero(mask)
        # name just inside the top-left corner of the region's bounding box
        ax.text(c.min() + 0.8, r.min() + 0.8, name, fontsize=7, color="white", va="top", ha="left",
                path_effects=[pe.withStroke(linewidth=2.2, foreground="black")], zorder=4, clip_on=True)

    from matplotlib.transforms import offset_copy

    placed = []
    for f in stack_findings:
        if f.get("row") is None or f.get("col") is None:
            continue
        x, y = f["col"], f["row"]
        # findings at (nearly) the same pixel, e.g. a component and its hot spot: later
        # markers are set beside the first, with a leader to the pixel
        k = sum(1 for (px, py) in placed if abs(px - x) <= 2 and abs(py - y) <= 2)
        placed.append((x, y))
        tr = offset_copy(ax.transData, fig=fig, x=12.0 * k, y=0.0, units="points")
        if k:
            ax.annotate("", xy=(x, y), xytext=(12.0 * k, 0.0), textcoords="offset points",
                        arrowprops=dict(arrowstyle="-", color="white", lw=0.8), zorder=5)
        # not clipped: a finding on the image border keeps its whole marker
        ax.plot([x], [y], marker="o", ms=10.5, mfc="white", mec="black", mew=1.0, zorder=6, alpha=0.92,
                clip_on=False, transform=tr)
        ax.text(x, y, str(f["number"]), fontsize=6.2 if f["number"] < 100 else 5.2, ha="center",
                va="center_baseline", color="black", weight="bold", zorder=7, clip_on=False, transform=tr)

    pos = ax.get_position()
    cax = fig.add_axes([plot_w / WIDTH_IN + 0.045, pos.y0, 0.022, pos.height])
    cb = fig.colorbar(im, cax=cax)
    cb.set_label("surface temperature [°C]", fontsize=8, color=_INK)
    cb.ax.tick_params(labelsize=7.5)
    cb.outline.set_linewidth(0.6)
    return _png(fig)


def histogram(picture, max_bins=90):
    """PNG of the histogram of all valid values of the stack (all frames), bars coloured
    with the picture's colour scale; log count axis so that small hot or cold areas show."""
    import matplotlib
    from matplotlib.colors import Normalize

    edges = np.asarray(picture.get("hist_edges_c", []), float)
    counts = np.asarray(picture.get("hist_counts", []), float)
    fig = _new_figure(WIDTH_IN / 2, PLOT_H_IN)
    ax = fig.add_axes([0.17, 0.47 / PLOT_H_IN, 0.78, (PLOT_H_IN - 0.8) / PLOT_H_IN])
    _style(ax)
    ax.set_title("Histogram of valid values, all frames", fontsize=8.5, color=_INK, loc="left")
    ax.set_xlabel("surface temperature [°C]", fontsize=8, color=_INK)
    ax.set_ylabel("pixel values", fontsize=8, color=_INK)
    if counts.size == 0 or edges.size != counts.size + 1 or counts.sum() == 0:
        ax.text(0.5, 0.5, "no valid values", transform=ax.transAxes, ha="center", fontsize=9)
        return _png(fig)
    group = max(1, int(np.ceil(counts.size / max_bins)))
    pad = (-counts.size) % group
    c = np.concatenate([counts, np.zeros(pad)]).reshape(-1, group).sum(1)
    e = np.concatenate([edges, edges[-1] + (edges[1] - edges[0]) * np.arange(1, pad + 1)])[::group]
    if e.size < c.size + 1:
        e = np.append(e, e[-1] + (edges[1] - edges[0]) * group)
    centres = 0.5 * (e[:-1] + e[1:])
    rng = colour_range(picture.get("mean_c")) if picture.get("mean_c") is not None else None
    norm = Normalize(*(rng or (e[0], e[-1])))
    colours = matplotlib.colormaps[TEMPERATURE_CMAP](norm(centres))
    keep = c > 0
    ax.bar(centres[keep], c[keep], width=np.diff(e)[keep], color=colours[keep], edgecolor="none")
    ax.set_yscale("log")
    ax.set_xlim(e[0], e[-1])
    ax.grid(axis="y", linewidth=0.4, color="#cccccc")
    ax.set_axisbelow(True)
    return _png(fig)


def trend(regions, reflected_series_c=None):
    """PNG of each region's mean temperature per frame (band: region min to max), and the
    per-frame reflected temperature when it was measured; None for a single frame."""
    import matplotlib

    series = []
    for r in regions:
        fr = [f for f in r.get("frames") or [] if f.get("mean_c") is not None]
        if fr:
            series.append((r["name"], fr))
    n_frames = max([len(s[1]) for s in series] + [len(reflected_series_c or [])] + [0])
    if n_frames < 2:
        return None
    n_lines = len(series) + (1 if reflected_series_c else 0)
    legend_in = 0.17 * -(-n_lines // 2) + 0.1
    h = max(PLOT_H_IN, 0.47 + legend_in + 1.5 + 0.33)
    fig = _new_figure(WIDTH_IN / 2, h)
    ax = fig.add_axes([0.17, (0.47 + legend_in) / h, 0.78, (h - 0.47 - legend_in - 0.33) / h])
    _style(ax)
    ax.set_title("Region mean per frame (band: min to max)", fontsize=8.5, color=_INK, loc="left")
    ax.set_xlabel("frame", fontsize=8, color=_INK)
    ax.set_ylabel("temperature [°C]", fontsize=8, color=_INK)
    cmap = matplotlib.colormaps[LINE_CMAP]
    markers = "osD^vP*Xh<>"
    k = max(len(series), 1)
    for i, (name, fr) in enumerate(series):
        col = cmap(0.05 + 0.85 * i / max(k - 1, 1))
        x = [f["frame"] for f in fr]
        ax.plot(x, [f["mean_c"] for f in fr], marker=markers[i % len(markers)] if len(fr) <= 60 else None,
                ms=3.2, lw=1.2, color=col, label=name)
        lo = [f["min_c"] if f.get("min_c") is not None else f["mean_c"] for f in fr]
        hi = [f["max_c"] if f.get("max_c") is not None else f["mean_c"] for f in fr]
        ax.fill_between(x, lo, hi, color=col, alpha=0.13, linewidth=0)
    if reflected_series_c:
        ax.plot(range(len(reflected_series_c)), reflected_series_c, ls="--", lw=1.0, color="#444444",
                label="reflected temperature")
    ax.xaxis.get_major_locator().set_params(integer=True)
    ax.grid(linewidth=0.4, color="#dddddd")
    fig.legend(*ax.get_legend_handles_labels(), fontsize=7, loc="lower left", bbox_to_anchor=(0.1, 0.01),
               ncol=2, frameon=False, handlelength=1.8, columnspacing=1.2)
    return _png(fig)
