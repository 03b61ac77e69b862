"""Heat-flow part of the report: the U-value picture with its own scale in W/(m2 K), the
heat-loss table, the ISO 9869-1 criteria, the cumulative-U plot per region and the energy
cautions (HTML), and the heat-flow columns of regions.csv.

Kept apart from the general report code: ``section(st, picture, fig_no)`` returns the HTML
of one stack's heat-flow part; nothing here is called for stacks without ``heat_flow``.
Colour map of the U picture: matplotlib's perceptually uniform ``cividis`` (a quantity
other than temperature gets a map other than the thermogram's).
"""
from __future__ import annotations

import base64
from html import escape

import numpy as np

from .figures import _new_figure, _png

U_CMAP = "cividis"
HEAT_FLOW_COLUMNS = ("area_m2", "heat_flux_w_m2", "u_value_w_m2k", "u_value_expanded_uncertainty_w_m2k",
                     "u_value_converged", "annual_heat_loss_kwh", "annual_heat_cost", "psi_w_mk",
                     "bridge_length_m", "excess_annual_heat_loss_kwh")


def _e(x):
    return escape("" if x is None else str(x))


def _n(x, nd=3):
    return "–" if x is None else f"{x:.{nd}f}"


def _img(png, alt, width):
    return (f'<img src="data:image/png;base64,{base64.b64encode(png).decode("ascii")}" alt="{_e(alt)}" '
            f'width="{int(width)}">')


def u_value_picture(u_map, masks=None):
    """PNG of the per-pixel U [W/(m2 K)] with its own colour bar; grey where invalid."""
    import matplotlib

    u = np.asarray(u_map, float)
    rows, cols = u.shape
    v = u[np.isfinite(u)]
    lo, hi = (float(np.percentile(v, 1)), float(np.percentile(v, 99))) if v.size else (0.0, 1.0)
    if hi - lo < 0.05:
        lo, hi = lo - 0.025, hi + 0.025
    w = 6.2
    h = max(2.0, (w - 1.3) * rows / cols + 0.6)
    fig = _new_figure(w, h)
    ax = fig.add_axes([0.08, 0.1, 0.72, 0.85])
    cmap = matplotlib.colormaps[U_CMAP].with_extremes(bad="#8c8c8c")
    im = ax.imshow(u, cmap=cmap, vmin=max(lo, 0.0) if lo >= 0 else lo, vmax=hi, interpolation="nearest")
    for name, m in (masks or {}).items():
        if m.any():
            ax.contour(np.asarray(m, float), levels=[0.5], colors="white", linewidths=0.8)
            r, c = np.argwhere(m)[0]
            ax.text(c, r, f" {name}", color="white", fontsize=6.5, va="top")
    ax.set_xlabel("column [pixel]", fontsize=8)
    ax.set_ylabel("row [pixel]", fontsize=8)
    ax.tick_params(labelsize=7)
    cax = fig.add_axes([0.84, 0.1, 0.03, 0.85])
    cb = fig.colorbar(im, cax=cax)
    cb.set_label("U [W/(m²·K)]", fontsize=8)
    cb.ax.tick_params(labelsize=7)
    return _png(fig)


def cumulative_plot(regions, min_hours=72.0):
    """PNG of the cumulative average U against time per region, with the 72 h minimum
    duration and the +-5 % band around each region's end value (ISO 9869-1, from memory)."""
    fig = _new_figure(6.2, 2.9)
    ax = fig.add_axes([0.1, 0.16, 0.62, 0.78])
    import matplotlib
    cm = matplotlib.colormaps["viridis"]
    series = [r for r in regions if r.get("u_value_cumulative") and r["u_value_cumulative"]["hours"]]
    for k, r in enumerate(series):
        c = cm(k / max(len(series) - 1, 1) * 0.9)
        h = np.array(r["u_value_cumulative"]["hours"], float)
        u = np.array([np.nan if x is None else x for x in r["u_value_cumulative"]["u_w_m2k"]], float)
        ax.plot(h, u, color=c, lw=1.2, label=r["name"])
        end = r.get("u_value_w_m2k")
        if end:
            ax.axhspan(0.95 * end, 1.05 * end, xmin=0.8, color=c, alpha=0.15, lw=0)
        crit = {x["name"]: x for x in r.get("u_value_criteria") or []}
        e24 = crit.get("end_vs_24h_earlier", {})
        if e24.get("u_24h_earlier") is not None and h.size:
            ax.plot([h[-1] - 24.0], [e24["u_24h_earlier"]], marker="o", ms=3.5, color=c)
    ax.axvline(min_hours, color="#b22222", lw=0.8, ls="--")
    ax.text(min_hours, ax.get_ylim()[1], " 72 h", color="#b22222", fontsize=7, va="top")
    ax.set_xlabel("time from the first frame [h]", fontsize=8)
    ax.set_ylabel("cumulative U [W/(m²·K)]", fontsize=8)
    ax.tick_params(labelsize=7)
    if series:
        ax.legend(fontsize=6.5, loc="upper left", bbox_to_anchor=(1.01, 1.0), frameon=False)
    return _png(fig)


