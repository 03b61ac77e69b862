"""Light report pictures: drawn straight from the arrays, without a plotting library.

* The thermogram: the frame-averaged corrected temperature through the colour table
  (:mod:`irpipe.colourtable`) into an 8-bit indexed PNG (:mod:`irpipe.report.png`), region
  outlines drawn into it (white boundary pixels of the region, black pixels just outside).
  Region names and the numbered finding markers are a vector overlay (SVG) drawn on top in
  the page, and the colour bar is a CSS gradient defined once per page with this stack's
  tick labels: text stays sharp at any zoom and costs a few hundred bytes.
* A thumbnail of the thermogram for the index page of a large survey.
* The histogram of all valid values and the per-frame trend of region means as small
  inline SVG drawings.

:func:`render_stack_pictures` turns a stack's picture data (the picture stage's arrays and
the region masks) into a small dict of encoded pictures, a few tens of kilobytes, as soon
as the stack is done; the report is written from those dicts, and the finding markers,
whose numbers are known only when every stack is done, are added then
(:func:`overlay_svg`). :func:`dumps` / :func:`loads` give the dict as JSON text, for the
per-stack cache that lets ``--resume`` keep the pictures of unchanged stacks.
"""
from __future__ import annotations

import base64
import json
import math
from html import escape

import numpy as np

from .. import colourtable as ct
from .png import encode_indexed

SCHEMA = 1                   # layout of the encoded dict (cache files of another layout are redrawn)
MAX_LEVELS = 128             # colour steps of a thermogram at most: smooth to the eye, half the bytes of 240
MIN_LEVELS = 32              # ... and at least, however noisy the picture
THUMB_WIDTH = 160            # [pixel] thumbnail width at most
MIN_WIDTH = 480              # [pixel] a smaller picture is enlarged by an integer factor before the
                             # outlines are drawn, so that they stay thin lines on the page            # [pixel] thumbnail width at most
PLOT_W, PLOT_H = 400, 250    # SVG plot size [CSS pixel at 100 %]
_INK = "#1b1b1b"
_GRID = "#d4d4d4"


def colour_range(image):
    """(vmin, vmax) of the colour scale [C]: the range of the valid values, widened to at
    least 0.5 K so that a uniform scene does not show as noise; None if nothing is valid."""
    v = np.asarray(image)
    v = v.ravel() if v.dtype.kind == "f" else v.astype(float).ravel()
    with np.errstate(invalid="ignore"):
        lo, hi = float(np.fmin.reduce(v, initial=np.inf)), float(np.fmax.reduce(v, initial=-np.inf))
    if not (np.isfinite(lo) and np.isfinite(hi)):
        v = v[np.isfinite(v)]                  # +-inf present, or nothing valid
        if v.size == 0:
            return None
        lo, hi = float(v.min()), float(v.max())
    if hi - lo < 0.5:
        mid = 0.5 * (lo + hi)
        lo, hi = mid - 0.25, mid + 0.25
    return lo, hi


def pixel_noise(image):
    """Robust estimate of the pixel-to-pixel noise [unit of the image]: the median absolute
    deviation of horizontal neighbour differences (every 4th row), / 0.6745 for a normal
    distribution's standard deviation and / sqrt(2) for the difference of two pixels."""
    d = np.diff(np.asarray(image, np.float32)[::4], axis=1).ravel()
    d = d[np.isfinite(d)]
    if d.size < 16:
        return 0.0
    return float(np.median(np.abs(d - np.median(d)))) / 0.6745 / math.sqrt(2.0)   # common practice, no source


def colour_levels(rng, noise):
    """Number of colour steps of the scale ``rng``: MAX_LEVELS, fewer when a step would be
    smaller than twice the pixel noise (steps finer than the noise show only noise and
    cost bytes), never fewer than MIN_LEVELS."""
    if not rng or noise <= 0:
        return MAX_LEVELS
    return int(min(MAX_LEVELS, max(MIN_LEVELS, (rng[1] - rng[0]) / (2.0 * noise))))


def outline(mask):
    """(inside, outside): the region's boundary pixels (in the region, with a 4-neighbour
    outside it or on the image border) and the pixels just outside it (not in the region,
    with a 4-neighbour in it)."""
    m = np.asarray(mask, bool)
    p = np.pad(m, 1)
    core = p[1:-1, 1:-1]
    all4 = p[:-2, 1:-1] & p[2:, 1:-1] & p[1:-1, :-2] & p[1:-1, 2:]
    any4 = p[:-2, 1:-1] | p[2:, 1:-1] | p[1:-1, :-2] | p[1:-1, 2:]
    return core & ~all4, any4 & ~core       # outside the image counts as outside the region


