"""Building-envelope assessment per region: temperature factor (ISO 13788 / ISO 10211),
mould risk (surface RH >= 80 %, ISO 13788) and condensation risk (surface at or below the
indoor dew point), from the survey's indoor and outdoor air.

The minimum surface temperature of a region is read robustly: the lowest value of the
frame-averaged image after a local linear (plane) fit over 5x5 valid pixels of the region
(``irpipe.regions.local_linear_smooth``), so detector noise (NETD) does not bias the factor
low, while the steep gradient into a cold corner is kept (a plain moving mean would read
the corner warm). Reading the minimum over a small area rather than a single pixel is
common practice (no source)."""
from __future__ import annotations

import numpy as np

from .. import findings
from ..defaults import BUILDING_USE, CRITICAL_TEMPERATURE_FACTORS
from ..regions import local_linear_smooth, mask_box
from .base import Stage



class EnvelopeStage(Stage):
    name = "envelope"
    requires = ("ctx.picture",)

    @classmethod
    def applies(cls, ctx):
        s = ctx.cfg.data.get("survey", {})
        air = ("indoor_air_c" in s and "outdoor_air_c" in s) or ctx.air_log_mean_c is not None
        return (air and ctx.masks
                and ctx.stack.get("assessment") != "electrical" and ctx.stack.get("view_from", "inside") == "inside")

    # The frame-averaged image comes from the picture stage, which runs before this one.

    def finish(self, ctx):
        s = ctx.cfg.data["survey"]
        log_mean = ctx.air_log_mean_c     # air log's mean over the frames (heat flow)
        ti, te = log_mean if log_mean else (s["indoor_air_c"], s["outdoor_air_c"])
        rh = s.get("indoor_relative_humidity_pct")
        crit_default = s.get("critical_temperature_factor")
        if crit_default is None:
            crit_default = CRITICAL_TEMPERATURE_FACTORS[s.get("building_use", BUILDING_USE)]
        mean = ctx.picture.mean_c
        finite = np.isfinite(mean)
        for r in ctx.report.get("regions", []):
            m = ctx.masks[r["name"]]
            cfg = ctx.region_cfg[r["name"]]
            if cfg.get("role", "surface") != "surface":
                continue
            ok = m & finite
            box = mask_box(ok, 2)           # the region's bounding box and the window's reach
            if box is None:
                continue
            smooth = local_linear_smooth(mean[box].astype(np.float64), ok[box], radius=2)
            tmin = float(np.nanmin(smooth))
            crit = cfg.get("critical_temperature_factor", crit_default)
            a = findings.envelope_assessment(tmin, ti, te, rh, critical_factor=crit)
            r["envelope"] = a
            for key in ("temperature_factor", "critical_temperature_factor", "mould_risk", "condensation_risk",
                        "surface_relative_humidity_pct"):
                r[key] = a.get(key)
            r["minimum_surface_c"] = tmin
        ctx.report["envelope_conditions"] = {"indoor_air_c": ti, "outdoor_air_c": te,
                                            "indoor_relative_humidity_pct": rh,
                                            "critical_temperature_factor": crit_default}
        if log_mean:
            ctx.report["envelope_conditions"]["air_temperatures"] = "air log, time-weighted mean over the frames"
