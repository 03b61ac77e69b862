"""Report section for frame alignment and stack comparison, kept apart from the
general picture rendering: the difference picture on a diverging colour scale centred on
zero with the numbered findings, a checkerboard of the two aligned states, both stacks with
their times and the shift found, and the alignment of the stack's own frames.

``comparison_section(st, picture, findings, fig_no)`` returns (HTML, next figure number);
``picture["compare"]`` (from the compare stage) holds ``difference_k`` and
``checkerboard_c``; without it (a stack skipped by ``--resume``) the tables are shown and
the pictures are said to be unavailable.
"""
from __future__ import annotations

import base64
from html import escape

import numpy as np

DIFFERENCE_CMAP = "RdBu_r"     # matplotlib diverging map: blue colder, red warmer
TILE_PX = 16


def difference_png(diff, stack_findings):
    """PNG of the difference [K], symmetric colour scale about zero, numbered findings."""
    import matplotlib
    from matplotlib import patheffects as pe

    from .figures import INVALID_COLOUR, WIDTH_IN, _INK, _new_figure, _png, _style

    img = np.asarray(diff, float)
    rows, cols = img.shape
    v = img[np.isfinite(img)]
    lim = max(float(np.abs(v).max()) if v.size else 1.0, 0.5)
    cmap = matplotlib.colormaps[DIFFERENCE_CMAP].with_extremes(bad=INVALID_COLOUR)
    plot_w = WIDTH_IN - 1.35
    fig_h = plot_w * rows / cols + 0.6
    fig = _new_figure(WIDTH_IN, fig_h)
    ax = fig.add_axes([0.07, 0.45 / fig_h, plot_w / WIDTH_IN - 0.05, 1 - 0.6 / fig_h])
    im = ax.imshow(img, cmap=cmap, vmin=-lim, vmax=lim, interpolation="nearest", origin="upper")
    ax.set_xlabel("column [pixel]", fontsize=8, color=_INK)
    ax.set_ylabel("row [pixel]", fontsize=8, color=_INK)
    _style(ax)
    for f in stack_findings:
        if f.get("row") is None or f["kind"] not in ("colder", "warmer"):
            continue
        ax.plot([f["col"]], [f["row"]], marker="o", ms=10.5, mfc="white", mec="black", mew=1.0, zorder=6,
                clip_on=False)
        ax.text(f["col"], f["row"], str(f["number"]), fontsize=6.2, ha="center", va="center_baseline",
                color="black", weight="bold", zorder=7, clip_on=False,
                path_effects=[pe.withStroke(linewidth=1.0, foreground="white")])
    pos = ax.get_position()
    cax = fig.add_axes([plot_w / WIDTH_IN + 0.045, pos.y0, 0.022, pos.height])
    cb = fig.colorbar(im, cax=cax)
    cb.set_label("difference [K]", fontsize=8, color=_INK)
    cb.ax.tick_params(labelsize=7.5)
    return _png(fig)


def checkerboard_png(board):
    """PNG of the checkerboard of the two aligned mean frames [C]."""
    import matplotlib

    from .figures import INVALID_COLOUR, TEMPERATURE_CMAP, WIDTH_IN, _INK, _new_figure, _png, _style, colour_range

    img = np.asarray(board, float)
    rows, cols = img.shape
    rng = colour_range(img) or (0.0, 1.0)
    cmap = matplotlib.colormaps[TEMPERATURE_CMAP].with_extremes(bad=INVALID_COLOUR)
    w = WIDTH_IN * 0.55
    fig_h = w * rows / cols + 0.5
    fig = _new_figure(w, fig_h)
    ax = fig.add_axes([0.1, 0.4 / fig_h, 0.86, 1 - 0.5 / fig_h])
    ax.imshow(img, cmap=cmap, vmin=rng[0], vmax=rng[1], interpolation="nearest", origin="upper")
    for k in range(TILE_PX, rows, TILE_PX):
        ax.axhline(k - 0.5, color="white", lw=0.4, alpha=0.6)
    for k in range(TILE_PX, cols, TILE_PX):
        ax.axvline(k - 0.5, color="white", lw=0.4, alpha=0.6)
    ax.set_xlabel("column [pixel]", fontsize=8, color=_INK)
    _style(ax)
    return _png(fig)


# small formatting helpers of this section (the report's own live in report.html, which
# imports this module)

def _e(x):
    return escape("" if x is None else str(x))


def _f(x, nd=2):
    try:
        v = float(x)
    except (TypeError, ValueError):
        return "–"
    return f"{v:.{nd}f}" if np.isfinite(v) else "–"


def _img(png, alt, width):
    return f'<img src="data:image/png;base64,{base64.b64encode(png).decode("ascii")}" alt="{_e(alt)}" width="{width}">'


def _kv(rows):
    body = "".join(f"<tr><th>{_e(k)}</th><td>{v}</td></tr>" for k, v in rows if v not in (None, ""))
    return f'<table class="kv"><tbody>{body}</tbody></table>'


def _table(head, rows, numeric=()):
    def cls(i):
        return ' class="n"' if i in numeric else ""

    th = "".join(f"<th{cls(i)}>{h}</th>" for i, h in enumerate(head))
    body = "".join("<tr>" + "".join(f"<td{cls(i)}>{c}</td>" for i, c in enumerate(r)) + "</tr>" for r in rows)
    return f"<table><thead><tr>{th}</tr></thead><tbody>{body}</tbody></table>"


