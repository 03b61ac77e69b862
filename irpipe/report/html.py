"""The self-contained HTML report: inline CSS, pictures embedded as base64 PNG and inline
SVG, no external fetches; prints to A4 or Letter (no fixed page size, page-break rules,
images at most the page width).

Layout and wording are this project's own. Sections: heading block, survey conditions and
warnings, summary with the numbered findings, one section per stack (conditions and
corrections, picture, histogram, trend, region tables, findings), cautions and limits.

Two forms (:mod:`irpipe.report` chooses): one page for a small survey (:func:`render`), or
for a large one an index page (:func:`render_index`: conditions, summary, numbered
findings, one row per stack with a thumbnail) plus one page per stack
(:func:`render_stack_page`), each self-contained and linked to the others.

Pictures come encoded (:func:`irpipe.report.pictures.render_stack_pictures`); the finding
markers are laid over them here, where the survey-wide finding numbers are known.
"""
from __future__ import annotations

import base64
from html import escape

from .. import colourtable
from . import pictures as pics
from . import tables

_CSS = """
:root { --ink:#1d232b; --muted:#5b6570; --rule:#c9ced4; --soft:#f3f5f7; --accent:#27445f; }
* { box-sizing: border-box; }
html { -webkit-print-color-adjust: exact; print-color-adjust: exact; }
body { margin: 0; background: #ffffff; color: var(--ink);
       font: 13px/1.45 "DejaVu Sans", "Liberation Sans", Arial, Helvetica, sans-serif; }
main { max-width: 1060px; margin: 0 auto; padding: 28px 34px 40px; }
h1 { font-size: 23px; margin: 4px 0 12px; line-height: 1.25; }
h2 { font-size: 17px; margin: 30px 0 10px; padding-bottom: 4px; border-bottom: 2px solid var(--accent);
     color: var(--accent); break-after: avoid; page-break-after: avoid; }
h3 { font-size: 14px; margin: 20px 0 6px; break-after: avoid; page-break-after: avoid; }
p { margin: 6px 0; }
.kicker { text-transform: uppercase; letter-spacing: .08em; font-size: 11px; color: var(--muted); margin: 0; }
header.top { border-bottom: 1px solid var(--rule); padding-bottom: 12px; }
dl.meta { display: grid; grid-template-columns: max-content 1fr max-content 1fr; gap: 2px 14px; margin: 0; }
dl.meta dt { color: var(--muted); }
dl.meta dd { margin: 0; }
.note { color: var(--muted); font-size: 12px; }
.box { border: 1px solid var(--rule); background: var(--soft); padding: 8px 12px; margin: 10px 0;
       break-inside: avoid; page-break-inside: avoid; }
.box.warn { border-left: 5px solid #b0631b; background: #fbf4ec; }
.box.ok { border-left: 5px solid #4c7a5a; }
.box ul { margin: 4px 0; padding-left: 20px; }
.counts { display: flex; flex-wrap: wrap; gap: 8px; margin: 8px 0; }
.counts div { border: 1px solid var(--rule); padding: 6px 12px; min-width: 120px; }
.counts b { display: block; font-size: 19px; }
table { border-collapse: collapse; width: 100%; margin: 6px 0 10px; font-size: 11.5px; }
th, td { border-bottom: 1px solid var(--rule); padding: 3px 6px; text-align: left; vertical-align: top; }
th { background: var(--soft); font-weight: 600; border-top: 1px solid var(--rule); }
td.n, th.n { text-align: right; font-variant-numeric: tabular-nums; }
td.n, td.loc { white-space: nowrap; }
td.wide { min-width: 18em; }
td.loc { font-variant-numeric: tabular-nums; }
table.kv { width: auto; min-width: 48%; }
table.kv th { width: 1%; white-space: nowrap; background: none; border-top: none; color: var(--muted);
              font-weight: normal; }
thead { display: table-header-group; }
tr { break-inside: avoid; page-break-inside: avoid; }
.cols { display: flex; gap: 18px; align-items: flex-start; flex-wrap: wrap; }
.cols > * { flex: 1 1 300px; min-width: 0; }
figure { margin: 12px 0; break-inside: avoid; page-break-inside: avoid; }
figure img { display: block; max-width: 100%; height: auto; border: 1px solid var(--rule); }
.tgrow { display: flex; gap: 8px; align-items: stretch; }
.tg { position: relative; flex: 1 1 auto; min-width: 0; max-width: 760px; border: 1px solid var(--rule); }
figure .tg img { width: 100%; border: none; image-rendering: pixelated; }
.tg svg.ov { position: absolute; left: 0; top: 0; width: 100%; height: 100%; overflow: visible; }
svg.ov text.rl { fill: #fff; stroke: #000; paint-order: stroke; font-weight: 600; }
svg.ov .mk circle { fill: #fff; fill-opacity: .92; stroke: #000; }
svg.ov .mk text { text-anchor: middle; font-weight: 700; fill: #000; }
.cbar { display: flex; gap: 3px; flex: 0 0 auto; }
.cbar .ramp { width: 16px; border: 1px solid #555; background: RAMP; }
.cbar .ticks { position: relative; width: 34px; font-size: 10.5px; font-variant-numeric: tabular-nums; }
.cbar .ticks span { position: absolute; left: 0; transform: translateY(50%); white-space: nowrap; }
.cbar .ticks span::before { content: ""; display: inline-block; width: 5px; margin-right: 2px;
                            border-top: 1px solid #555; vertical-align: middle; }
.cbar .cbl { writing-mode: vertical-rl; transform: rotate(180deg); font-size: 11px; text-align: center; }
svg.plot { display: block; width: 100%; height: auto; border: 1px solid var(--rule); font-size: 10px; }
svg.plot .pt { font-size: 11px; font-weight: 600; fill: #1b1b1b; }
svg.plot .al { font-size: 10.5px; fill: #1b1b1b; }
svg.plot .tk { font-size: 9.5px; fill: #333; }
td.thumb img { display: block; border: 1px solid var(--rule); width: 160px; max-width: 100%; height: auto; }
nav.pages { display: flex; justify-content: space-between; gap: 12px; font-size: 12px; margin: 0 0 8px; }
figcaption { font-size: 11.5px; color: var(--muted); margin-top: 4px; }
.badge { display: inline-block; padding: 0 6px; margin: 1px 0; border-radius: 3px; font-size: 11px;
         font-weight: 600; white-space: nowrap; border: 1px solid #888; }
td { overflow-wrap: break-word; }
.p1 { background: #7d1d1d; color: #fff; border-color: #7d1d1d; }
.p2 { background: #b4541c; color: #fff; border-color: #b4541c; }
.p3 { background: #f0cf73; color: #1d232b; border-color: #c9a84d; }
.p4 { background: #e4e8ee; color: #1d232b; border-color: #aab3bf; }
.env { background: #e6e1f2; color: #2d2450; border-color: #9d92c4; }
.failed { border-left: 5px solid #7d1d1d; background: #f8eeee; }
section.stack > .stackhead { display: flex; justify-content: space-between; gap: 12px; flex-wrap: wrap; }
ol.cautions li { margin: 4px 0; }
footer { margin-top: 30px; border-top: 1px solid var(--rule); padding-top: 8px; font-size: 11px;
         color: var(--muted); }
@page { margin: 14mm 12mm 14mm 12mm; }
@media print {
  body { font-size: 9.5pt; }
  main { max-width: none; padding: 0; }
  h2 { margin-top: 14pt; }
  section.stack { break-before: page; page-break-before: always; }
  section#cautions { break-before: page; page-break-before: always; }
  table { font-size: 8.3pt; }
  .cols > * { flex-basis: 45%; }
  section#conditions { break-inside: avoid; page-break-inside: avoid; }
  figure.thermogram .tg { max-width: 150mm; }
  nav.pages { display: none; }
  a { color: inherit; text-decoration: none; }
}
"""
CSS = _CSS.replace("RAMP", colourtable.css_gradient("sequential"))     # the colour bar, once per page