def _met(m):
    return "not evaluable" if m is None else ("met" if m else "NOT met")


def section(st, picture, fig_no):
    """HTML of a stack's heat-flow part; returns (html, figure number)."""
    hf = st.get("heat_flow")
    if not hf:
        return "", fig_no
    regions = [r for r in st.get("regions") or [] if "u_value_w_m2k" in r]
    out = ['<div class="heatflow"><h3>Heat loss (in-situ U-value)</h3>']
    out.append(f'<div class="box warn"><b>Energy figures are estimates.</b> {_e(hf.get("caution"))}</div>')
    if hf["side"] == "outside":
        out.append('<div class="box warn">Measured from the outside surface: less reliable than the inside '
                   'method (wind, sky radiation); only night frames are used by default.</div>')
    if "single-time" in hf.get("estimate", ""):
        out.append('<div class="box warn">No air log: a single-time, steady-state estimate from the constant '
                   'survey air temperatures. It is not an ISO 9869-1 measurement; the criteria are not '
                   'evaluable.</div>')
    rows = [("Method", _e(hf.get("method"))), ("Normalisation", _e(hf.get("normalisation"))),
            ("Estimate", _e(hf.get("estimate"))),
            ("Duration", f'{_n(hf.get("duration_h"), 1)} h, {hf.get("frames_used")} of {hf.get("frames")} frames '
                         f'({_e(hf.get("window"))})'),
            ("Air temperatures", _e(hf.get("air_temperatures"))),
            ("Convective coefficient h_c", _e(hf.get("convective_coefficient"))),
            ("Hemispherical emissivity", _e(hf.get("hemispherical_emissivity"))),
            ("Radiant temperature", _e(hf.get("radiant_temperature"))),
            ("Camera offset correction", _e(hf.get("offset_correction"))),
            ("Pixel on the wall", f'{_n((hf.get("pixel_footprint_m") or [None])[0] and 1e3 * hf["pixel_footprint_m"][0], 2)} × '
                                  f'{_n((hf.get("pixel_footprint_m") or [None, None])[1] and 1e3 * hf["pixel_footprint_m"][1], 2)} mm '
                                  f'({_e(hf.get("pixel_footprint"))})'),
            ("Degree-days", f'{_e(hf.get("heating_degree_days_kd"))} K·d/a, base {_e(hf.get("heating_degree_days_base_c"))} °C'
             if hf.get("heating_degree_days_kd") else "not given: no annual loss")]
    out.append('<table class="kv"><tbody>' + "".join(f"<tr><th>{_e(k)}</th><td>{v}</td></tr>" for k, v in rows)
               + "</tbody></table>")
    umap = (picture or {}).get("u_value_map")
    if umap is not None:
        fig_no += 1
        png = u_value_picture(umap, {r["name"]: m for r in regions
                                     for n, m in ((picture or {}).get("masks") or {}).items() if n == r["name"]})
        out.append(f'<figure>{_img(png, "In-situ U-value per pixel", 682)}<figcaption>Figure {fig_no}. '
                   f'{_e(st["name"])}: in-situ U-value per pixel by the average method, W/(m²·K), colour map '
                   f'{U_CMAP} with its own scale (1st to 99th percentile); grey: no valid value.</figcaption></figure>')
    head = ["Region", "Area [m²]", "Mean q [W/m²]", "U ± U95 [W/(m²·K)]", "Rel. U95", "Converged",
            "Annual loss [kWh/a]"]
    has_cost = any(r.get("annual_heat_cost") is not None for r in regions)
    if has_cost:
        head.append("Annual cost")
    body = []
    for r in regions:
        cells = [_e(r["name"]), _n(r.get("area_m2"), 3), _n(r.get("heat_flux_w_m2"), 2),
                 f'{_n(r.get("u_value_w_m2k"), 3)} ± {_n(r.get("u_value_expanded_uncertainty_w_m2k"), 3)}',
                 f'{_n(r.get("u_value_relative_expanded_uncertainty_pct"), 0)} %',
                 "yes" if r.get("u_value_converged") else "no", _n(r.get("annual_heat_loss_kwh"), 1)]
        if has_cost:
            cells.append(_n(r.get("annual_heat_cost"), 2))
        body.append("<tr>" + "".join(f"<td>{c}</td>" for c in cells) + "</tr>")
    out.append("<h4>Heat loss by region</h4><table><thead><tr>" + "".join(f"<th>{h}</th>" for h in head)
               + "</tr></thead><tbody>" + "".join(body) + "</tbody></table>")
    out.append(f'<p class="note">{_e(hf.get("annual_loss_note"))}. U95: expanded uncertainty (95 %, Monte Carlo '
               'with the systematic inputs common to all frames and pixels). Where the surface is only a few '
               'tenths of a kelvin below the air (well-insulated walls), small errors in the camera, emissivity '
               'or radiant temperature change U by tens of per cent.</p>')
    bridges = st.get("thermal_bridges") or []
    if bridges:
        bb = []
        for b in bridges:
            bb.append("<tr>" + "".join(f"<td>{c}</td>" for c in (
                _e(b["region"]), _n(b.get("psi_w_mk"), 3), _n(b.get("length_m"), 2),
                _n(b.get("excess_annual_heat_loss_kwh"), 1), _e(b.get("kind")),
                _e(b.get("note") or b.get("dimension_system")))) + "</tr>")
        out.append("<h4>Thermal bridges</h4><table><thead><tr><th>Region</th><th>ψ [W/(m·K)]</th><th>Length [m]</th>"
                   "<th>Excess loss [kWh/a]</th><th>Kind</th><th>Note</th></tr></thead><tbody>" + "".join(bb)
                   + "</tbody></table>")
        out.append('<p class="note">ψ is an internal-dimension value (ψ_i) for a bridge in a flat wall, from the U '
                   'map against the reference region; corners are flagged. A bridge\'s excess loss is already part '
                   'of the loss of any region that contains it.</p>')
    crit = hf.get("criteria") or []
    if crit:
        cr = "".join(f"<tr><td>{_e(c['name'])}</td><td>{_met(c['met'])}</td><td>{_e(c['detail'])}</td></tr>"
                     for c in crit + list(hf.get("survey_checks") or []))
        out.append(f"<h4>ISO 9869-1 criteria (region {_e(hf.get('criteria_region'))}) and survey conditions</h4>"
                   f"<table><thead><tr><th>Criterion</th><th>Result</th><th>Figures</th></tr></thead><tbody>{cr}"
                   "</tbody></table>")
    if any(r.get("u_value_cumulative") for r in regions):
        fig_no += 1
        out.append(f'<figure>{_img(cumulative_plot(regions), "Cumulative U per region", 682)}<figcaption>Figure '
                   f'{fig_no}. Cumulative average U against time per region. Dashed line: the 72 h minimum '
                   'duration; shaded: ±5 % of the end value; dot: the value 24 h before the end (ISO 9869-1 '
                   'criteria, from memory).</figcaption></figure>')
    out.append("</div>")
    return "".join(out), fig_no


def region_columns(report):
    """Extra regions.csv columns when a stack has heat_flow, else ()."""
    return HEAT_FLOW_COLUMNS if any(s.get("heat_flow") for s in report.get("stacks", [])) else ()


def region_values(st, region):
    """Heat-flow values of one region row (bridge figures where the region is a bridge)."""
    b = next((x for x in st.get("thermal_bridges") or [] if x.get("region") == region.get("name")), {})
    vals = {k: region.get(k) for k in HEAT_FLOW_COLUMNS[:7]}
    vals.update({"psi_w_mk": b.get("psi_w_mk"), "bridge_length_m": b.get("length_m"),
                 "excess_annual_heat_loss_kwh": b.get("excess_annual_heat_loss_kwh")})
    return vals
