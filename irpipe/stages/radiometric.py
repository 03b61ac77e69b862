"""Radiometric stage: raw values -> corrected surface temperature [C], per pixel.

Linearisation (calibration model or apparent-temperature export) and the measurement
equation (``irpipe.correction``) in one pass. Two execution plans give the same numbers:

* lookup plan: integer raw data of at most 16 bits, no per-pixel gain/offset maps, an
  emissivity that takes a few distinct values (a number or a label image) and constant
  reflected temperature: every possible raw value is corrected once per distinct
  emissivity (at most 65536 x labels evaluations, in float64), and each pixel is one
  table gather. This is what keeps the per-frame cost near the cost of reading the stack.
* per-pixel plan: anything else (float maps, NUC maps, per-frame reflected temperature),
  vectorised float32 arithmetic and a no-search inverse table.

Invalid pixels become NaN and are counted by reason (``irpipe.correction.REASONS``).
"""
from __future__ import annotations

import numpy as np

from ..constants import ZERO_CELSIUS
from ..correction import INVALID_INPUT, NON_PHYSICAL, OUT_OF_RANGE, REASONS, SATURATED, VALID
from . import Stage


class RadiometricStage(Stage):
    name = "radiometric"

    def start(self, ctx):
        cam = ctx.shared["camera_cfg"]
        self.input = cam["input"]
        cal = ctx.shared["calibration"]
        self.cal = cal
        self.model = ctx.model
        self.nuc = ctx.shared.get("nuc")          # (gain, offset) maps or None
        self.saturation = cam.get("saturation")
        if self.saturation is None and np.issubdtype(ctx.dtype, np.integer):
            self.saturation = np.iinfo(ctx.dtype).max
        self.refl_k = ctx.shared["reflected_temperature_k"]     # float, or None for reflector
        self.air_k = ctx.conditions["air_temperature_c"] + ZERO_CELSIUS
        self.reflector = ctx.shared.get("reflector_mask")
        self.hist = None
        eps = ctx.emissivity
        small_int = np.issubdtype(ctx.dtype, np.integer) and ctx.dtype.itemsize <= 2
        self.lookup = (small_int and self.nuc is None and eps.distinct() is not None
                       and self.refl_k is not None)
        if ctx.shared.get("aligned_signal"):   # issue 12: the align stage hands over resampled signal
            self.lookup = False
        ctx.invalid = {v: 0 for v in REASONS.values()}
        # whether a later stage reads the per-pixel inputs (chunk.extras "lookup_index" or
        # "signal": the uncertainty stage)
        from . import registry
        self.export_index = any(getattr(c, "name", "") == "uncertainty" and c.applies(ctx) for c in registry())
        if self.lookup:
            self._build_tables(ctx)
        else:
            self.eps = eps.as_array(ctx.shape[1:])
        ctx.report["plan"] = "lookup" if self.lookup else "per-pixel"
        # read-only accessors for later stages (uncertainty): how raw values became signal
        # and temperature; the chunks carry chunk.extras["lookup_index"] or ["signal"]
        ctx.shared["radiometric"] = {
            "plan": ctx.report["plan"], "signal": self.signal, "model": self.model,
            "air_temperature_k": self.air_k, "reflected_temperature_k": self.refl_k,
            "lut_c": self.lut if self.lookup else None, "base": self.base if self.lookup else None,
            "emissivity_values": self.eps_values if self.lookup else None,
            "emissivity": None if self.lookup else self.eps}

    # -- linearisation ---------------------------------------------------------------
    def signal(self, raw):
        """Offset-free signal (camera units) and reason codes for raw values ``raw``."""
        reason = np.zeros(raw.shape, np.uint8)
        if self.saturation is not None:
            reason[raw >= self.saturation] = SATURATED
        if self.input == "apparent_temperature":
            with np.errstate(invalid="ignore"):
                t_app = raw.astype(np.float64) * self.cal["raw_scale"] + self.cal["raw_offset"]
            bad_in = ~np.isfinite(t_app)
            t_min, t_max = self.model.t_range
            oor = ~bad_in & ((t_app < t_min) | (t_app > t_max))
            s = self.model.signal_table.forward_fast(np.where(oor | bad_in, 300.0, t_app))
        else:
            x = raw.astype(np.float64)
            if self.nuc is not None:
                x = x * self.nuc[0] + self.nuc[1]
            bad_in = ~np.isfinite(x)
            s = (x - self.cal["offset_counts"]) / self.cal.get("gain", 1.0)
            with np.errstate(invalid="ignore"):
                oor = ~bad_in & ((s < self.model.signal_table.s_min) | (s > self.model.signal_table.s_max))
        reason[(reason == VALID) & bad_in] = INVALID_INPUT
        reason[(reason == VALID) & oor] = OUT_OF_RANGE
        return s, reason

    # -- lookup plan -----------------------------------------------------------------
    def _build_tables(self, ctx):
        info = np.iinfo(ctx.dtype)
        values = np.arange(info.min, info.max + 1, dtype=np.int64)
        self.base = int(info.min)
        s, reason = self.signal(values)
        eps = ctx.emissivity
        eps_values = [eps.value] if eps.value is not None else list(eps.values)
        self.eps_values = eps_values
        nv = values.size
        self.lut = np.empty((len(eps_values), nv), np.float32)
        self.reason_lut = np.empty((len(eps_values), nv), np.uint8)
        for k, e in enumerate(eps_values):
            t = self.model.object_temperature(s, e, self.refl_k, self.air_k)
            r = reason.copy()
            r[(r == VALID) & ~np.isfinite(t)] = NON_PHYSICAL
            t = np.where(r == VALID, t - ZERO_CELSIUS, np.nan)
            self.lut[k] = t
            self.reason_lut[k] = r
        self.lut_flat = self.lut.ravel()
        self.nv = nv
        if eps.value is None:
            self.offsets = (eps.index.astype(np.int32) * np.int32(nv) - np.int32(self.base))
        else:
            self.offsets = None
        self.hist = np.zeros(self.lut.size, np.int64)
        # the full-range index (label * nv + raw - base) of every pixel is only made when a
        # later stage reads it (chunk.extras["lookup_index"], the uncertainty stage);
        # otherwise each chunk works in a window of raw values around its own range
        self.index = None if eps.value is not None else eps.index
        self.hist2d = self.hist.reshape(len(eps_values), nv)
        self.window = None
        # the (label, raw value) counts give the invalid pixels by reason, and the picture
        # stage folds them through the table into its histogram (the bins of binning
        # every pixel, without binning any)
        # Counting costs about as much as the gather. Chunks whose raw values can only give
        # valid pixels need no count for the invalid tally; the picture's histogram then
        # uses every 4th chunk of a long stack (> 128 frames; exact for shorter ones).
        self.sample_every = 4 if ctx.shape[0] > 128 else 1
        self.hist_pic = np.zeros_like(self.hist2d)
        self._chunk_no = 0
        ctx.shared["lookup_histogram"] = {"counts": self.hist_pic, "values_c": self.lut,
                                          "sampled_every_chunks": self.sample_every}

    def _set_window(self, lo, hi):
        """Tables restricted to raw values [w0, w1] around [lo, hi] (with a margin, so that
        the next chunks usually fit too)."""
        info_lo, info_hi = self.base, self.base + self.nv - 1
        w0, w1 = max(info_lo, lo - 1024), min(info_hi, hi + 1024)
        span = w1 - w0 + 1
        a, b = w0 - self.base, w1 - self.base + 1
        self.wlut = np.ascontiguousarray(self.lut[:, a:b]).ravel()
        self.wbad = self.reason_lut[:, a:b] != VALID
        self.wbad_any = bool(self.wbad.any())
        if self.index is None:
            self.woff = np.intp(-w0)
        else:
            self.woff = self.index.astype(np.intp) * np.intp(span) - np.intp(w0)
        self.window = (w0, w1, a, span)
        return self.window

    def _lookup(self, raw, chunk):
        """Temperature of each pixel by one gather per pixel from the windowed table
        (identical values to a gather from the full table), and the (label, raw value)
        counts by one bincount, a few frames per call."""
        lo, hi = int(raw.min()), int(raw.max())
        w = self.window
        if w is None or lo < w[0] or hi > w[1]:
            w = self._set_window(lo, hi)
        _, _, a, span = w
        nl = self.hist2d.shape[0]
        out = np.empty(raw.shape, np.float32)
        # a few frames per call: fewer calls (and GIL hand-overs when stages run in
        # threads) while the index block stays small
        step = max(1, min(raw.shape[0], (1 << 21) // max(1, raw[0].size)))
        idx = np.empty((step,) + raw.shape[1:], np.intp)
        sampled = self._chunk_no % self.sample_every == 0
        self._chunk_no += 1
        for k in range(0, raw.shape[0], step):
            m = min(step, raw.shape[0] - k)
            np.add(raw[k:k + m], self.woff, out=idx[:m])
            np.take(self.wlut, idx[:m], out=out[k:k + m], mode="clip")
        # every invalid table entry is NaN: a chunk without NaN has no invalid pixel and
        # needs no (label, raw) count, unless it is sampled for the picture's histogram
        if not sampled and not (self.wbad_any and np.isnan(out).any()):
            chunk.extras["invalid_count"] = 0
            return out
        hist = np.zeros(nl * span, np.int64)
        for k in range(0, raw.shape[0], step):
            m = min(step, raw.shape[0] - k)
            np.add(raw[k:k + m], self.woff, out=idx[:m])
            hist += np.bincount(idx[:m].reshape(-1), minlength=hist.size)
        h = hist.reshape(nl, span)
        self.hist2d[:, a:a + span] += h
        if sampled:
            self.hist_pic[:, a:a + span] += h
        chunk.extras["invalid_count"] = int(h[self.wbad].sum())
        return out

    def process(self, chunk, ctx):
        raw = chunk.raw
        if self.lookup and not self.export_index:
            chunk.temperature_c = self._lookup(raw, chunk)
            return
        if self.lookup:
            if self.offsets is None:
                idx = raw.astype(np.int32) - np.int32(self.base) if self.base else raw
            else:
                idx = np.add(raw, self.offsets, dtype=np.int32)
            chunk.temperature_c = self.lut_flat.take(idx)
            chunk.extras["lookup_index"] = idx
            counts = np.bincount(idx.ravel(), minlength=self.hist.size)
            self.hist += counts
            self.hist_pic += counts.reshape(self.hist_pic.shape)
            chunk.extras["invalid_count"] = int(counts[self.reason_lut.ravel() != VALID].sum())
            return
        if "aligned_signal" in chunk.extras:   # issue 12: linearised and resampled by stages/align.py
            s, reason = chunk.extras.pop("aligned_signal")
        else:
            s, reason = self.signal(raw)
        chunk.extras["signal"] = s
        if self.refl_k is None:
            refl = self._reflector_temperature(s, reason, ctx)
            chunk.extras["reflected_temperature_k"] = refl.reshape(-1)
        else:
            refl = self.refl_k
        with np.errstate(invalid="ignore", divide="ignore"):
            t = self.model.object_temperature(s.astype(np.float32), self.eps, refl, self.air_k, dtype=np.float32)
        reason[(reason == VALID) & ~np.isfinite(t)] = NON_PHYSICAL
        t -= np.float32(ZERO_CELSIUS)
        t[reason != VALID] = np.nan
        counts = np.bincount(reason.ravel(), minlength=len(REASONS) + 1)
        for code, label in REASONS.items():
            ctx.invalid[label] += int(counts[code])
        chunk.extras["invalid_count"] = int(counts[1:].sum())
        chunk.temperature_c = t

    def _reflector_temperature(self, s, reason, ctx):
        """Per-frame reflected temperature from a diffuse-reflector region (ASTM E1862).

        The reflector (emissivity ~0) returns the irradiance it receives: its signal,
        after removing the path emission, equals G(T_refl). Averaging is done in signal
        units, because reflected radiance, not temperature, is what adds up.

        With ``reflector_emissivity`` eps_r > 0 in the config, the reflector's own
        emission is removed: G(T_refl) = [S - path - eps_r G(T_r)] / (1 - eps_r), taking
        the reflector at the air temperature T_r = T_air (an assumption: a thin foil
        follows the air and its backing; an error of 5 K in T_r moves T_refl by about
        eps_r * 5 K).
        """
        m = self.reflector
        f = s.shape[0]
        vals = s.reshape(f, -1)[:, m.ravel()]
        ok = reason.reshape(f, -1)[:, m.ravel()] == VALID
        with np.errstate(invalid="ignore"):
            mean_s = np.where(ok, vals, 0).sum(1) / np.maximum(ok.sum(1), 1)
        _, path = self.model.background(1.0, 300.0, self.air_k)
        g = mean_s - path
        eps_r = (ctx.conditions.get("reflected_temperature_c") or {}).get("reflector_emissivity") or 0.0
        if eps_r >= 0.5:
            from ..pipeline import _cond_key
            ctx.cfg.fail(_cond_key(ctx.cfg, ctx.index, "reflected_temperature_c") + ["reflector_emissivity"],
                         f"a reflector of emissivity {eps_r:g} is not a reflector; the reflector method needs a "
                         "diffuse reflector of emissivity near 0 (crumpled-and-flattened aluminium foil, ~0.03)")
        if eps_r > 0:
            g = (g - eps_r * float(self.model.path_signal(self.air_k))) / (1.0 - eps_r)
        tr = self.model.path_table.inverse(g)
        tr = np.where(ok.sum(1) > 0, tr, np.nan)
        if np.any(~np.isfinite(tr)):
            bad = int(np.flatnonzero(~np.isfinite(tr))[0])
            from ..errors import InputDataError
            raise InputDataError(f"stack '{ctx.name}' frame {bad}: the reflector region has no valid "
                                 "pixels or a non-physical signal; check its position and the camera settings")
        ctx.shared.setdefault("reflected_series_k", []).extend(tr.tolist())
        return tr.reshape(f, 1, 1)

    def finish(self, ctx):
        if self.lookup:
            codes = self.reason_lut.ravel()
            for code, label in REASONS.items():
                ctx.invalid[label] = int(self.hist[codes == code].sum())
        ctx.report["invalid_pixels"] = dict(ctx.invalid)
        if "reflected_series_k" in ctx.shared:
            ser = np.asarray(ctx.shared["reflected_series_k"])
            ctx.report["reflected_temperature_series_c"] = (ser - ZERO_CELSIUS).round(4).tolist()