# --- formatting -----------------------------------------------------------------------

def _e(x):
    return escape("" if x is None else str(x))


def _f(x, nd=2, unit=""):
    v = tables.num(x)
    if v is None:
        return "–"
    s = f"{v:.{nd}f}"
    if s.lstrip("-").strip("0.") == "":
        s = s.lstrip("-")
    return s + unit


def _pm(x, u, nd=2):
    """'value ± U' when U is known."""
    s = _f(x, nd)
    if s != "–" and u is not None:
        s += f" ± {u:.{nd}f}"
    return s


def _yn(x):
    return "–" if x is None else ("yes" if x else "no")


def _loc(at):
    if not at or at.get("row") is None:
        return "–"
    fr = f", f{at['frame']}" if at.get("frame") is not None else ""
    return f"r{at['row']} c{at['col']}{fr}"


def _badge(f):
    if f["kind"] == "electrical" and f.get("priority") is not None:
        return f'<span class="badge p{min(int(f["priority"]), 4)}">{_e(f["severity"])} (priority {f["priority"]})</span>'
    if f["kind"] == "envelope":
        return _env_badges((f["severity"] or "").split("; "))
    return ""


def _env_badges(fails):
    return " ".join(f'<span class="badge env">{_e(x)}</span>' for x in fails if x)