def thermogram_indices(image, masks=None, rng=None, levels=MAX_LEVELS):
    """Palette indices of the thermogram: ``levels`` colour steps over ``rng`` (default
    :func:`colour_range`), NaN as ``INVALID``, region outlines as ``WHITE`` with a
    ``BLACK`` rim outside."""
    img = np.asarray(image, np.float32)
    rng = rng or colour_range(img)
    idx = ct.to_indices(img, *rng, levels) if rng else np.full(img.shape, ct.INVALID, np.uint8)
    rims, lines = [], []
    for mask in (masks or {}).values():
        mask = np.asarray(mask, bool)
        if mask.shape == img.shape and mask.any():
            inside, outside = outline(mask)
            lines.append(inside)
            rims.append(outside)
    for r in rims:                         # all rims first: a line is never covered by a rim
        idx[r] = ct.BLACK
    for ln in lines:
        idx[ln] = ct.WHITE
    return idx


def thumbnail(image, rng, levels=MAX_LEVELS, width=THUMB_WIDTH):
    """Block mean of the valid values (NaN where a block has none), at most ``width``
    pixels wide (a narrower picture enlarged by a whole factor), as palette indices of the
    same scale."""
    img = np.asarray(image, np.float32)
    step = max(1, math.ceil(img.shape[1] / width))
    r, c = -(-img.shape[0] // step) * step, -(-img.shape[1] // step) * step
    if (r, c) != img.shape:
        pad = np.full((r, c), np.nan, np.float32)
        pad[:img.shape[0], :img.shape[1]] = img
        img = pad
    ok = np.isfinite(img)
    z = np.where(ok, img, np.float32(0))
    # block sums as step^2 strided slices added in float64 (sums of a block's float32
    # values are exact in float64, so the order does not matter)
    s = np.zeros((r // step, c // step))
    n = np.zeros((r // step, c // step), np.int32)
    for i in range(step):
        for j in range(step):
            s += z[i::step, j::step]
            n += ok[i::step, j::step]
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.where(n > 0, s / np.maximum(n, 1), np.nan)
    idx = ct.to_indices(mean, *rng, levels) if rng else np.full(mean.shape, ct.INVALID, np.uint8)
    up = max(1, width // idx.shape[1])           # a small picture: whole pixels, about ``width`` wide
    return np.repeat(np.repeat(idx, up, 0), up, 1) if up > 1 else idx


def render_stack_pictures(picture, masks=None) -> dict:
    """The encoded pictures of one stack: small, and all the report needs of it.

    Parameters
    ----------
    picture : dict
        The picture stage's ``mean_c`` (M, N) [C] (NaN invalid), ``hist_edges_c`` and
        ``hist_counts``.
    masks : dict of str to (M, N) bool, optional
        The stack's regions, outlined in the thermogram and named in the overlay.

    Returns
    -------
    dict
        ``rows``, ``cols``, ``scale_c`` ([lo, hi] or None), ``levels`` (colour steps),
        ``png_scale`` (the thermogram PNG's pixels per image pixel along each axis),
        ``invalid_px``,
        ``thermogram_png`` and ``thumbnail_png`` (PNG bytes), ``histogram_svg`` (text),
        ``regions`` (name and top-left pixel of each
        outlined region) and ``schema``.
    """
    img = np.asarray(picture["mean_c"], np.float32)
    rng = colour_range(img)
    levels = colour_levels(rng, pixel_noise(img))
    masks = {k: np.asarray(v, bool) for k, v in (masks if masks is not None else picture.get("masks") or {}).items()}
    pal = ct.palette(levels=levels)[:ct.BLACK + 1]
    regions = []
    for name, m in masks.items():
        if m.shape == img.shape and m.any():
            rr = np.flatnonzero(m.any(1))
            cc = np.flatnonzero(m.any(0))
            regions.append({"name": str(name), "row": int(rr[0]), "col": int(cc[0])})
    up = max(1, MIN_WIDTH // max(img.shape[1], 1))
    big, big_masks = img, masks
    if up > 1:
        def grow(a):
            return np.repeat(np.repeat(a, up, 0), up, 1)
        big = grow(img)
        big_masks = {k: grow(m) for k, m in masks.items() if m.shape == img.shape}
    return {
        "schema": SCHEMA, "rows": int(img.shape[0]), "cols": int(img.shape[1]),
        "scale_c": [rng[0], rng[1]] if rng else None, "levels": levels, "png_scale": up,
        "invalid_px": int(np.count_nonzero(~np.isfinite(img))),
        "thermogram_png": encode_indexed(thermogram_indices(big, big_masks, rng, levels), pal),
        "thumbnail_png": encode_indexed(thumbnail(img, rng, levels), pal),
        "histogram_svg": histogram_svg(picture.get("hist_edges_c", []), picture.get("hist_counts", []), rng),
        "regions": regions,
    }


# --- the cache of encoded pictures ---------------------------------------------------

def dumps(enc: dict) -> str:
    """JSON text of an encoded-pictures dict (PNG bytes as base64)."""
    return json.dumps({k: ({"base64": base64.b64encode(v).decode("ascii")} if isinstance(v, bytes) else v)
                       for k, v in enc.items()}, separators=(",", ":"))


def loads(text: str):
    """The dict of :func:`dumps`; None when the text is not a dict of this ``SCHEMA``."""
    try:
        d = json.loads(text)
        if not isinstance(d, dict) or d.get("schema") != SCHEMA:
            return None
        return {k: (base64.b64decode(v["base64"]) if isinstance(v, dict) and "base64" in v else v)
                for k, v in d.items()}
    except (ValueError, TypeError, KeyError):
        return None


# --- vector parts ----------------------------------------------------------------------

def _n(x):
    """Short number for SVG coordinates."""
    s = f"{x:.1f}"
    return s[:-2] if s.endswith(".0") else s


def nice_ticks(lo, hi, n=5):
    """Round tick values within [lo, hi], about ``n`` of them (steps 1, 2, 2.5 or 5 x 10^k)."""
    if not hi > lo:
        return [lo]
    raw = (hi - lo) / max(n, 1)
    mag = 10.0 ** math.floor(math.log10(raw))
    step = next(s * mag for s in (1, 2, 2.5, 5, 10) if s * mag >= raw)
    first = math.ceil(lo / step - 1e-9) * step
    out, k = [], 0
    while first + k * step <= hi + 1e-9 * step:
        out.append(round(first + k * step, 10))
        k += 1
    return out


def _fmt(v, step):
    nd = max(0, -math.floor(math.log10(step) + 1e-9)) if step > 0 else 1
    s = f"{v:.{nd}f}"
    return "0" if s.lstrip("-").strip("0.") == "" else s


def overlay_svg(enc: dict, stack_findings) -> str:
    """Inline SVG laid over the thermogram (same pixel coordinates): region names at the
    top-left corner of each region and a numbered circle at each finding's pixel. Findings
    at (nearly) the same pixel are set side by side with a leader line to the pixel."""
    rows, cols = enc["rows"], enc["cols"]
    u = max(rows, cols) / 640.0            # the picture shows at about the same width at any size
    out = [f'<svg class="ov" viewBox="0 0 {cols} {rows}" aria-hidden="true">']
    for r in enc.get("regions") or []:
        out.append(f'<text class="rl" x="{_n(r["col"] + 2.5 * u)}" y="{_n(r["row"] + 11.5 * u)}" '
                   f'font-size="{_n(10.5 * u)}" stroke-width="{_n(2.6 * u)}">{escape(r["name"])}</text>')
    placed = []
    for f in stack_findings:
        if f.get("row") is None or f.get("col") is None:
            continue
        x, y = f["col"] + 0.5, f["row"] + 0.5
        k = sum(1 for (px, py) in placed if abs(px - x) <= 2 and abs(py - y) <= 2)
        placed.append((x, y))
        cx = x + 18.0 * u * k
        cx = min(max(cx, 8 * u), cols - 8 * u) if cols > 16 * u else cx
        if k:
            out.append(f'<line x1="{_n(x)}" y1="{_n(y)}" x2="{_n(cx)}" y2="{_n(y)}" stroke="#fff" '
                       f'stroke-width="{_n(1.2 * u)}"/>')
        num = int(f["number"])
        out.append(f'<g class="mk" id="marker-{num}"><circle cx="{_n(cx)}" cy="{_n(y)}" r="{_n(8 * u)}" '
                   f'stroke-width="{_n(1.4 * u)}"/><text x="{_n(cx)}" y="{_n(y + 3.3 * u)}" '
                   f'font-size="{_n((9.0 if num < 100 else 7.2) * u)}">{num}</text></g>')
    out.append("</svg>")
    return "".join(out)


def colour_bar_html(scale_c, label="surface temperature [°C]") -> str:
    """The colour bar: the page's one CSS gradient (class ``ramp``) with this scale's ticks."""
    if not scale_c:
        return ""
    lo, hi = scale_c
    ticks = nice_ticks(lo, hi, 6)
    step = ticks[1] - ticks[0] if len(ticks) > 1 else 1.0
    spans = "".join(f'<span style="bottom:{100.0 * (t - lo) / (hi - lo):.2f}%">{_fmt(t, step)}</span>'
                    for t in ticks)
    return (f'<div class="cbar"><div class="ramp"></div><div class="ticks">{spans}</div>'
            f'<div class="cbl">{escape(label)}</div></div>')


def _frame(title, xlabel, ylabel, x0, x1, y0, y1, h=PLOT_H, extra=0):
    """Axes box, title and labels of a plot ``h`` high with ``extra`` height below it (a
    legend); returns (parts, to_x, to_y, box)."""
    left, right, top, bottom = 54, PLOT_W - 12, 26, h - 42
    parts = [f'<svg class="plot" viewBox="0 0 {PLOT_W} {h + extra}" role="img" aria-label="{escape(title)}">',
             f'<text x="4" y="14" class="pt">{escape(title)}</text>',
             f'<text x="{(left + right) / 2:.0f}" y="{h - 6}" class="al" text-anchor="middle">{escape(xlabel)}</text>',
             f'<text transform="translate(12 {(top + bottom) / 2:.0f}) rotate(-90)" class="al" '
             f'text-anchor="middle">{escape(ylabel)}</text>']

    def tx(v):
        return left + (right - left) * (v - x0) / ((x1 - x0) or 1.0)

    def ty(v):
        return bottom - (bottom - top) * (v - y0) / ((y1 - y0) or 1.0)
    return parts, tx, ty, (left, right, top, bottom)


def _xticks(parts, tx, box, ticks, labels):
    left, right, top, bottom = box
    for t, s in zip(ticks, labels):
        x = tx(t)
        parts.append(f'<line x1="{_n(x)}" x2="{_n(x)}" y1="{bottom}" y2="{bottom + 4}" stroke="{_INK}"/>'
                     f'<text x="{_n(x)}" y="{bottom + 15}" class="tk" text-anchor="middle">{s}</text>')


def _box(parts, box):
    left, right, top, bottom = box
    parts.append(f'<rect x="{left}" y="{top}" width="{right - left}" height="{bottom - top}" fill="none" '
                 f'stroke="#555" stroke-width="0.8"/>')


def histogram_svg(edges, counts, rng=None, max_bins=90) -> str:
    """SVG of the histogram of valid values: bars in the picture's colours at their centre
    temperature, logarithmic count axis so that small hot or cold areas show."""
    edges = np.asarray(edges, float)
    counts = np.asarray(counts, float)
    title = "Histogram of valid values, all frames"
    if counts.size == 0 or edges.size != counts.size + 1 or counts.sum() == 0:
        parts, _, _, box = _frame(title, "surface temperature [°C]", "pixel values", 0, 1, 0, 1)
        _box(parts, box)
        parts.append(f'<text x="{PLOT_W / 2:.0f}" y="{PLOT_H / 2:.0f}" text-anchor="middle">no valid values</text></svg>')
        return "".join(parts)
    group = max(1, int(np.ceil(counts.size / max_bins)))
    pad = (-counts.size) % group
    c = np.concatenate([counts, np.zeros(pad)]).reshape(-1, group).sum(1)
    width = (edges[1] - edges[0]) * group
    e = edges[0] + width * np.arange(c.size + 1)
    top_dec = max(1, math.ceil(math.log10(c.max()) + 1e-9))
    parts, tx, ty, box = _frame(title, "surface temperature [°C]", "pixel values (log scale)", e[0], e[-1], 0, top_dec)
    left, right, top, bottom = box
    for d in range(top_dec + 1):
        y = ty(d)
        lab = "1" if d == 0 else ("10" if d == 1 else f"10<tspan dy='-5' font-size='7'>{d}</tspan>")
        parts.append(f'<line x1="{left}" x2="{right}" y1="{_n(y)}" y2="{_n(y)}" stroke="{_GRID}" stroke-width="0.6"/>'
                     f'<text x="{left - 4}" y="{_n(y + 3)}" class="tk" text-anchor="end">{lab}</text>')
    lo, hi = rng or (e[0], e[-1])
    for k in np.flatnonzero(c > 0):
        x0, x1 = tx(e[k]), tx(e[k + 1])
        y = ty(math.log10(c[k]) if c[k] > 1 else 0.0)
        hgt = max(bottom - y, 1.0)
        parts.append(f'<rect x="{_n(x0)}" y="{_n(bottom - hgt)}" width="{_n(max(x1 - x0, 0.6))}" height="{_n(hgt)}" '
                     f'fill="{ct.hex_colour(0.5 * (e[k] + e[k + 1]), lo, hi)}"/>')
    ticks = nice_ticks(e[0], e[-1], 5)
    step = ticks[1] - ticks[0] if len(ticks) > 1 else 1.0
    _xticks(parts, tx, box, ticks, [_fmt(t, step) for t in ticks])
    _box(parts, box)
    parts.append("</svg>")
    return "".join(parts)


def trend_svg(regions, reflected_series_c=None):
    """SVG of each region's mean temperature per frame (band: region minimum to maximum)
    and the per-frame reflected temperature when it was measured; None for one frame."""
    series = []
    for r in regions:
        fr = [f for f in r.get("frames") or [] if f.get("mean_c") is not None]
        if fr:
            series.append((r["name"], fr))
    refl = list(reflected_series_c or [])
    n_frames = max([len(s[1]) for s in series] + [len(refl)] + [0])
    if n_frames < 2:
        return None
    xs = [f["frame"] for _, fr in series for f in fr] + list(range(len(refl)))
    ys = [v for _, fr in series for f in fr for v in (f.get("min_c"), f.get("max_c"), f["mean_c"]) if v is not None]
    ys += refl
    y0, y1 = min(ys), max(ys)
    if y1 - y0 < 0.2:
        y0, y1 = y0 - 0.1, y1 + 0.1
    pad = 0.05 * (y1 - y0)
    y0, y1 = y0 - pad, y1 + pad
    n_lines = len(series) + (1 if refl else 0)
    legend_h = 14 * -(-n_lines // 2)
    h = PLOT_H + legend_h
    parts, tx, ty, box = _frame("Region mean per frame (band: min to max)", "frame", "temperature [°C]",
                                min(xs), max(xs), y0, y1, h=PLOT_H, extra=legend_h)
    left, right, top, bottom = box
    yt = nice_ticks(y0, y1, 5)
    step = yt[1] - yt[0] if len(yt) > 1 else 1.0
    for t in yt:
        y = ty(t)
        parts.append(f'<line x1="{left}" x2="{right}" y1="{_n(y)}" y2="{_n(y)}" stroke="{_GRID}" stroke-width="0.6"/>'
                     f'<text x="{left - 4}" y="{_n(y + 3)}" class="tk" text-anchor="end">{_fmt(t, step)}</text>')
    xt = [t for t in nice_ticks(min(xs), max(xs), 6) if float(t).is_integer()]
    _xticks(parts, tx, box, xt, [str(int(t)) for t in xt])
    legend = []
    for i, (name, fr) in enumerate(series):
        col = ct.LINE_COLOURS[i % len(ct.LINE_COLOURS)]
        x = [tx(f["frame"]) for f in fr]
        lo = [ty(f["min_c"] if f.get("min_c") is not None else f["mean_c"]) for f in fr]
        hi = [ty(f["max_c"] if f.get("max_c") is not None else f["mean_c"]) for f in fr]
        band = " ".join(f"{_n(a)},{_n(b)}" for a, b in list(zip(x, hi)) + list(zip(x[::-1], lo[::-1])))
        line = " ".join(f"{_n(a)},{_n(ty(f['mean_c']))}" for a, f in zip(x, fr))
        parts.append(f'<polygon points="{band}" fill="{col}" fill-opacity="0.13"/>'
                     f'<polyline points="{line}" fill="none" stroke="{col}" stroke-width="1.4"/>')
        if len(fr) <= 60:
            parts.append("".join(f'<circle cx="{_n(a)}" cy="{_n(ty(f["mean_c"]))}" r="2" fill="{col}"/>'
                                 for a, f in zip(x, fr)))
        legend.append((name, col, ""))
    if refl:
        line = " ".join(f"{_n(tx(k))},{_n(ty(v))}" for k, v in enumerate(refl))
        parts.append(f'<polyline points="{line}" fill="none" stroke="#444" stroke-width="1.1" stroke-dasharray="4 3"/>')
        legend.append(("reflected temperature", "#444", ' stroke-dasharray="4 3"'))
    for i, (name, col, dash) in enumerate(legend):
        lx = 20 + (i % 2) * (PLOT_W // 2)
        ly = h - legend_h + 4 + 14 * (i // 2)
        parts.append(f'<line x1="{lx}" x2="{lx + 18}" y1="{ly}" y2="{ly}" stroke="{col}" stroke-width="1.6"{dash}/>'
                     f'<text x="{lx + 23}" y="{ly + 3.5}" class="tk">{escape(str(name))}</text>')
    _box(parts, box)
    parts.append("</svg>")
    return "".join(parts)
