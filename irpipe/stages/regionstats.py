"""Region statistics stage: streaming min/max/mean/std/percentiles per region, over the
whole stack and per frame (``irpipe.regions.RegionAccumulator``). Percentiles come from
every frame at any stack length, within half a histogram bin of the exact value
(``irpipe.defaults.STATISTICS_BIN_K``)."""
from __future__ import annotations

from ..regions import RegionAccumulator
from .base import Stage


class RegionStatsStage(Stage):
    name = "region_stats"
    requires = ("chunk.temperature_c",)
    provides = ("report.regions",)

    def start(self, ctx):
        self.acc = [RegionAccumulator(n, m) for n, m in ctx.masks.items()]

    def process(self, chunk, ctx):
        for a in self.acc:
            a.update(chunk.temperature_c, chunk.first)

    def finish(self, ctx):
        regions = [a.result() for a in self.acc]
        # per-region figures of the uncertainty stage, which runs before this one
        for r in regions:
            r.update(ctx.region_uncertainty.get(r["name"], {}))
        ctx.report["regions"] = regions
