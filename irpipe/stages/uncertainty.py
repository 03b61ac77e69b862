"""Uncertainty stage: per-pixel expanded uncertainty (k = 2) of the corrected temperature,
by the GUM law of propagation (``irpipe.uncertainty.gum_uncertainty``), written to
``<name>.uncertainty.tif`` (float32 [K], same shape as the temperature, NaN where the
temperature is invalid), with per-region figures for the report.

It is in the chain when the config's ``uncertainty:`` section has a non-zero value. The
standard uncertainty of the emissivity is ``uncertainty.emissivity`` for every pixel when
given, otherwise each material's ``uncertainty`` from the material library (0 for
emissivities given as plain numbers).

Execution follows the radiometric stage's plan:

* lookup plan: U is a function of (raw value, emissivity label) only, so one table of U
  per label over every raw value is built at start and each pixel is a gather with the
  temperature's own index; when the stack's tally covers the regions
  (``stages.base.tally_covers_regions``), the region figures are sums of the tables over
  the (tally group, raw value) counts, with no per-pixel work;
* per-pixel plan: the propagation runs vectorised per frame, with the per-frame reflected
  temperature of the reflector method where there is one.

Per region the report gets ``expanded_uncertainty_k``: the **mean of the per-pixel U**
over the region's valid values. It is deliberately not the uncertainty of the region's
mean temperature computed as if pixels were independent: the dominant inputs
(emissivity, reflected temperature, path, camera calibration) are common to all pixels
of a region, fully correlated, so averaging pixels does not reduce them, and the mean of
the per-pixel U is the figure that can be defended (JCGM 100:2008 Sect. 5.2 on
correlated inputs). ``uncertainty_budget_k`` gives the RMS standard contribution
|c_i| u(x_i) of each input over the region.

References
----------
.. [1] JCGM 100:2008, "Evaluation of measurement data - Guide to the expression of
   uncertainty in measurement", BIPM (2008).
"""
from __future__ import annotations

import json

import numpy as np

from .. import __version__
from ..constants import ZERO_CELSIUS
from ..emissivity import METAL_EMISSIVITY
from ..io import StackWriter
from ..kernel import linearise
from ..uncertainty import COVERAGE_FACTOR, InputUncertainties, ModelCache, gum_uncertainty, path_variant
from .base import Stage, region_groups, tally_covers_regions

CONFIG_KEYS = {"emissivity": "emissivity", "reflected_temperature": "reflected_temperature_k",
               "air_temperature": "air_temperature_k", "relative_humidity": "relative_humidity_pct",
               "distance": "distance_m", "camera": "camera_k"}
METHOD = ("GUM law of propagation of uncertainty (JCGM 100:2008), uncorrelated inputs, sensitivity "
          "coefficients by central differences of the exact inversion; expanded uncertainty U = 2 u_c")


def model_factory(ctx):
    """A ``ModelCache`` of measurement models for perturbed path conditions of a stack,
    built by the stack's path-model factory (``ctx.path_model``, the same path as the
    stack's own model); the nominal conditions give the stack's own model."""
    return ModelCache(ctx.path_model, known={nominal_path(ctx): ctx.model})


def nominal_path(ctx):
    """(air temperature [K], relative humidity [fraction], distance [m]) of a stack."""
    c = ctx.conditions
    rh = c.get("relative_humidity_pct")
    return (c["air_temperature_c"] + ZERO_CELSIUS, 0.0 if rh is None else rh / 100.0, float(c.get("distance_m", 0.0)))