def _img(png, alt, width=None):
    b64 = base64.b64encode(png).decode("ascii")
    w = f' width="{int(width)}"' if width else ""
    return f'<img src="data:image/png;base64,{b64}" alt="{_e(alt)}"{w}>'


def _kv(rows):
    body = "".join(f"<tr><th>{_e(k)}</th><td>{v}</td></tr>" for k, v in rows if v not in (None, ""))
    return f'<table class="kv"><tbody>{body}</tbody></table>'


def _table(head, rows, numeric=(), nowrap=(), wide=(), cls=""):
    def attr(i):
        c = " ".join(n for n, on in (("n", i in numeric), ("loc", i in nowrap), ("wide", i in wide)) if on)
        return f' class="{c}"' if c else ""

    th = "".join(f"<th{attr(i)}>{h}</th>" for i, h in enumerate(head))
    body = ["<tr>" + "".join(f"<td{attr(i)}>{c}</td>" for i, c in enumerate(r)) + "</tr>" for r in rows]
    klass = f' class="{cls}"' if cls else ""
    return f"<table{klass}><thead><tr>{th}</tr></thead><tbody>{''.join(body)}</tbody></table>"


# --- sections -------------------------------------------------------------------------

def _header(report):
    s = report.get("survey", {})
    sw = report.get("software", {})
    meta = [("Site", s.get("site")), ("Survey date", s.get("date")), ("Operator", s.get("operator")),
            ("Building use", s.get("building_use")),
            ("Report created (UTC)", report.get("created_utc")),
            ("Produced with", f"{sw.get('name', 'irpipe')} {sw.get('version', '')}".strip()),
            ("Survey configuration", report.get("config"))]
    dl = "".join(f"<dt>{_e(k)}</dt><dd>{_e(v)}</dd>" for k, v in meta if v not in (None, ""))
    title = s.get("title") or "Infrared survey"
    return (f'<header class="top"><p class="kicker">Infrared thermography survey report</p>'
            f"<h1>{_e(title)}</h1><dl class=\"meta\">{dl}</dl></header>")


def _finding_rows(findings, with_stack, href=None):
    """Table rows of findings; ``href`` maps a stack name to its page file (index page)."""
    rows = []
    for f in findings:
        value = _f(f["peak_c"], 1, " °C")
        page = _e((href or {}).get(f["stack"], ""))
        r = [f'<a href="{page}#finding-{f["number"]}">{f["number"]}</a>' if with_stack else
             f'<span id="finding-{f["number"]}">{f["number"]}</span>']
        if with_stack:
            r.append(_e(f["stack"]))
        r += [_e(tables.KIND_LABEL.get(f["kind"], f["kind"])) + (f" <i>{_e(f['region'])}</i>" if f.get("region") else ""),
              _loc(f), value, _f(f["delta_k"], 1, " K")]
        if with_stack:
            r.append(_badge(f) or "–")
        else:
            r += [_f(f["mean_c"], 1, " °C"), _e(f["area_px"]),
                  " ".join(x for x in (_badge(f), _e(f["detail"])) if x)]
        rows.append(r)
    return rows


