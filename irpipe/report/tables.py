"""The report's tables as plain rows: the numbered finding list (one function, used by the
CSV, the HTML table and the picture markers alike), the per-region rows, and their CSV text.

No plotting and no file I/O here; values keep the units of report.json (degrees Celsius
``_c``, kelvin differences ``_k``, percent ``_pct``).
"""
from __future__ import annotations

import csv
import io
import math

#: Finding kinds, in the order they are listed within a stack.
KIND_ORDER = ("electrical", "envelope", "hot", "cold")
KIND_LABEL = {"electrical": "electrical component", "envelope": "envelope surface",
              "hot": "hot spot", "cold": "cold spot",
              "colder": "colder than baseline", "warmer": "warmer than baseline"}
FINDING_COLUMNS = ("number", "stack", "kind", "region", "frame", "row", "col", "peak_c", "mean_c",
                   "area_px", "delta_k", "reference", "severity", "priority", "detail")

REGION_COLUMNS = ("stack", "region", "pixels", "valid_values", "min_c", "max_c", "mean_c", "std_c",
                  "p05_c", "p95_c", "min_frame", "min_row", "min_col", "max_frame", "max_row", "max_col",
                  "minimum_surface_c", "temperature_factor", "critical_temperature_factor",
                  "surface_relative_humidity_pct", "mould_risk", "condensation_risk",
                  "expanded_uncertainty_k", "electrical_severity", "electrical_priority",
                  "rise_over_reference_k", "rise_over_ambient_k", "rise_over_ambient_at_rated_load_k")


def done_stacks(report):
    """Stacks that were processed (failed stacks carry only name, status and error)."""
    return [s for s in report.get("stacks", []) if s.get("status", "done") == "done"]


def num(x):
    """A finite float, or None (None, NaN, inf and non-numbers all become None)."""
    if x is None or isinstance(x, bool):
        return None
    try:
        v = float(x)
    except (TypeError, ValueError):
        return None
    return v if math.isfinite(v) else None


def envelope_failures(region):
    """Which envelope criteria a region fails, as short texts (empty when it passes or was
    not assessed)."""
    out = []
    f, fc = num(region.get("temperature_factor")), num(region.get("critical_temperature_factor"))
    if f is not None and fc is not None and f < fc:
        out.append("temperature factor below critical")
    if region.get("mould_risk") is True:
        out.append("mould risk")
    if region.get("condensation_risk") is True:
        out.append("condensation risk")
    return out


def build_findings(report):
    """The numbered list of findings of the whole survey.

    Per processed stack, in report order: electrical components with a severity band
    (most severe first), envelope regions failing the temperature factor or at mould or
    condensation risk (in region order), then the hot and cold spots of the spot stage
    (in their own order, largest difference first). Numbers run 1, 2, ... across the
    survey. Each finding is a dict with the keys of ``FINDING_COLUMNS``; ``region`` is the
    region the finding belongs to (None for spots); ``frame``, ``row``, ``col`` locate the
    pixel marked on the picture.
    """
    items = []
    for st in done_stacks(report):
        name = st["name"]
        regions = {r["name"]: r for r in st.get("regions", []) or []}
        comps = [c for c in (st.get("electrical") or {}).get("components", []) or []
                 if c.get("priority") is not None]
        comps.sort(key=lambda c: c["priority"])
        for c in comps:
            at = c.get("at") or {}
            reg = regions.get(c.get("region"), {})
            ref = c.get("reference")
            d_ref, d_amb = num(c.get("rise_over_reference_k")), num(c.get("rise_over_ambient_k"))
            bits = []
            if d_ref is not None:
                bits.append(f"{d_ref:.1f} K over {ref}")
            if d_amb is not None:
                bits.append(f"{d_amb:.1f} K over ambient air ({num(c.get('ambient_c')) or 0:g} °C)")
            scaled = num(c.get("rise_over_ambient_at_rated_load_k"))
            if scaled is not None:
                bits.append(f"{scaled:.1f} K over ambient scaled to rated load")
            detail = "; ".join(bits)
            if c.get("action"):
                detail += ". " + c["action"] if detail else c["action"]
            items.append(dict(stack=name, kind="electrical", region=c.get("region"), frame=at.get("frame"),
                              row=at.get("row"), col=at.get("col"), peak_c=num(c.get("max_c")),
                              mean_c=num(reg.get("mean_c")), area_px=reg.get("pixels"),
                              delta_k=d_ref if d_ref is not None else d_amb,
                              reference=ref if d_ref is not None else "ambient air",
                              severity=c.get("severity"), priority=c.get("priority"), detail=detail))
        for r in st.get("regions", []) or []:
            fails = envelope_failures(r)
            if not fails:
                continue
            at = r.get("min_at") or {}
            bits = []
            f, fc = num(r.get("temperature_factor")), num(r.get("critical_temperature_factor"))
            if f is not None:
                bits.append(f"temperature factor {f:.2f}" + (f" (critical {fc:.2f})" if fc is not None else ""))
            rh = num(r.get("surface_relative_humidity_pct"))
            if rh is not None:
                bits.append(f"surface relative humidity {rh:.0f} %")
            tmin = num(r.get("minimum_surface_c"))
            if tmin is not None:
                bits.append(f"lowest surface temperature {tmin:.1f} °C (3x3 mean)")
            items.append(dict(stack=name, kind="envelope", region=r["name"], frame=at.get("frame"),
                              row=at.get("row"), col=at.get("col"),
                              peak_c=tmin if tmin is not None else num(r.get("min_c")),
                              mean_c=num(r.get("mean_c")), area_px=r.get("pixels"), delta_k=None,
                              reference=None, severity="; ".join(fails), priority=None,
                              detail="; ".join(bits)))
        for s in st.get("findings", []) or []:
            d = num(s.get("delta_k"))
            ref = s.get("reference")
            kind = s.get("kind", "hot")
            detail = ""
            if d is not None:
                detail = f"{abs(d):.1f} K {'above' if d >= 0 else 'below'} {ref or 'the reference'}"
            thr = num(s.get("threshold_c"))
            if thr is not None:
                detail += ("; " if detail else "") + f"threshold {thr:.2f} °C"
            items.append(dict(stack=name, kind=kind, region=None, frame=s.get("frame"), row=s.get("row"),
                              col=s.get("col"), peak_c=num(s.get("peak_c")), mean_c=num(s.get("mean_c")),
                              area_px=s.get("area_px"), delta_k=d, reference=ref, severity=None,
                              priority=None, detail=detail))
    for n, it in enumerate(items, 1):
        it["number"] = n
    return [{k: it.get(k) for k in FINDING_COLUMNS} for it in items]


