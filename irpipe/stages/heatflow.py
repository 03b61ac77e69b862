"""Heat-flow stage: in-situ U-value per pixel and per region by the ISO 9869-1 average
method, ISO 9869-1 acceptance criteria, thermal-bridge psi and annual transmission loss
(``irpipe.heatflow``), for stacks with ``heat_flow:``.

Frames stream past once; the corrected surface temperatures are spilled to a temporary
float32 file in the output folder (fixed memory), because a contact-sensor offset over the
whole window is known only after the last frame. ``finish`` then streams the spill once in
chunks: heat flux density per pixel and frame (written to ``<name>.heat_flux.tif``),
time-weighted per-pixel sums (``<name>.u_value.tif``) and per-region q(t) series.

Uncertainty: the systematic inputs (camera offset or contact sensor, emissivity, radiant
temperature, h_c, air sensors) are drawn once per Monte Carlo trial and shared by every
frame and pixel (JCGM 101:2008); the GUM law of propagation is computed beside it as a check.
"""
from __future__ import annotations

import json
import math
import os

import numpy as np

from .. import __version__
from .. import heatflow as hf
from ..constants import ZERO_CELSIUS as K0
from ..heatflow import ENERGY_CAUTION
from ..io import StackWriter, write_tiff_atomic
from ..uncertainty import sensitivity
from .base import Stage

U_WARN_RELATIVE = 0.30          # warn above 30 % relative expanded uncertainty
HC_RELATIVE_UNCERTAINTY = 0.30  # default u(h_c): inside h_c from natural-convection correlations
# spreads over roughly 1.5-4 W/(m2 K) for walls (from memory), so 30 % of h_c at k = 1
AIR_SENSOR_K = 0.29             # default: +-0.5 K logger tolerance as a rectangular distribution
CONTACT_SENSOR_K = 0.2          # default contact sensor standard uncertainty (common practice, no source)
ASSUMED_R_SE, ASSUMED_R_SI = 0.04, 0.13   # ISO 6946 (from memory), only for the element-temperature estimate
CUMULATIVE_POINTS = 240

INSIDE_METHOD = ("inside surface: q = h_c (theta_ai - theta_si) + eps_h sigma (T_r^4 - T_si^4); U = sum q dt / "
                 "sum (theta_ai - theta_ae) dt, normalised by the air-to-air difference (Tejedor et al. 2017; "
                 "ISO 9869-1 average method)")
OUTSIDE_METHOD = ("outside surface: q = h_c (theta_se - theta_ae) + eps_h sigma (T_se^4 - T_sky^4); U = sum q dt / "
                  "sum (theta_ai - theta_env,e) dt, normalised by the outdoor environmental temperature "
                  "(h_c, h_r weighted, ISO 9869-1); LESS RELIABLE than the inside method (wind, sky radiation, "
                  "night frames only)")