def _summary(report, findings, href=None):
    done = tables.done_stacks(report)
    failed = [s for s in report.get("stacks", []) if s.get("status", "done") != "done"]
    by = {k: sum(1 for f in findings if f["kind"] == k) for k in tables.KIND_ORDER}
    urgent = sum(1 for f in findings if f["kind"] == "electrical" and (f.get("priority") or 9) <= 2)
    cells = [("stacks processed", len(done)), ("stacks failed", len(failed)) if failed else None,
             ("findings", len(findings)), ("electrical, priority 1-2", urgent) if by["electrical"] else None,
             ("envelope surfaces", by["envelope"]), ("hot spots", by["hot"]), ("cold spots", by["cold"])]
    counts = "".join(f"<div><b>{v}</b>{_e(k)}</div>" for c in cells if c for k, v in [c])
    out = ['<section id="summary"><h2>Summary</h2>', f'<div class="counts">{counts}</div>',
           '<p class="note">Every figure in this report is to be read with the cautions and limits at '
           'its end. Finding numbers are the same in the pictures, the tables and findings.csv.</p>']
    if findings:
        out.append("<h3>Numbered findings</h3>")
        out.append(_table(["No.", "Stack", "Finding", "Location", "Peak / lowest", "Difference", "Grade"],
                          _finding_rows(findings, True, href), numeric=(0, 4, 5), nowrap=(1, 3)))
    else:
        out.append('<div class="box ok">No findings were raised by the configured thresholds and '
                   'assessments.</div>')
    out.append("</section>")
    return "".join(out)


def _conditions(report):
    s = report.get("survey", {})
    rows = [("Indoor air temperature", _f(s.get("indoor_air_c"), 1, " °C") if "indoor_air_c" in s else None),
            ("Outdoor air temperature", _f(s.get("outdoor_air_c"), 1, " °C") if "outdoor_air_c" in s else None),
            ("Indoor-outdoor difference", _f(s.get("indoor_outdoor_difference_k"), 1, " K")
             if "indoor_outdoor_difference_k" in s else None),
            ("Indoor relative humidity", _f(s.get("indoor_relative_humidity_pct"), 0, " %")
             if s.get("indoor_relative_humidity_pct") is not None else None),
            ("Indoor dew point", _f(s.get("indoor_dew_point_c"), 1, " °C") if "indoor_dew_point_c" in s else None),
            ("Building use", _e(s.get("building_use"))),
            ("Critical temperature factor (configured)", _f(s.get("critical_temperature_factor"), 2)
             if s.get("critical_temperature_factor") is not None else None)]
    out = ['<section id="conditions"><h2>Survey conditions</h2>', _kv(rows)]
    w = report.get("warnings") or []
    if w:
        items = "".join(f"<li>{_e(x)}</li>" for x in w)
        out.append(f'<div class="box warn"><b>Warnings on the survey conditions and processing</b><ul>{items}</ul></div>')
    else:
        out.append('<div class="box ok">No warnings on the survey conditions or the processing.</div>')
    out.append("</section>")
    return "".join(out)


