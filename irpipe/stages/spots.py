"""Hot- and cold-spot search: running extremes over all frames, then 8-connected
components of the extreme images (``irpipe.findings``), so that one physical spot seen in
many frames is one finding, reported at the frame of its peak."""
from __future__ import annotations

import numpy as np

from .. import findings
from .base import Stage


class SpotStage(Stage):
    name = "spots"
    requires = ("chunk.temperature_c", "report.regions")

    @classmethod
    def applies(cls, ctx):
        return bool(ctx.stack.get("hotspots") or ctx.stack.get("coldspots"))

    def start(self, ctx):
        self.state = None
        # only the extremes a search needs: the maximum for hot spots, the minimum for cold
        self.kinds = tuple(k for k, key in (("max", "hotspots"), ("min", "coldspots")) if ctx.stack.get(key))

    def process(self, chunk, ctx):
        self.state = findings.update_extremes(self.state, chunk.temperature_c, chunk.first, self.kinds)

    def _reference(self, spec, ctx, image):
        ref = spec.get("reference")
        if ref is None:
            return None
        if ref == "median":
            v = image[np.isfinite(image)]
            return float(np.median(v)) if v.size else None
        for r in ctx.report.get("regions", []):
            if r["name"] == ref:
                return r["mean_c"]
        return None

    @staticmethod
    def _restrict(spec, ctx, img):
        if "within" not in spec and "exclude" not in spec:
            return img
        keep = np.zeros(img.shape, bool) if "within" in spec else np.ones(img.shape, bool)
        for name in spec.get("within", []):
            keep |= ctx.masks[name]
        for name in spec.get("exclude", []):
            keep &= ~ctx.masks[name]
        return np.where(keep, img, np.nan)

    def finish(self, ctx):
        out = []
        for kind, key, img, frm in (("hot", "hotspots", self.state.max_c, self.state.max_frame),
                                    ("cold", "coldspots", self.state.min_c, self.state.min_frame)):
            spec = ctx.stack.get(key)
            if not spec:
                continue
            img = self._restrict(spec, ctx, img)
            ref = self._reference(spec, ctx, img)
            sign = 1.0 if kind == "hot" else -1.0
            thresholds = []
            if f"{'above' if kind == 'hot' else 'below'}_c" in spec:
                thresholds.append(spec["above_c" if kind == "hot" else "below_c"])
            rel = spec.get("above_reference_k" if kind == "hot" else "below_reference_k")
            # the config check guarantees a threshold and, for a relative one, a reference;
            # a reference with no valid value (region never valid) leaves only the absolute one
            if rel is not None and ref is not None:
                thresholds.append(ref + sign * rel)
            if not thresholds:
                ctx.report.setdefault("warnings", []).append(
                    f"{key}: reference '{spec.get('reference')}' has no valid value; no {kind} spot search")
                continue
            # when both are given, a spot must pass both (the stricter one)
            thr = max(thresholds) if kind == "hot" else min(thresholds)
            spots = findings.find_spots(img, frm, thr, spec.get("min_area_px", 4), kind=kind, reference_c=ref)
            for s in spots:
                s["threshold_c"] = float(thr)
                s["reference"] = spec.get("reference")
            out += spots
        ctx.report.setdefault("findings", []).extend(out)
        ctx.report["never_valid_pixels"] = int((self.state.n_valid == 0).sum()) if self.state else 0