class HeatFlowStage(Stage):
    name = "heat_flow"
    requires = ("chunk.temperature_c", "chunk.reflected_temperature_k", "report.regions", "ctx.heat_flow_inputs",
                "ctx.emissivity_normal", "ctx.model")
    provides = ("ctx.u_value_map",)

    @classmethod
    def applies(cls, ctx):
        return "heat_flow" in ctx.stack and ctx.heat_flow_inputs is not None

    # -- setup -------------------------------------------------------------------------------
    def start(self, ctx):
        self.inp = ctx.heat_flow_inputs
        self.cfg = ctx.stack["heat_flow"]
        self.side = self.cfg["side"]
        f, m, n = ctx.shape
        self.shape = (f, m, n)
        self.eps_h, self.eps_h_desc, self.eps_h_ratio = self._hemispherical(ctx)
        self.h_c, self.h_c_desc = self._convective()
        self.tr_k = np.full(f, np.nan)            # radiant temperature per frame [K], filled below or per chunk
        self.tr_desc = self._radiant(ctx)
        self.ref = self.cfg.get("reference")
        self.ref_mean = np.full(f, np.nan)        # reference region mean per frame [C]
        self.img_mean = np.full(f, np.nan)
        self.ref_idx = np.flatnonzero(ctx.masks[self.ref]) if self.ref else None
        self.spill_path = ctx.out_dir / f".{ctx.name}.heat-flow-spill.part"
        ctx.out_dir.mkdir(parents=True, exist_ok=True)
        self.spill = np.memmap(self.spill_path, np.float32, "w+", shape=self.shape)

    def _hemispherical(self, ctx):
        shape = self.shape[1:]
        normal = (ctx.emissivity_normal or ctx.emissivity).as_array(shape).astype(np.float64)
        ratio = self.cfg["hemispherical_ratio"]
        spec = self.cfg.get("hemispherical_emissivity")
        if spec is None:
            return ratio * normal, f"normal emissivity x {ratio:g} (hemispherical/normal ratio)", ratio
        if not isinstance(spec, dict):
            return np.full(shape, float(spec)), f"{spec:g} (given)", None
        out = np.full(shape, float(spec["default"])) if "default" in spec else ratio * normal
        for name, v in spec.items():
            if name != "default":
                out[ctx.masks[name]] = v
        return out, "by region: " + ", ".join(f"{k} {v:g}" for k, v in spec.items()), None

    def _convective(self):
        f = self.shape[0]
        if "convective_coefficient_w_m2k" in self.cfg:
            v = self.cfg["convective_coefficient_w_m2k"]
            return np.full(f, v), f"{v:g} W/(m2 K) (given)"
        if self.side == "inside":
            d = self.cfg["heat_flow_direction"]
            v = hf.convective_coefficient_inside(d)
            return np.full(f, v), f"{v:g} W/(m2 K): ISO 6946 Annex C, heat flow {d} (from memory)"
        wind = self.inp.wind_m_s
        default = self.cfg.get("wind_speed_m_s", 4.0)
        if wind is not None:
            v = np.where(np.isfinite(wind), wind, default)
            return hf.convective_coefficient_outside(v), "4 + 4 v from the logged wind speed: ISO 6946 Annex C (from memory)"
        src = "heat_flow.wind_speed_m_s" if "wind_speed_m_s" in self.cfg else "ISO 6946 standard 4 m/s (assumed)"
        return (np.full(f, float(hf.convective_coefficient_outside(default))),
                f"4 + 4 v, v = {default:g} m/s ({src}): ISO 6946 Annex C (from memory)")

    def _radiant(self, ctx):
        inp = self.inp
        if inp.radiant_c is not None and np.isfinite(inp.radiant_c).any():
            v = np.where(np.isfinite(inp.radiant_c), inp.radiant_c, np.nanmean(inp.radiant_c))
            self.tr_k[:] = v + K0
            return f"air log column radiant_temperature_c ({inp.log_file})"
        if "radiant_temperature_c" in self.cfg:
            self.tr_k[:] = self.cfg["radiant_temperature_c"] + K0
            return f"{self.cfg['radiant_temperature_c']:g} C (heat_flow.radiant_temperature_c)"
        refl = ctx.reflected_temperature_k
        if refl is not None:
            self.tr_k[:] = refl
            return f"the stack's reflected temperature {refl - K0:g} C"
        return "the stack's reflected temperature per frame (reflector region)"

    # -- streaming -----------------------------------------------------------------------------
    def process(self, chunk, ctx):
        t = chunk.temperature_c
        a, b = chunk.first, chunk.first + chunk.n
        self.spill[a:b] = t
        refl = chunk.reflected_temperature_k
        if refl is not None and np.isnan(self.tr_k[a:b]).any():
            self.tr_k[a:b] = np.asarray(refl, float)
        flat = t.reshape(chunk.n, -1)
        with np.errstate(invalid="ignore"), _quiet():
            if self.ref_idx is not None:
                self.ref_mean[a:b] = np.nanmean(flat[:, self.ref_idx].astype(np.float64), axis=1)
            self.img_mean[a:b] = np.nanmean(flat.astype(np.float64), axis=1)

    def abort(self, ctx):
        self._drop_spill()
        for w in getattr(self, "_writers", []):
            w.abort()

    def _drop_spill(self):
        if getattr(self, "spill", None) is not None:
            del self.spill
            self.spill = None
        try:
            os.unlink(self.spill_path)
        except (OSError, AttributeError):
            pass

    # -- results ---------------------------------------------------------------------------------
    def finish(self, ctx):
        try:
            self._finish(ctx)
        finally:
            self._drop_spill()

    def _offset(self):
        """Camera offset correction [K] per frame from the contact sensor, or zeros."""
        f = self.shape[0]
        inp = self.inp
        w = inp.weights
        if inp.contact_c is not None and np.isfinite(inp.contact_c).any() and self.ref_idx is not None:
            d = inp.contact_c - self.ref_mean
            ok = np.isfinite(d) & (w > 0)
            mean = float(np.average(d[ok], weights=w[ok])) if ok.any() else 0.0
            return np.where(np.isfinite(d), d, mean), \
                f"contact sensor (air log column contact_surface_c) on '{self.ref}', mean {mean:+.2f} K"
        if "contact_surface_c" in self.cfg:
            ok = np.isfinite(self.ref_mean) & (w > 0)
            mean_ref = float(np.average(self.ref_mean[ok], weights=w[ok]))
            d = self.cfg["contact_surface_c"] - mean_ref
            return np.full(f, d), (f"contact reading {self.cfg['contact_surface_c']:g} C on '{self.ref}' vs its "
                                   f"infrared mean {mean_ref:.2f} C over the window: offset {d:+.2f} K")
        return np.zeros(f), None

    def _delta_t(self, offset):
        """Driving temperature difference per frame [K] (stack-wide)."""
        inp = self.inp
        if self.side == "inside":
            return inp.indoor_c - inp.outdoor_c
        ts = self.img_mean + offset + K0
        hr = hf.radiative_coefficient(float(np.nanmean(self.eps_h)), 0.5 * (ts + self.tr_k))
        env = hf.environmental_temperature(inp.outdoor_c + K0, self.tr_k, self.h_c, hr) - K0
        return inp.indoor_c - env

    def _finish(self, ctx):
        f, m, n = self.shape
        inp = self.inp
        if np.isnan(self.tr_k).any():
            self.tr_k = np.where(np.isfinite(self.tr_k), self.tr_k, np.nanmean(self.tr_k))
        offset, offset_desc = self._offset()
        dT = self._delta_t(offset)
        w = inp.weights
        regions = {name: np.flatnonzero(mk) for name, mk in ctx.masks.items()
                   if ctx.region_cfg[name].get("role", "surface") in ("surface", "reference")}
        series = {name: np.full((6, f), np.nan) for name in regions}   # q, m1..m4, valid fraction
        sum_q = np.zeros((m, n))
        sum_dt = np.zeros((m, n))
        sum_w = np.zeros((m, n))
        tai = inp.indoor_c + K0
        tae = inp.outdoor_c + K0
        eps_h = self.eps_h
        flux_name = f"{ctx.name}.heat_flux.tif"
        u_name = f"{ctx.name}.u_value.tif"
        meta = {"software": "irpipe", "version": __version__, "quantity": "surface heat flux density, positive "
                "from inside to outside", "units": "W m-2", "axes": "frame,row,col", "stack": ctx.name,
                "side": self.side, "method": INSIDE_METHOD if self.side == "inside" else OUTSIDE_METHOD}
        fw = StackWriter(ctx.out_dir / flux_name, self.shape, json.dumps(meta),
                         fsync=ctx.cfg.data["output"].get("fsync", False))
        self._writers = [fw]
        size = ctx.frame_chunk
        for a in range(0, f, size):
            b = min(f, a + size)
            t = np.asarray(self.spill[a:b], np.float64) + offset[a:b, None, None] + K0
            hc = self.h_c[a:b, None, None]
            tr = self.tr_k[a:b, None, None]
            if self.side == "inside":
                q = hf.heat_flux_inside(t, tai[a:b, None, None], tr, hc, eps_h)
            else:
                q = hf.heat_flux_outside(t, tae[a:b, None, None], tr, hc, eps_h)
            fw.write(q.astype(np.float32))
            ok = np.isfinite(q)
            wk = w[a:b, None, None] * ok
            sum_q += (np.where(ok, q, 0.0) * w[a:b, None, None]).sum(0)
            sum_dt += (wk * dT[a:b, None, None]).sum(0)
            sum_w += wk.sum(0)
            qf = q.reshape(b - a, -1)
            tf = t.reshape(b - a, -1)
            for name, idx in regions.items():
                qq = qf[:, idx]
                tt = tf[:, idx]
                good = np.isfinite(qq)
                cnt = good.sum(1)
                has = cnt > 0
                with np.errstate(invalid="ignore", divide="ignore"):
                    s = series[name]
                    s[0, a:b] = np.where(has, np.where(good, qq, 0).sum(1) / np.maximum(cnt, 1), np.nan)
                    for k in range(1, 5):
                        s[k, a:b] = np.where(has, np.where(good, tt ** k, 0).sum(1) / np.maximum(cnt, 1), np.nan)
                    s[5, a:b] = cnt / idx.size
        fw.commit()
        self._writers = []
        ctx.outputs["heat_flux"] = flux_name
        total_w = float(w.sum())
        with np.errstate(invalid="ignore", divide="ignore"):
            u_map = np.where((sum_w >= 0.5 * total_w) & (sum_dt != 0), sum_q / sum_dt, np.nan)
        umeta = {"software": "irpipe", "version": __version__, "quantity": "in-situ thermal transmittance (ISO "
                 "9869-1 average method per pixel)", "units": "W m-2 K-1", "axes": "row,col", "stack": ctx.name,
                 "side": self.side}
        write_tiff_atomic(ctx.out_dir / u_name, u_map.astype(np.float32), json.dumps(umeta))
        ctx.outputs["u_value"] = u_name
        self._report(ctx, u_map, series, dT, offset, offset_desc, regions)

    # -- per region and per stack ------------------------------------------------------------------
    def _uncertainty_inputs(self, ctx, offset_desc):
        sec = ctx.cfg.data.get("uncertainty") or {}
        u = {"radiant": float(self.cfg.get("radiant_temperature_uncertainty_k",
                                           sec.get("reflected_temperature_k", 0.0))),
             "indoor_air": float(sec.get("indoor_air_k", AIR_SENSOR_K)),
             "outdoor_air": float(sec.get("outdoor_air_k", AIR_SENSOR_K))}
        hc_mean = float(np.mean(self.h_c))
        u["h_c"] = float(sec.get("convective_coefficient_w_m2k", HC_RELATIVE_UNCERTAINTY * hc_mean))
        if offset_desc:
            u["surface"] = float(sec.get("contact_surface_k", CONTACT_SENSOR_K))
        else:
            u["surface_camera"] = float(sec.get("camera_k", 0.0))
        return u, sec

    def _sensitivities(self, ctx, t_k, eps_n, contact):
        """d theta_s / d eps [K], d theta_s / d T_r [K/K], d theta_s / d T_app [K/K] of the
        measurement equation at a region's mean (central differences of the exact inversion)."""
        if contact:
            return 0.0, 0.0, 0.0
        model = ctx.model
        ta = ctx.conditions["air_temperature_c"] + K0
        tr = float(np.nanmean(self.tr_k)) if self.side == "inside" else float(
            ctx.reflected_temperature_k or np.nanmean(self.tr_k))
        eps_n = min(max(eps_n, 0.02), 0.999)
        s = model.received_signal(t_k, eps_n, tr, ta)
        tapp = float(model.apparent_temperature(np.array([s]))[0])
        cam = ctx.camera

        def surface(eps=eps_n, refl=tr, apparent=None):    # the inversion with one input moved
            sig = s if apparent is None else float(cam.signal(apparent))
            return float(model.object_temperature(np.array([sig]), eps, refl, ta)[0])

        c = sensitivity(surface, {"eps": eps_n, "refl": tr, "apparent": tapp},
                        {"eps": 1e-3, "refl": 0.5, "apparent": 0.25})
        return c["eps"], c["refl"], c["apparent"]

    def _report(self, ctx, u_map, series, dT, offset, offset_desc, regions):
        inp = self.inp
        survey = ctx.cfg.data.get("survey", {})
        hdd = survey.get("heating_degree_days_kd")
        price, eff = survey.get("energy_price_per_kwh"), survey.get("heating_efficiency")
        w = inp.weights
        area_px = inp.side_rows_m * inp.side_cols_m
        cap = self.cfg.get("areal_heat_capacity_kj_m2k")
        cap = cap * 1e3 if cap is not None else None
        u_in, sec = self._uncertainty_inputs(ctx, offset_desc)
        eps_n_img = ctx.emissivity.as_array(self.shape[1:]).astype(np.float64)
        u_eps_img = (np.full(self.shape[1:], float(sec["emissivity"])) if "emissivity" in sec else
                     ctx.emissivity.uncertainty_array(self.shape[1:]))
        times_h = (inp.seconds - inp.seconds[0]) / 3600.0 if inp.seconds is not None else np.arange(self.shape[0])
        warnings = []
        per_region = {}
        mc_gum = {}
        for name, idx in regions.items():
            s = series[name]
            q = s[0]
            use = (w > 0) & np.isfinite(q)
            wr = np.where(use, w, 0.0)
            ww = wr[use]
            if not use.any():
                per_region[name] = {"u_value_w_m2k": None, "u_value_converged": False}
                continue
            u_val = hf.average_method(q[use], dT[use], ww)
            q_mean = float(np.average(q[use], weights=ww))
            if inp.has_log and inp.seconds is not None:
                elem = None
                if cap is not None:
                    if self.side == "inside":
                        elem = 0.5 * (s[1] + inp.outdoor_c + K0 + ASSUMED_R_SE * q)
                    else:
                        elem = 0.5 * (s[1] + inp.indoor_c + K0 - ASSUMED_R_SI * q)
                    elem = np.where(np.isfinite(elem), elem, 0.0)
                crit = hf.iso9869_criteria(inp.seconds, wr, np.where(use, q, 0.0), dT, cap, elem)
                for c in crit:
                    if c["name"] == "stored_heat" and c.get("stored_fraction") is not None:
                        c["detail"] += ("; element temperature: mean of the measured surface and the other surface "
                                        "estimated with R_s = 0.04 / 0.13 m2K/W (ISO 6946, from memory)")
                cum = hf.cumulative_u(np.where(use, q, 0.0), dT, wr)
            else:
                why = ("not evaluable: no air log, single-time (steady-state) estimate" if not inp.has_log
                       else "not evaluable: no frame times")
                crit = [{"name": k, "met": None, "detail": why} for k in
                        ("duration", "end_vs_24h_earlier", "first_vs_last_days", "stored_heat")]
                cum = hf.cumulative_u(np.where(use, q, 0.0), dT, wr)
            converged = all(c["met"] is True for c in crit)
            # uncertainty: systematic inputs shared by frames and pixels
            eps_n = float(np.mean(eps_n_img.flat[idx]))
            d_eps, d_tr, d_app = self._sensitivities(ctx, float(np.nanmean(s[1][use])), eps_n, bool(offset_desc))
            ser = {"w": ww, "t_ai": inp.indoor_c[use] + K0, "t_ae": inp.outdoor_c[use] + K0,
                   "t_r": self.tr_k[use], "h_c": self.h_c[use], "eps_h": float(np.mean(self.eps_h.flat[idx])),
                   "m1": s[1][use], "m2": s[2][use], "m3": s[3][use], "m4": s[4][use],
                   "d_eps": d_eps, "d_tr": d_tr}
            uu = dict(u_in)
            uu["emissivity"] = float(np.mean(u_eps_img.flat[idx]))
            if "surface_camera" in uu:
                uu["surface"] = abs(d_app) * uu.pop("surface_camera")
            eh_ratio = self.eps_h_ratio
            if eh_ratio is None:
                uu["eps_h"] = uu["emissivity"]
            mc = hf.u_value_uncertainty_mc(ser, uu, self.side, draws=20000, eps_h_ratio=eh_ratio)
            gum = hf.u_value_uncertainty_gum(ser, uu, self.side, eps_h_ratio=eh_ratio)
            u_exp = mc["expanded_uncertainty"]
            rel = u_exp / abs(u_val) if u_val else math.inf
            mc_gum[name] = {"mc_standard_w_m2k": round(mc["standard_uncertainty"], 5),
                            "gum_standard_w_m2k": round(gum["standard_uncertainty"], 5),
                            "ratio_mc_to_gum": round(mc["standard_uncertainty"] / gum["standard_uncertainty"], 3)
                            if gum["standard_uncertainty"] else None,
                            "mc_interval_95_w_m2k": [round(v, 5) for v in mc["interval"]],
                            "budget_w_m2k": {k: round(v, 5) for k, v in gum["budget"].items()}}
            area = idx.size * area_px
            loss = hf.annual_heat_loss_kwh(u_val, area, hdd) if hdd else None
            mean_surface_c = float(np.average(s[1][use], weights=ww)) - K0
            r = {"area_m2": _sig(area), "heat_flux_w_m2": _sig(q_mean),
                 "u_value_w_m2k": _sig(u_val),
                 "u_value_expanded_uncertainty_w_m2k": _sig(u_exp),
                 "u_value_relative_expanded_uncertainty_pct": round(100 * rel, 1),
                 "u_value_converged": converged,
                 "u_value_criteria": crit,
                 "annual_heat_loss_kwh": _sig(loss) if loss is not None else None,
                 "mean_surface_c": round(mean_surface_c, 3),
                 "mean_indoor_air_to_surface_k": round(float(np.average(inp.indoor_c[use], weights=ww))
                                                       - mean_surface_c, 3),
                 "u_value_cumulative": _decimate(times_h, cum, use)}
            if loss is not None and price is not None:
                r["annual_heat_cost"] = _sig(loss / eff * price)
            per_region[name] = r
            if rel > U_WARN_RELATIVE:
                diff = float(np.average(inp.indoor_c[use], weights=ww)) - mean_surface_c
                warnings.append(
                    f"region '{name}': U = {u_val:.3f} +- {u_exp:.3f} W/(m2 K) (k = 2), {100 * rel:.0f} % relative "
                    f"expanded uncertainty, above 30 %. The surface is only {diff:.2f} K below the "
                    f"{'indoor air' if self.side == 'inside' else 'reference'}: a few tenths of a kelvin of camera "
                    "or emissivity error change U by tens of per cent. "
                    + ("Log the contact sensor more closely, survey longer and colder, or treat the figure as an "
                       "order of magnitude only." if offset_desc else
                       "Use a contact sensor on the reference region (heat_flow.contact_surface_c) and a longer, "
                       "colder survey, or treat the figure as an order of magnitude only."))
        # thermal bridges
        bridges = []
        ref = self.ref
        u_ref = per_region.get(ref, {}).get("u_value_w_m2k") if ref else None
        for name, rc in ctx.region_cfg.items():
            tb = rc.get("thermal_bridge")
            if tb is None:
                continue
            mask = ctx.masks[name]
            rr, cc = np.nonzero(mask)
            if "length_m" in tb:
                length, lsrc = tb["length_m"], "given"
            else:
                lr = (rr.max() - rr.min() + 1) * inp.side_rows_m
                lc = (cc.max() - cc.min() + 1) * inp.side_cols_m
                length, lsrc = max(lr, lc), "longer bounding-box side on the wall"
            entry = {"region": name, "psi_w_mk": None, "length_m": _sig(length), "length_source": lsrc,
                     "kind": tb.get("kind", "flat"), "excess_annual_heat_loss_kwh": None,
                     "dimension_system": "internal (psi_i), bridge in a flat wall"}
            if u_ref is None:
                entry["note"] = f"no U for the reference region '{ref}'"
                bridges.append(entry)
                continue
            u_ref_exact = float(per_region[ref]["u_value_w_m2k"])
            if mask[ctx.masks[ref]].any():
                warnings.append(f"thermal bridge '{name}' overlaps the reference region '{ref}'; the reference must "
                                "be undisturbed wall outside the bridge")
            psi = hf.linear_thermal_transmittance(u_map, area_px, mask, u_ref_exact, length)
            entry["psi_w_mk"] = _sig(psi)
            if hdd:
                entry["excess_annual_heat_loss_kwh"] = _sig(hf.bridge_excess_loss_kwh(psi, length, hdd))
                if price is not None:
                    entry["excess_annual_heat_cost"] = _sig(hf.bridge_excess_loss_kwh(psi, length, hdd) / eff * price)
            invalid = int((mask & ~np.isfinite(u_map)).sum())
            if invalid:
                entry["invalid_pixels"] = invalid
            a, b = hf.bridge_border(mask)
            lim = per_region.get(name, {}).get("u_value_expanded_uncertainty_w_m2k")
            edges = [float(np.nanmean(u_map[e])) for e in (a, b) if np.isfinite(u_map[e]).any()]
            entry["border_u_w_m2k"] = [round(e, 4) for e in edges]
            if lim is not None and any(abs(e - u_ref_exact) > lim for e in edges):
                warnings.append(f"thermal bridge '{name}': U along its border ({', '.join(f'{e:.3f}' for e in edges)} "
                                f"W/(m2 K)) still differs from U_ref {u_ref_exact:.3f} by more than the region's "
                                f"uncertainty {lim:.3f}; widen the region until it reaches undisturbed wall, or psi "
                                "is underestimated")
            if entry["kind"] == "corner":
                warnings.append(f"thermal bridge '{name}' is a corner: psi from one flat image of a corner is not "
                                "the ISO 14683 value (internal vs external dimensions, foreshortened area); "
                                "use it only as an indication")
            contained = [o for o, om in ctx.masks.items() if o != name and o in per_region and o != ref
                         and np.all(om[mask])]
            entry["within_regions"] = contained
            if contained:
                entry["note"] = ("its excess loss is already inside the U and annual loss of " + ", ".join(contained)
                                 + "; do not add it again")
            bridges.append(entry)
        # merge into the region entries of report.json
        for r in ctx.report.get("regions", []):
            if r["name"] in per_region:
                r.update(per_region[r["name"]])
        # stack-level
        ref_name = ref if ref in per_region else next(iter(per_region), None)
        crit = per_region.get(ref_name, {}).get("u_value_criteria", [])
        checks = (hf.survey_condition_checks(inp.indoor_c, inp.outdoor_c, w) if inp.has_log else
                  [{"name": "survey_conditions", "met": None, "detail": "not evaluable without an air log"}])
        for c in checks:
            if c["met"] is False:
                warnings.append(f"survey condition not met: {c['detail']}")
        dur = float(w.sum()) / 3600.0 if inp.seconds is not None else None
        ctx.report["heat_flow"] = {
            "side": self.side,
            "method": INSIDE_METHOD if self.side == "inside" else OUTSIDE_METHOD,
            "normalisation": "air-to-air (indoor - outdoor air)" if self.side == "inside" else
                             "indoor air - outdoor environmental temperature",
            "estimate": "time series (ISO 9869-1 average method)" if inp.has_log else
                        "single-time steady-state estimate (no air log): NOT an ISO 9869-1 measurement",
            "duration_h": round(dur, 3) if dur is not None else None,
            "frames": int(self.shape[0]), "frames_used": int((w > 0).sum()), "window": inp.window,
            "criteria_region": ref_name, "criteria": crit, "survey_checks": checks,
            "convective_coefficient": self.h_c_desc,
            "hemispherical_emissivity": self.eps_h_desc,
            "radiant_temperature": self.tr_desc,
            "offset_correction": offset_desc or "none (camera's absolute error enters in full)",
            "air_temperatures": f"air log {inp.log_file}, linearly interpolated to the frame times" if inp.has_log
                                else "constant survey.indoor_air_c / outdoor_air_c",
            "pixel_footprint_m": [_sig(inp.side_rows_m), _sig(inp.side_cols_m)],
            "pixel_footprint": inp.footprint,
            "heating_degree_days_kd": hdd, "heating_degree_days_base_c": survey.get("heating_degree_days_base_c"),
            "annual_loss_note": "transmission heat loss Q = U A HDD 24/1000 (degree-day method), not delivered "
                                "energy" + ("; cost = Q / efficiency x price" if price is not None else ""),
            "uncertainty": {"method": "Monte Carlo (JCGM 101:2008), 20000 trials, systematic inputs fully "
                                      "correlated over frames and pixels; expanded uncertainty = half-width of the "
                                      "95 % probabilistically symmetric interval; GUM (k = 2) alongside as a check",
                            "standard_uncertainties": {k: round(v, 4) for k, v in u_in.items()},
                            "default_h_c_uncertainty": "30 % of h_c: inside convection at walls varies over "
                                                       "roughly 1.5-4 W/(m2 K) with air movement and heating "
                                                       "(from memory)",
                            "regions": mc_gum},
            "notes": list(inp.notes),
            "caution": ENERGY_CAUTION,
        }
        ctx.report["thermal_bridges"] = bridges
        ctx.report.setdefault("warnings", []).extend(warnings)
        ctx.u_value_map = u_map.astype(np.float32)


def _sig(x, digits=6):
    """``x`` to ``digits`` significant digits (report figures of any size keep their precision)."""
    x = float(x)
    if x == 0 or not math.isfinite(x):
        return x if math.isfinite(x) else None
    return round(x, digits - 1 - int(math.floor(math.log10(abs(x)))))


def _decimate(hours, cum, use):
    """The cumulative U at the used frames, at most CUMULATIVE_POINTS points."""
    k = np.flatnonzero(use)
    if k.size > CUMULATIVE_POINTS:
        k = k[np.unique(np.linspace(0, k.size - 1, CUMULATIVE_POINTS).round().astype(int))]
    return {"hours": [round(float(hours[i]), 3) for i in k],
            "u_w_m2k": [None if not np.isfinite(cum[i]) else round(float(cum[i]), 5) for i in k]}


class _quiet:
    def __enter__(self):
        import warnings
        self._w = warnings.catch_warnings()
        self._w.__enter__()
        warnings.simplefilter("ignore", RuntimeWarning)

    def __exit__(self, *a):
        self._w.__exit__(*a)