def _stack_conditions(st):
    c = st.get("conditions", {}) or {}
    refl = c.get("reflected_temperature_c")
    refl = _f(refl, 1, " °C") if isinstance(refl, (int, float)) else _e(refl)
    rows = [("Emissivity", _e(c.get("emissivity"))),
            ("Reflected temperature", refl),
            ("Air temperature", _f(c.get("air_temperature_c"), 1, " °C")),
            ("Relative humidity", _f(c.get("relative_humidity_pct"), 0, " %")
             if c.get("relative_humidity_pct") is not None else None),
            ("Distance", _f(c.get("distance_m"), 1, " m")),
            ("Atmospheric path", _e(c.get("path"))),
            ("Band transmittance (300 K)", _f(c.get("band_transmittance_300k"), 4)),
            ("View angle from normal", _f(c.get("view_angle_deg"), 0, "°") if c.get("view_angle_deg") is not None
             else None)]
    return _kv(rows)


def _stack_corrections(st):
    n = (st.get("frames") or 0) * (st.get("rows") or 0) * (st.get("cols") or 0)
    inv = st.get("invalid_pixels") or {}
    total = sum(int(v) for v in inv.values())

    def pct(v):
        return f"{v}" + (f" ({100.0 * v / n:.2g} %)" if n and v else "")

    rows = [("Processing plan", _e(st.get("plan"))),
            ("Bad detector pixels filled", _e(st.get("bad_pixels_filled")) if "bad_pixels_filled" in st else None),
            ("Invalid pixel values", f"{pct(total)} of {n}" if n else _e(total))]
    rows += [(f"– {k.replace('_', ' ')}", pct(int(v))) for k, v in inv.items()]
    if "never_valid_pixels" in st:
        rows.append(("Pixels never valid", _e(st["never_valid_pixels"])))
    ser = st.get("reflected_temperature_series_c")
    if ser:
        rows.append(("Reflected temperature per frame", _e(", ".join(f"{v:.1f}" for v in ser)) + " °C"))
    return _kv(rows)


def _region_tables(st):
    regions = st.get("regions") or []
    if not regions:
        return '<p class="note">No regions were defined for this stack.</p>'
    has_u = any(tables.uncertainty_of(r, "mean_c") is not None for r in regions)
    unit = " [°C]" + (" ± U (k = 2)" if has_u else "")
    head = ["Region", "Pixels", "Min" + unit, "Mean" + unit, "Max" + unit, "Std. dev. [K]",
            "P05 [°C]", "P95 [°C]", "Lowest at", "Highest at"]
    rows = []
    for r in regions:
        rows.append([_e(r["name"]), _e(r.get("pixels")),
                     _pm(r.get("min_c"), tables.uncertainty_of(r, "min_c")),
                     _pm(r.get("mean_c"), tables.uncertainty_of(r, "mean_c")),
                     _pm(r.get("max_c"), tables.uncertainty_of(r, "max_c")),
                     _f(r.get("std_c"), 2), _f(r.get("p05_c"), 2), _f(r.get("p95_c"), 2),
                     _loc(r.get("min_at")), _loc(r.get("max_at"))])
    out = ["<h3>Region temperatures</h3>",
           _table(head, rows, numeric=(1, 2, 3, 4, 5, 6, 7), nowrap=(8, 9)),
           '<p class="note">Statistics over all valid pixel values of all frames; locations as row, '
           'column and frame (r, c, f), counted from 0 at the top left.'
           + (' U is the expanded uncertainty with coverage factor k = 2.' if has_u else '') + '</p>']
    env = [r for r in regions if r.get("temperature_factor") is not None or r.get("mould_risk") is not None]
    if env:
        ec = st.get("envelope_conditions") or {}
        rows = []
        for r in env:
            fails = tables.envelope_failures(r)
            rows.append([_e(r["name"]), _f(r.get("minimum_surface_c"), 2), _f(r.get("temperature_factor"), 3),
                         _f(r.get("critical_temperature_factor"), 2), _f(r.get("surface_relative_humidity_pct"), 0),
                         _yn(r.get("mould_risk")), _yn(r.get("condensation_risk")),
                         _env_badges(fails) if fails else "passes"])
        out += ["<h3>Envelope assessment</h3>",
                _table(["Region", "Lowest surface [°C]", "Temperature factor", "Critical factor",
                        "Surface RH [%]", "Mould risk", "Condensation risk", "Result"], rows, numeric=(1, 2, 3, 4)),
                '<p class="note">Temperature factor f = (surface − outdoor air) / (indoor air − outdoor air) '
                'from the lowest 3×3-mean of the frame-averaged image'
                + (f"; indoor {_f(ec.get('indoor_air_c'), 1)} °C, outdoor {_f(ec.get('outdoor_air_c'), 1)} °C"
                   if ec else "")
                + (f", indoor relative humidity {_f(ec.get('indoor_relative_humidity_pct'), 0)} %"
                   if ec.get("indoor_relative_humidity_pct") is not None else "")
                + '. Mould risk: surface relative humidity of 80 % or more; condensation risk: surface at '
                'or below the indoor dew point. The temperature factor describes internal surfaces.</p>']
    el = st.get("electrical") or {}
    comps = el.get("components") or []
    if comps:
        rows = []
        for c in comps:
            grade = (f'<span class="badge p{min(int(c["priority"]), 4)}">{_e(c["severity"])} '
                     f'(priority {c["priority"]})</span>' if c.get("priority") is not None else _e(c.get("severity")))
            warn = "; ".join(c.get("warnings") or [])
            rows.append([_e(c["region"]), _e(c.get("reference") or "–"), _f(c.get("max_c"), 1),
                         _f(c.get("rise_over_reference_k"), 1), _f(c.get("rise_over_ambient_k"), 1),
                         _f(c.get("rise_over_ambient_at_rated_load_k"), 1), grade,
                         _e(c.get("action")) + (f"<br><i>{_e(warn)}</i>" if warn else "")])
        load = el.get("load_pct")
        out += ["<h3>Electrical components</h3>",
                _table(["Component", "Compared with", "Max [°C]", "Rise over comparison [K]",
                        "Rise over ambient [K]", "At rated load [K]", "Grade", "Action"], rows, numeric=(2, 3, 4, 5),
                       wide=(7,)),
                '<p class="note">'
                + (f"Load during the survey: {_f(load, 0)} % of rating; rises scaled to rated load by the "
                   "square of the current ratio. " if load is not None else "Load during the survey not given. ")
                + f"Severity bands: {_e(el.get('table_source'))}</p>"]
    return "".join(out)


