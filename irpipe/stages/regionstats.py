"""Region statistics stage: streaming min/max/mean/std/percentiles per region, over the
whole stack and per frame (``irpipe.regions.RegionAccumulator``)."""
from __future__ import annotations

from ..regions import RegionAccumulator
from . import Stage


class RegionStatsStage(Stage):
    name = "region_stats"

    def start(self, ctx):
        # exact percentiles up to 128 frames; beyond, from every 4th chunk of frames
        self.hist_every = 4 if ctx.shape[0] > 128 else 1
        ctx.report["percentiles_from_every_nth_chunk"] = self.hist_every
        self.acc = [RegionAccumulator(n, m, self.hist_every) for n, m in ctx.masks.items()]

    def process(self, chunk, ctx):
        for a in self.acc:
            a.update(chunk.temperature_c, chunk.first)

    def finish(self, ctx):
        regions = [a.result() for a in self.acc]
        # per-region figures of stages that run before this one (uncertainty stage)
        extra = ctx.shared.get("region_uncertainty") or {}
        for r in regions:
            r.update(extra.get(r["name"], {}))
        ctx.report["regions"] = regions
