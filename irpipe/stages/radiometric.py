"""Radiometric stage: raw values -> corrected surface temperature [C], per pixel.

Linearisation (calibration model or apparent-temperature export) and the measurement
equation in one pass, by the pure kernel ``irpipe.kernel`` (its module docstring explains
the lookup and per-pixel plans). This stage builds the stack's frozen tables once, calls
the kernel per chunk and keeps the per-stack tallies: invalid pixels by reason, the
(tally group, raw value) counts of the lookup plan and the reflector method's per-frame series.
"""
from __future__ import annotations

import numpy as np

from ..constants import ZERO_CELSIUS
from ..correction import REASONS
from ..kernel import Window, build_tables, correct, correct_signal
from .base import Stage


def stack_tables(ctx, regions=()):
    """The kernel's tables for a prepared stack context (``regions``: masks that split the
    lookup plan's tally groups, see ``irpipe.kernel.tally_groups``)."""
    return build_tables(input=ctx.camera_cfg["input"], calibration=ctx.calibration, model=ctx.model,
                        air_temperature_k=ctx.conditions["air_temperature_c"] + ZERO_CELSIUS,
                        reflected_temperature_k=ctx.reflected_temperature_k, dtype=ctx.dtype,
                        emissivity_field=ctx.emissivity, shape=ctx.shape[1:],
                        saturation=ctx.camera_cfg.get("saturation"), nuc=ctx.nuc,
                        reflector_mask=ctx.reflector_mask, reflector_emissivity=ctx.reflector_emissivity,
                        per_pixel=ctx.alignment is not None,     # aligned stacks
                        regions=regions)


class RadiometricStage(Stage):
    name = "radiometric"
    requires = ("chunk.raw", "ctx.model", "ctx.emissivity")
    provides = ("chunk.temperature_c", "chunk.invalid_counts", "chunk.signal", "chunk.lookup_index",
                "chunk.reflected_temperature_k", "ctx.tables", "ctx.lookup_counts", "ctx.reflected_series_k")

    def start(self, ctx):
        # which per-pixel inputs later stages read (set by build_chain from their `requires`)
        wanted = getattr(self, "consumers", frozenset())
        # the (tally group, raw) counts of every chunk give the picture's histogram and
        # every region's histogram exactly (groups split by the regions)
        self.count = "ctx.lookup_counts" in wanted
        regions = list(ctx.masks.values()) if self.count else ()
        self.tables = ctx.tables = stack_tables(ctx, regions)
        self.want_signal = "chunk.signal" in wanted
        self.want_index = "chunk.lookup_index" in wanted
        self.window = Window()
        ctx.invalid = {v: 0 for v in REASONS.values()}
        ctx.report["plan"] = self.tables.plan
        if self.tables.lookup:
            ctx.lookup_counts = np.zeros((self.tables.n_groups, self.tables.n_values), np.int64)

    def process(self, chunk, ctx):
        if chunk.aligned_signal is not None:     # linearised and resampled by the align stage
            res = correct_signal(chunk.aligned_signal, chunk.aligned_reason, self.tables,
                                 want_signal=self.want_signal, where=ctx.name)
            self.add_result(chunk, res, ctx)
            # the alignment's own reason codes (counted by the align stage) in the chunk's tally
            from ..alignment import ALIGN_REASONS
            chunk.invalid_counts = {**res.invalid_counts, **{c: int(np.count_nonzero(chunk.aligned_reason == c))
                                                             for c in ALIGN_REASONS}}
            return
        # no per-pixel table index here: the chunk keeps its raw values, from which a later
        # stage gathers its own tables (the index is shipped only by cluster workers)
        res = correct(chunk.raw, self.tables, want_signal=self.want_signal, want_index=False,
                      count=self.count, window=self.window, where=ctx.name)
        self.add_result(chunk, res, ctx)

    @staticmethod
    def add_result(chunk, res, ctx):
        """Put a kernel result on the chunk and into the stack's tallies (also used by the
        cluster runner, where the kernel ran on a worker)."""
        chunk.temperature_c = res.temperature_c
        chunk.signal = res.signal
        chunk.lookup_index = res.lookup_index
        chunk.invalid_counts = res.invalid_counts
        chunk.reflected_temperature_k = res.reflected_temperature_k
        for code, n in res.invalid_counts.items():
            ctx.invalid[REASONS[code]] += n
        if res.value_counts is not None and ctx.lookup_counts is not None:
            a, h = res.value_counts
            ctx.lookup_counts[:, a:a + h.shape[1]] += h
        if res.reflected_temperature_k is not None:
            ctx.reflected_series_k.extend(res.reflected_temperature_k.tolist())

    def finish(self, ctx):
        ctx.report["invalid_pixels"] = dict(ctx.invalid)
        if ctx.reflected_series_k:
            ser = np.asarray(ctx.reflected_series_k)
            ctx.report["reflected_temperature_series_c"] = (ser - ZERO_CELSIUS).round(4).tolist()