def _thermogram(name, st, enc, mine, fig_no):
    """The thermogram figure: indexed PNG, vector overlay (region names, numbered findings)
    and the colour bar of this stack's scale."""
    rng = enc.get("scale_c")
    levels = enc.get("levels")
    invalid = enc.get("invalid_px") or 0
    b64 = base64.b64encode(enc["thermogram_png"]).decode("ascii")
    img = (f'<img src="data:image/png;base64,{b64}" width="{enc["cols"]}" height="{enc["rows"]}" '
           f'alt="{_e(f"Corrected temperature of {name}")}">')
    step = (rng[1] - rng[0]) / levels if rng and levels else None
    cap = (f"Figure {fig_no}. {_e(name)}: corrected surface temperature, mean over "
           f"{_e(st.get('frames'))} frame(s), colour map inferno"
           + (f", scale {rng[0]:.1f} to {rng[1]:.1f} °C in {levels} steps of {step:.2g} K" if rng else "")
           + ". White outlines: regions, named at their top-left corner. Numbered circles: findings, "
           "at the pixel of their peak or lowest value."
           + (f" Grey: {invalid} pixel(s) without a valid value." if invalid else ""))
    return (f'<figure class="thermogram"><div class="tgrow"><div class="tg">{img}{pics.overlay_svg(enc, mine)}'
            f'</div>{pics.colour_bar_html(rng)}</div><figcaption>{cap}</figcaption></figure>')


