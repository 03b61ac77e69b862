"""Electrical assessment: temperature rise of each component region over its similar
reference component and over ambient air, graded by the severity table in
``irpipe/data/electrical_severity.yaml`` (``irpipe.findings.grade_electrical``).

Rises use the region maximum, where a faulty connection shows first. A rise measured at
partial load is also given scaled to rated load by (I_rated / I_meas)^2 (common practice)."""
from __future__ import annotations

from functools import lru_cache

from .. import findings
from .base import Stage


@lru_cache(maxsize=1)
def severity_table():
    import yaml
    from importlib import resources

    text = resources.files("irpipe").joinpath("data/electrical_severity.yaml").read_text()
    return findings.load_severity_table(yaml.safe_load(text))


class ElectricalStage(Stage):
    name = "electrical"
    requires = ("report.regions",)

    @classmethod
    def applies(cls, ctx):
        return ctx.stack.get("assessment") == "electrical"

    def finish(self, ctx):
        table = severity_table()
        regions = {r["name"]: r for r in ctx.report.get("regions", [])}
        ambient = ctx.stack.get("ambient_c", ctx.conditions["air_temperature_c"])
        load = ctx.stack.get("load_pct")
        graded = []
        for name, r in regions.items():
            cfg = ctx.region_cfg[name]
            if cfg.get("role") != "component" or r["max_c"] is None:
                continue
            ref = cfg.get("reference")        # a region of this stack (config check)
            rise_ref = r["max_c"] - regions[ref]["max_c"] if ref and regions[ref]["max_c"] is not None else None
            rise_amb = r["max_c"] - ambient
            warn = []
            scaled = None
            if load is not None:
                scaled, warn = findings.load_scaled_rise(rise_amb, load / 100.0)
            g = findings.grade_electrical(rise_ref, rise_amb, table)
            item = {"region": name, "reference": ref, "max_c": r["max_c"], "ambient_c": ambient,
                    "rise_over_reference_k": rise_ref, "rise_over_ambient_k": rise_amb,
                    "rise_over_ambient_at_rated_load_k": scaled, "warnings": warn,
                    "priority": g["priority"] if g else None, "severity": g["label"] if g else "none",
                    "action": g["action"] if g else "No rise above the lowest band.",
                    "at": r["max_at"]}
            r["electrical"] = item
            graded.append(item)
        ctx.report["electrical"] = {"table_source": table.source, "components": graded, "load_pct": load}