def _alignment_html(al):
    frames = al.get("frames") or []
    shifts = [np.hypot(r["row_shift_px"], r["col_shift_px"]) for r in frames]
    rows = [[_e(r["frame"]), _f(r["row_shift_px"], 2), _f(r["col_shift_px"], 2),
             _f(r.get("peak_ratio"), 1), _e(r.get("rejected") or "")] for r in frames]
    out = [f'<h3>Frame alignment</h3><p>Each frame was registered to frame {_e(al.get("reference_frame"))} '
           f'({_e(al.get("transform"))}) and resampled once onto its grid, before the measurement equation; '
           f'largest displacement {_f(max(shifts) if shifts else None, 2)} px; '
           f'{len(al.get("rejected_frames") or [])} frame(s) rejected and left out of the statistics '
           "(kept as empty frames in the temperature stack). Shifts are the displacement of each frame's "
           "content relative to the reference frame, positive down and right.</p>"]
    if len(rows) <= 40:
        out.append(_table(["Frame", "Row shift [px]", "Column shift [px]", "Peak ratio", "Rejected"], rows,
                          numeric=(0, 1, 2, 3)))
    else:
        bad = [r for r, f in zip(rows, frames) if f.get("rejected")]
        if bad:
            out.append(_table(["Frame", "Row shift [px]", "Column shift [px]", "Peak ratio", "Rejected"], bad,
                              numeric=(0, 1, 2, 3)))
    return "".join(out)


def comparison_section(st, picture, findings, fig_no):
    """HTML of the alignment and comparison part of a stack's section."""
    out = []
    if st.get("alignment"):
        out.append(_alignment_html(st["alignment"]))
    c = st.get("compare")
    if not c:
        return "".join(out), fig_no
    b, me, reg = c["baseline"], c["this_stack"], c["registration"]
    where = f" of survey {_e(b['survey'])}" if b.get("survey") else ""
    out.append("<h3>Comparison with a baseline</h3>")
    out.append(_kv([
        ("This stack", f"{_e(me['stack'])}" + (f", taken {_e(me['time'])}" if me.get("time") else ", time not given")),
        ("Baseline", f"{_e(b['stack'])}{where}" + (f", taken {_e(b['time'])}" if b.get("time") else ", time not given")
         + f" ({_e(b.get('source'))})"),
        ("Shift found", f"{_f(reg['row_shift_px'], 2)} px down, {_f(reg['col_shift_px'], 2)} px right"
         + (f", rotation {_f(reg['rotation_deg'], 2)}°, scale {_f(reg['scale'], 4)}" if reg["method"] != "translation"
            else "") + f" ({_e(reg['method'])}; peak ratio {_f(reg.get('peak_ratio'), 1)})"),
        ("Offset removed", f"{_f(c['offset']['removed_k'], 2)} K ({_e(c['offset']['mode'])})"),
        ("Thresholds", "; ".join(x for x in (
            f"colder at or below −{_f(c['below_k'], 1)} K" if c.get("below_k") else "",
            f"warmer at or above {_f(c['above_k'], 1)} K" if c.get("above_k") else "",
            f"at least {_e(c['min_area_px'])} px") if x)),
        ("Pressure difference", f"{_f(c['pressure_difference_pa'], 0)} Pa" if c.get("pressure_difference_pa")
         is not None else None),
        ("Findings", f"{_e(c['findings'])} ({len(c.get('suppressed') or [])} suppressed at edges)"),
    ]))
    pics = (picture or {}).get("compare")
    if pics is None:
        out.append('<div class="box warn">No difference picture: the comparison was not run in this report\'s '
                   f'run; see {_e(c["files"].get("difference"))}.</div>')
        return "".join(out), fig_no
    mine = [f for f in findings if f["kind"] in ("colder", "warmer")]
    fig_no += 1
    out.append(f'<figure>{_img(difference_png(pics["difference_k"], mine), "Difference", 814)}<figcaption>'
               f"Figure {fig_no}. {_e(me['stack'])} minus the aligned baseline {_e(b['stack'])}, offset removed, "
               f"colour map {DIFFERENCE_CMAP} centred on zero (blue colder, red warmer). Numbered circles: "
               "findings. Grey: outside the overlap of the two stacks.</figcaption></figure>")
    fig_no += 1
    out.append(f'<figure>{_img(checkerboard_png(pics["checkerboard_c"]), "Checkerboard", 448)}<figcaption>'
               f"Figure {fig_no}. Checkerboard of the two aligned mean frames ({TILE_PX}-pixel tiles alternately "
               "from this stack and the baseline): edges run on across the tile borders when the registration "
               "is right.</figcaption></figure>")
    out.append('<p class="note">Edges: resampling leaves part of a sharp step at its edge; where that expected '
               "residual alone reaches the threshold, a candidate is suppressed and listed in report.json "
               "(compare.suppressed). A change seen between two states is an indication: air leakage, moisture "
               "and thermal bridges need confirmation by other means.</p>")
    return "".join(out), fig_no