def _stack_section(k, st, enc, findings, fig_no):
    """One stack's section; ``enc`` its encoded pictures (or None)."""
    name = st["name"]
    out = [f'<section class="stack" id="stack-{k}"><div class="stackhead"><h2>{k}. {_e(name)}</h2></div>']
    if st.get("status", "done") != "done":
        out.append(f'<div class="box failed"><b>This stack was not processed.</b> {_e(st.get("error"))}</div>'
                   "</section>")
        return "".join(out), fig_no
    out.append(f'<p>Source <b>{_e(st.get("path"))}</b>: {_e(st.get("frames"))} frame(s) of {_e(st.get("rows"))} × '
               f'{_e(st.get("cols"))} pixels; assessment <b>{_e(st.get("assessment", "general"))}</b>.</p>')
    if st.get("warnings"):
        items = "".join(f"<li>{_e(w)}</li>" for w in st["warnings"])
        out.append(f'<div class="box warn"><b>Warnings</b><ul>{items}</ul></div>')
    out.append('<div class="cols"><div><h3>Conditions applied</h3>' + _stack_conditions(st) + "</div>"
               '<div><h3>Corrections and data quality</h3>' + _stack_corrections(st) + "</div></div>")
    mine = [f for f in findings if f["stack"] == name]
    if enc and enc.get("thermogram_png"):
        fig_no += 1
        out.append(_thermogram(name, st, enc, mine, fig_no))
        plots = []
        fig_no += 1
        plots.append(f"<figure>{enc.get('histogram_svg', '')}<figcaption>Figure {fig_no}. "
                     + f"Distribution of all valid values of {_e(name)}"
                     + " (logarithmic count axis).</figcaption></figure>")
        tr = pics.trend_svg(st.get("regions") or [], st.get("reflected_temperature_series_c"))
        if tr is not None:
            fig_no += 1
            plots.append(f"<figure>{tr}<figcaption>Figure {fig_no}. "
                         f"Mean of each region per frame; the shaded band spans the region's minimum to maximum."
                         "</figcaption></figure>")
        out.append('<div class="cols">' + "".join(plots) + "</div>")
    else:
        out.append('<div class="box warn">No picture: the frame data of this stack were not available to the '
                   'report writer.</div>')
    out.append(_region_tables(st))
    if st.get("heat_flow"):
        from .heatflow import section
        hf_html, fig_no = section(st, enc, fig_no)
        out.append(hf_html)
    if st.get("alignment") or st.get("compare"):     # own section (irpipe/report/comparison.py)
        from .comparison import comparison_section
        sec, fig_no = comparison_section(st, enc, mine, fig_no)
        out.append(sec)
    out.append("<h3>Findings</h3>")
    if mine:
        out.append(_table(["No.", "Finding", "Location", "Peak / lowest", "Difference", "Mean", "Area [px]",
                           "Assessment"], _finding_rows(mine, False), numeric=(0, 3, 4, 5, 6), nowrap=(2,),
                          wide=(7,)))
    else:
        out.append('<p class="note">No findings for this stack.</p>')
    out.append("</section>")
    return "".join(out), fig_no


def _cautions(report):
    items = "".join(f"<li>{_e(c)}</li>" for c in report.get("cautions") or [])
    return (f'<section id="cautions"><h2>Cautions and limits</h2><ol class="cautions">{items}</ol>'
            '<p class="note">Temperatures are given in degrees Celsius and differences in kelvin. '
            'The numbers of this report are also in regions.csv, findings.csv and report.json '
            f'(schema {_e(report.get("schema"))}).</p></section>')


def _footer(report):
    sw = report.get("software", {})
    return (f"<footer>{_e(sw.get('name', 'irpipe'))} {_e(sw.get('version', ''))} · report schema "
            f"{_e(report.get('schema'))} · created {_e(report.get('created_utc'))}</footer>")


def _document(title, parts):
    return ("<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
            "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n"
            f"<title>{_e(title)}</title>\n<style>{CSS}</style>\n</head>\n<body>\n<main>\n"
            + "\n".join(parts) + "\n</main>\n</body>\n</html>\n")


