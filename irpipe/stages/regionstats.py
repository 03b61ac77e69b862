"""Region statistics stage: streaming min/max/mean/std/percentiles per region, over the
whole stack and per frame (``irpipe.regions.RegionAccumulator``).

With the radiometric stage's lookup plan every region is a union of tally groups
(``irpipe.kernel.tally_groups``), so the stage's (group, raw value) counts, folded through
the table, are the region's exact histogram: the standard deviation and the percentiles
come from them as numpy computes them on all values, and per chunk only the per-frame
minimum, maximum and mean are taken. Otherwise (per-pixel plan, cluster runs) the values
are binned as they stream, and the percentiles are within half a bin of the exact value
(``irpipe.defaults.STATISTICS_BIN_K``)."""
from __future__ import annotations

import numpy as np

from ..regions import RegionAccumulator
from .base import Stage, region_groups, tally_covers_regions


class RegionStatsStage(Stage):
    name = "region_stats"
    requires = ("chunk.temperature_c", "ctx.lookup_counts", "ctx.tables")
    provides = ("report.regions",)

    def start(self, ctx):
        self.acc = [RegionAccumulator(n, m) for n, m in ctx.masks.items()]

    def process(self, chunk, ctx):
        binned = not tally_covers_regions(ctx)
        for a in self.acc:
            a.update(chunk.temperature_c, chunk.first, binned=binned)

    def finish(self, ctx):
        if tally_covers_regions(ctx):
            t = ctx.tables
            values = t.group_rows(t.lut_c)                 # (groups, raw values) [C], NaN invalid
            regions = []
            in_region = region_groups(ctx)
            for a in self.acc:
                groups = in_region[a.name]
                counts = ctx.lookup_counts[groups]
                use = (counts > 0) & np.isfinite(values[groups])
                regions.append(a.result(counted=(values[groups][use], counts[use])))
        else:
            regions = [a.result() for a in self.acc]
        # per-region figures of the uncertainty stage, which runs before this one
        for r in regions:
            r.update(ctx.region_uncertainty.get(r["name"], {}))
        ctx.report["regions"] = regions
