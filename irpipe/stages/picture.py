"""Picture stage: keeps what the report needs to draw a stack without re-reading it: the
frame-averaged temperature image, the first frame, and the histogram of all valid values
of all frames (``irpipe.regions.picture_bins``).

With the radiometric stage's lookup plan every temperature is one entry of its table, so
the histogram is that stage's count of each (tally group, raw value) entry folded through
the table once at the end: the same bins as binning every pixel, at no per-pixel cost here.
Otherwise the valid values of each chunk are binned."""
from __future__ import annotations

import numpy as np

from ..regions import PICTURE_BINS, histogram_extent, picture_bins
from .base import Picture, Stage


class PictureStage(Stage):
    name = "picture"
    requires = ("chunk.temperature_c", "chunk.invalid_counts", "ctx.lookup_counts", "ctx.tables")
    provides = ("ctx.picture",)

    def start(self, ctx):
        self.sum = np.zeros(ctx.shape[1:], np.float64)
        self.cnt = np.zeros(ctx.shape[1:], np.int32)
        self.hist = np.zeros(PICTURE_BINS, np.int64)
        self.first = None

    def process(self, chunk, ctx):
        t = chunk.temperature_c
        if self.first is None:
            self.first = t[0].copy()
        by_table = ctx.lookup_counts is not None
        s = t.sum(0)                       # NaN wherever a frame of the chunk is invalid
        if chunk.invalid_total == 0 or np.isfinite(s).all():
            self.sum += s
            self.cnt += np.int32(t.shape[0])
            if not by_table:
                self.hist += np.bincount(picture_bins(t.reshape(-1)), minlength=PICTURE_BINS)
            return
        ok = np.isfinite(t)
        self.sum += np.where(ok, t, 0.0).sum(0)
        self.cnt += ok.sum(0, dtype=np.int32)
        if not by_table:
            self.hist += np.bincount(picture_bins(t[ok]), minlength=PICTURE_BINS)

    def finish(self, ctx):
        if ctx.lookup_counts is not None:
            counts, values = ctx.lookup_counts, ctx.tables.group_rows(ctx.tables.lut_c)
            use = (counts > 0) & np.isfinite(values)
            if use.any():
                self.hist += np.bincount(picture_bins(values[use]), weights=counts[use],
                                         minlength=PICTURE_BINS).round().astype(np.int64)
        with np.errstate(invalid="ignore", divide="ignore"):
            mean = np.where(self.cnt > 0, self.sum / np.maximum(self.cnt, 1), np.nan).astype(np.float32)
        edges, counts = histogram_extent(self.hist)
        ctx.picture = Picture(mean_c=mean, first_c=self.first, hist_edges_c=edges, hist_counts=counts)