def uncertainty_of(region, stat="mean_c"):
    """Expanded uncertainty U (k = 2) [K] of a region statistic, or None.

    ``expanded_uncertainty_k`` is a number (one U for every temperature of the region) or a
    mapping from statistic name (``mean_c``, ``min_c``, ...) to U."""
    u = region.get("expanded_uncertainty_k")
    if isinstance(u, dict):
        return num(u.get(stat))
    return num(u)


def _u_scalar(region):
    u = region.get("expanded_uncertainty_k")
    if isinstance(u, dict):
        vals = [v for v in (num(x) for x in u.values()) if v is not None]
        return max(vals) if vals else None
    return num(u)


def region_rows(report):
    """One dict per stack x region with the keys of ``REGION_COLUMNS``."""
    rows = []
    for st in done_stacks(report):
        comps = {c.get("region"): c for c in (st.get("electrical") or {}).get("components", []) or []}
        for r in st.get("regions", []) or []:
            mn, mx = r.get("min_at") or {}, r.get("max_at") or {}
            el = r.get("electrical") or comps.get(r["name"]) or {}
            rows.append({
                "stack": st["name"], "region": r["name"], "pixels": r.get("pixels"),
                "valid_values": r.get("valid_values"),
                **{k: num(r.get(k)) for k in ("min_c", "max_c", "mean_c", "std_c", "p05_c", "p95_c")},
                "min_frame": mn.get("frame"), "min_row": mn.get("row"), "min_col": mn.get("col"),
                "max_frame": mx.get("frame"), "max_row": mx.get("row"), "max_col": mx.get("col"),
                "minimum_surface_c": num(r.get("minimum_surface_c")),
                "temperature_factor": num(r.get("temperature_factor")),
                "critical_temperature_factor": num(r.get("critical_temperature_factor")),
                "surface_relative_humidity_pct": num(r.get("surface_relative_humidity_pct")),
                "mould_risk": r.get("mould_risk"), "condensation_risk": r.get("condensation_risk"),
                "expanded_uncertainty_k": _u_scalar(r),
                "electrical_severity": el.get("severity"), "electrical_priority": el.get("priority"),
                "rise_over_reference_k": num(el.get("rise_over_reference_k")),
                "rise_over_ambient_k": num(el.get("rise_over_ambient_k")),
                "rise_over_ambient_at_rated_load_k": num(el.get("rise_over_ambient_at_rated_load_k")),
            })
    return rows


def _cell(v):
    if v is None:
        return ""
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, float):
        if not math.isfinite(v):
            return ""
        t = f"{v:.4f}".rstrip("0").rstrip(".")
        return "0" if t == "-0" else t
    return str(v)


def to_csv(rows, columns):
    """CSV text (RFC 4180, header line first); None and NaN become empty cells, booleans
    true/false, floats at most 4 decimals."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\r\n")
    w.writerow(columns)
    for r in rows:
        w.writerow([_cell(r.get(c)) for c in columns])
    return buf.getvalue()


def regions_csv(report):
    from .heatflow import region_columns, region_values
    extra = region_columns(report)
    if not extra:
        return to_csv(region_rows(report), REGION_COLUMNS)
    # heat-flow stacks: U, loss and psi columns after the general ones
    rows = region_rows(report)
    by = {(s["name"], r["name"]): (s, r) for s in done_stacks(report) for r in s.get("regions", []) or []}
    for row in rows:
        row.update(region_values(*by[(row["stack"], row["region"])]))
    return to_csv(rows, REGION_COLUMNS + extra)


def findings_csv(findings):
    return to_csv(findings, FINDING_COLUMNS)