def render(report: dict, pictures: dict, findings: list) -> str:
    """The complete single-page HTML document (one string); ``pictures`` maps a stack name
    to its encoded pictures."""
    s = report.get("survey", {})
    title = s.get("title") or "Infrared survey report"
    parts = [_header(report), _conditions(report), _summary(report, findings)]
    fig_no = 0
    for k, st in enumerate(report.get("stacks", []), 1):
        sec, fig_no = _stack_section(k, st, (pictures or {}).get(st.get("name")), findings, fig_no)
        parts.append(sec)
    parts += [_cautions(report), _footer(report)]
    return _document(title, parts)


def _stack_rows(report, pictures, findings, href):
    rows = []
    by_stack = {}
    for f in findings:
        by_stack.setdefault(f["stack"], []).append(f)
    for k, st in enumerate(report.get("stacks", []), 1):
        name = st.get("name")
        link = f'<a href="{_e(href.get(name, ""))}">{_e(name)}</a>'
        enc = (pictures or {}).get(name) or {}
        if st.get("status", "done") != "done":
            rows.append([str(k), link, "–", "–", "–", "–", f'<span class="badge p1">not processed</span> '
                         f'{_e(st.get("error"))}'])
            continue
        thumb = (_img(enc["thumbnail_png"], f"Thumbnail of {name}", 160) if enc.get("thumbnail_png") else "–")
        rng = enc.get("scale_c")
        mine = by_stack.get(name, [])
        nums = ", ".join(f'<a href="{_e(href.get(name, ""))}#finding-{f["number"]}">{f["number"]}</a>' for f in mine)
        regions = ", ".join(_e(r.get("name")) for r in st.get("regions") or [])
        warn = f' <span class="badge p3">{len(st["warnings"])} warning(s)</span>' if st.get("warnings") else ""
        rows.append([str(k), link + warn, thumb, _e(st.get("frames")),
                     f"{rng[0]:.1f} to {rng[1]:.1f}" if rng else "–", regions or "–", nums or "none"])
    return rows


def render_index(report: dict, pictures: dict, findings: list, href: dict) -> str:
    """The index page of a large survey: heading, conditions, summary with the numbered
    findings (linked to their stack pages), one row per stack with a thumbnail, cautions.
    ``href`` maps each stack name to its page file, relative to the index."""
    s = report.get("survey", {})
    title = s.get("title") or "Infrared survey report"
    rows = _stack_rows(report, pictures, findings, href)
    table = _table(["No.", "Stack", "Picture", "Frames", "Scale [°C]", "Regions", "Findings"], rows,
                   numeric=(0, 3), nowrap=(4,))
    table = table.replace("<td><img", '<td class="thumb"><img')
    stacks = ('<section id="stacks"><h2>Stacks</h2><p class="note">One page per stack, with its picture, '
              'histogram, trend, region tables and findings; the picture here is a thumbnail of the stack\'s '
              'frame-averaged corrected temperature on its own colour scale.</p>' + table + "</section>")
    parts = [_header(report), _conditions(report), _summary(report, findings, href), stacks, _cautions(report),
             _footer(report)]
    return _document(title, parts)


def render_stack_page(report: dict, k: int, st: dict, enc, findings: list, index_href: str,
                      prev_href=None, next_href=None) -> str:
    """The page of stack number ``k`` of a large survey: a short heading linked to the index
    (and to the previous and next stack), the stack's section and the cautions."""
    s = report.get("survey", {})
    title = s.get("title") or "Infrared survey report"
    nav = [f'<a href="{_e(index_href)}">Survey index</a>',
           "<span>" + " · ".join(x for x in (
               f'<a href="{_e(prev_href)}">previous stack</a>' if prev_href else "",
               f'<a href="{_e(next_href)}">next stack</a>' if next_href else "") if x) + "</span>"]
    head = (f'<header class="top"><p class="kicker">Infrared thermography survey report · stack {k} of '
            f'{len(report.get("stacks", []))}</p><h1>{_e(title)}</h1></header>'
            f'<nav class="pages">{"".join(nav)}</nav>')
    sec, _ = _stack_section(k, st, enc, findings, 0)
    return _document(f"{st.get('name')} · {title}", [head, sec, _cautions(report), _footer(report)])