class UncertaintyStage(Stage):
    name = "uncertainty"
    requires = ("chunk.temperature_c", "chunk.signal", "chunk.lookup_index", "chunk.reflected_temperature_k",
                "ctx.tables", "ctx.path_model", "ctx.lookup_counts")
    provides = ("ctx.region_uncertainty",)

    @classmethod
    def applies(cls, ctx):
        sec = ctx.cfg.data.get("uncertainty") or {}
        own = set(CONFIG_KEYS.values()) | {"limit_k"}     # heat-flow inputs are used by the heat-flow stage
        return any(bool(v) for k, v in sec.items() if k in own)

    def start(self, ctx):
        self.sec = dict(ctx.cfg.data.get("uncertainty") or {})
        self.rad = ctx.tables
        self.shape2 = ctx.shape[1:]
        self.path = nominal_path(ctx)
        self.models = model_factory(ctx)
        eps_field = ctx.emissivity
        if "emissivity" in self.sec:
            self.u_eps_source = "uncertainty.emissivity (all pixels)"
            u_eps_map = np.full(self.shape2, float(self.sec["emissivity"]))
        else:
            self.u_eps_source = "material library (per material)"
            u_eps_map = eps_field.uncertainty_array(self.shape2)
        self.u_base = InputUncertainties.from_config(self.sec, emissivity=0.0)
        self.lookup = self.rad.lookup
        self.inputs = tuple(n for n in InputUncertainties.from_config(self.sec, emissivity=u_eps_map).active())
        if self.lookup:
            self._build_tables(ctx, eps_field, u_eps_map)
        else:
            self.eps = np.asarray(self.rad.emissivity, np.float64)
            self.u_eps = u_eps_map
        # per-region accumulators (flat pixel indices); none when the stack's tally gives
        # every region's (label, raw value) counts: the figures are then sums over the
        # counts of the tables (``_counted_regions``), with no per-pixel work
        self.counted = self.lookup and tally_covers_regions(ctx)
        self.regions = {} if self.counted else {n: np.flatnonzero(m) for n, m in ctx.masks.items()}
        self.acc = {n: {"sum": 0.0, "n": 0, "max": -np.inf, "sq": {k: 0.0 for k in self.inputs}}
                    for n in ctx.masks}
        eps_img = eps_field.as_array(self.shape2)
        self.region_eps = {n: float(eps_img[m].mean()) for n, m in ctx.masks.items()}
        self.file = f"{ctx.name}.uncertainty.tif"
        meta = {"software": "irpipe", "version": __version__,
                "quantity": "expanded uncertainty of the surface temperature", "units": "K",
                "coverage_factor": COVERAGE_FACTOR, "method": METHOD, "axes": "frame,row,col", "stack": ctx.name,
                "source": str(ctx.stack["path"].name), "standard_uncertainties": self.sec,
                "emissivity_uncertainty": self.u_eps_source}
        self.writer = StackWriter(ctx.out_dir / self.file, ctx.shape, json.dumps(meta, default=str),
                                  fsync=ctx.cfg.data["output"].get("fsync", False))

    # -- lookup plan: U(raw value, label) ------------------------------------------------
    def _build_tables(self, ctx, eps_field, u_eps_map):
        """Empty tables of U per (label, raw value); columns are filled for the raw values a
        chunk needs (with a margin), the first time they are needed (``_ensure``): a stack
        of a few frames touches a few thousand of the 65536 values. Each value's U is the
        same whichever values are computed with it (element-wise arithmetic)."""
        rad = self.rad
        n_lab, nv = rad.lut_c.shape
        self.s_all, _ = linearise(np.arange(rad.base, rad.base + nv, dtype=np.int64), rad)
        if eps_field.value is not None:
            self.u_lab = [float(u_eps_map.flat[0])]
        else:
            first = np.unique(eps_field.index.ravel(), return_index=True)
            self.u_lab = np.zeros(n_lab)
            self.u_lab[first[0]] = u_eps_map.ravel()[first[1]]
        self.table = np.full((n_lab, nv), np.nan, np.float32)
        self.contrib = {k: np.full((n_lab, nv), np.nan, np.float32) for k in self.inputs}
        self.done = np.zeros(nv, bool)
        self.table_flat = self.table.ravel()
        self.contrib_flat = {k: v.ravel() for k, v in self.contrib.items()}

    def _ensure(self, lo, hi, margin=1024):
        """Fill the table columns of raw values [lo - margin, hi + margin] not yet computed
        (the margin spares later chunks a fill of their own; the last chunk needs none)."""
        rad = self.rad
        nv = rad.lut_c.shape[1]
        a, b = max(int(lo) - rad.base - margin, 0), min(int(hi) - rad.base + margin + 1, nv)
        cols = a + np.flatnonzero(~self.done[a:b])
        if not cols.size:
            return
        refl = rad.reflected_temperature_k
        for k, e in enumerate(rad.emissivity_values):
            c = cols[np.isfinite(rad.lut_c[k, cols])]
            if not c.size:
                continue
            u = InputUncertainties(**{**self.u_base.__dict__, "emissivity": float(self.u_lab[k])})
            uc, parts = gum_uncertainty(self.s_all[c], float(e), refl, *self.path, u, self.models, budget=True)
            self.table[k, c] = COVERAGE_FACTOR * uc
            for name in self.inputs:
                self.contrib[name][k, c] = parts[name] if name in parts else 0.0
        self.done[cols] = True

    def _gather(self, raw, lo, hi):
        """U of every pixel from its raw value and label: the table's columns [lo, hi] as
        one small window, gathered a frame at a time with per-pixel row offsets (the
        radiometric kernel's way, ``irpipe.kernel._sweep``; the same values as indexing
        the whole table)."""
        rad = self.rad
        span = hi - lo + 1
        win = np.ascontiguousarray(self.table[:, lo - rad.base:hi - rad.base + 1]).ravel()
        if rad.label_index is None:
            offsets = np.intp(-lo)
        else:
            offsets = rad.label_index.astype(np.intp) * np.intp(span) - np.intp(lo)
        out = np.empty(raw.shape, np.float32)
        idx = np.empty(raw.shape[1:], np.intp)
        for k in range(raw.shape[0]):
            np.add(raw[k], offsets, out=idx)
            np.take(win, idx, out=out[k], mode="clip")
        return out

    def _table_index(self, raw, ii):
        """Flat table indices (label * n_values + raw - base) of the pixels ``ii`` (flat
        image indices) in every frame of ``raw``."""
        rad = self.rad
        cols = raw.reshape(raw.shape[0], -1)[:, ii].astype(np.intp) - rad.base
        if rad.label_index is not None:
            cols += rad.label_index.ravel()[ii].astype(np.intp) * rad.n_values
        return cols

    # -- streaming -----------------------------------------------------------------------
    def process(self, chunk, ctx):
        n = chunk.n
        valid = np.isfinite(chunk.temperature_c)
        if self.lookup:
            idx = chunk.lookup_index        # shipped by cluster workers; locally the raw values
            raw = chunk.raw if chunk.raw is not None else idx % self.rad.n_values + self.rad.base
            lo, hi = int(raw.min()), int(raw.max())
            last = chunk.first + n >= ctx.shape[0]
            self._ensure(lo, hi, 0 if last else 1024)
            big_u = self._gather(raw, lo, hi) if idx is None else self.table_flat.take(idx, mode="clip")
            big_u[~valid] = np.nan

            def parts(ii):          # the region's table indices, gathered once for all inputs
                rix = self._table_index(raw, ii) if idx is None else idx.reshape(n, -1)[:, ii]
                return {k: self.contrib_flat[k].take(rix) for k in self.inputs}
        else:
            s = chunk.signal
            refl = chunk.reflected_temperature_k
            big_u = np.empty(chunk.temperature_c.shape, np.float32)
            full = {k: np.empty((n,) + self.shape2, np.float32) for k in self.inputs}
            for f in range(n):
                tr = self.rad.reflected_temperature_k if refl is None else float(refl[f])
                u = InputUncertainties(**{**self.u_base.__dict__, "emissivity": self.u_eps})
                uc, contrib = gum_uncertainty(s[f], self.eps, tr, *self.path, u, self.models, budget=True)
                big_u[f] = COVERAGE_FACTOR * uc
                for k in self.inputs:
                    full[k][f] = contrib.get(k, 0.0)
            big_u[~valid] = np.nan
            def parts(ii):
                return {k: full[k].reshape(n, -1)[:, ii] for k in self.inputs}
        self.writer.write(big_u)
        flat_u = big_u.reshape(n, -1)
        for name, ii in self.regions.items():
            v = flat_u[:, ii].astype(np.float64)
            ok = np.isfinite(v)
            if not ok.any():
                continue
            a = self.acc[name]
            a["sum"] += float(v[ok].sum())
            a["n"] += int(ok.sum())
            a["max"] = max(a["max"], float(v[ok].max()))
            for k, c in parts(ii).items():
                c = c.astype(np.float64)
                a["sq"][k] += float((c[ok] ** 2).sum())

    def _counted_regions(self, ctx):
        """Each region's sum, count and maximum of U and sums of squared contributions from
        the stack's (tally group, raw value) counts: the same figures as accumulating the
        region's pixels (only the float64 summation order differs)."""
        t = ctx.tables
        cols = np.flatnonzero(ctx.lookup_counts.any(axis=0))
        if not cols.size:
            return
        a0, a1 = int(cols[0]), int(cols[-1]) + 1
        u_rows = t.group_rows(self.table[:, a0:a1])
        ok_rows = np.isfinite(u_rows) & np.isfinite(t.group_rows(t.lut_c[:, a0:a1]))
        c_rows = {k: t.group_rows(v[:, a0:a1]) for k, v in self.contrib.items()}
        for name, groups in region_groups(ctx).items():
            counts = ctx.lookup_counts[groups, a0:a1]
            use = ok_rows[groups] & (counts > 0)
            if not use.any():
                continue
            w = counts[use].astype(np.float64)
            u = u_rows[groups][use].astype(np.float64)
            a = self.acc[name]
            a["sum"] = float(w @ u)
            a["n"] = int(counts[use].sum())
            a["max"] = float(u.max())
            for k in self.inputs:
                c = c_rows[k][groups][use].astype(np.float64)
                a["sq"][k] = float(w @ (c * c))

    def finish(self, ctx):
        if self.counted:
            self._counted_regions(ctx)
        self.writer.commit()
        ctx.outputs["uncertainty"] = self.file
        limit = self.sec.get("limit_k")
        out = {}
        for name, a in self.acc.items():
            e = self.region_eps[name]
            if a["n"] == 0:
                out[name] = {"expanded_uncertainty_k": None, "expanded_uncertainty_max_k": None,
                             "coverage_factor": COVERAGE_FACTOR, "uncertainty_budget_k": {},
                             "emissivity_mean": round(e, 4), "uncertainty_flag": _flag(None, e, limit)}
                continue
            mean_u = a["sum"] / a["n"]
            out[name] = {
                "expanded_uncertainty_k": round(mean_u, 4),
                "expanded_uncertainty_max_k": round(a["max"], 4),
                "coverage_factor": COVERAGE_FACTOR,
                "uncertainty_budget_k": {CONFIG_KEYS[k]: round(float(np.sqrt(a["sq"][k] / a["n"])), 4)
                                         for k in self.inputs},
                "emissivity_mean": round(e, 4),
                "uncertainty_flag": _flag(mean_u, e, limit),
            }
        ctx.region_uncertainty = out
        ctx.report["uncertainty"] = {
            "method": METHOD, "coverage_factor": COVERAGE_FACTOR,
            "standard_uncertainties": self.sec, "emissivity_uncertainty": self.u_eps_source,
            "region_figure": "expanded_uncertainty_k is the mean of the per-pixel U over the region "
                             "(inputs are common to its pixels, so averaging pixels does not reduce it)",
            "limit_k": limit, "file": self.file}

    def abort(self, ctx):
        if hasattr(self, "writer"):
            self.writer.abort()


def _flag(mean_u, emissivity, limit):
    """Text explaining why a region's figure should not be relied on, or None."""
    why = []
    if limit is not None and mean_u is not None and mean_u > limit:
        why.append(f"expanded uncertainty {mean_u:.2f} K exceeds the limit {limit:g} K (uncertainty.limit_k)")
    if emissivity < METAL_EMISSIVITY:
        why.append(f"emissivity {emissivity:.2f} is below {METAL_EMISSIVITY:g}: the reading is dominated by "
                   "reflected radiation; measure the emissivity on site (ASTM E1933) or apply tape or paint "
                   "of known emissivity")
    return "; ".join(why) or None
