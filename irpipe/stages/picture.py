"""Picture stage: keeps what the report needs to draw a stack without re-reading it: the
frame-averaged temperature image, the hottest-frame index, and the histogram of all
valid values (0.05 K bins).

With the radiometric stage's lookup plan every temperature is one entry of its table,
so the histogram is that stage's count of each (label, raw value) entry folded through
the table once at the end: the same bins as binning every pixel, at no per-pixel cost
here. Otherwise the valid values of each chunk are binned."""
from __future__ import annotations

import numpy as np

from . import Stage

HIST_LO_C, HIST_HI_C, HIST_STEP = -60.0, 650.0, 0.05


def _bins(v, nb):
    """0.05 K bin of float32 values ``v`` (the bins of every path)."""
    return np.clip(((v - HIST_LO_C) / HIST_STEP).astype(np.int64), 0, nb - 1)


class PictureStage(Stage):
    name = "picture"

    def start(self, ctx):
        self.sum = np.zeros(ctx.shape[1:], np.float64)
        self.cnt = np.zeros(ctx.shape[1:], np.int32)
        self.nb = int(round((HIST_HI_C - HIST_LO_C) / HIST_STEP))
        self.hist = np.zeros(self.nb, np.int64)
        self.first = None
        self.lookup = ctx.shared.get("lookup_histogram")

    def process(self, chunk, ctx):
        t = chunk.temperature_c
        if self.first is None:
            self.first = t[0].copy()
        s = t.sum(0)                       # NaN wherever a frame of the chunk is invalid
        if chunk.extras.get("invalid_count") == 0 or np.isfinite(s).all():
            self.sum += s
            self.cnt += np.int32(t.shape[0])
            if self.lookup is None:
                self.hist += np.bincount(_bins(t.reshape(-1), self.nb), minlength=self.nb)
            return
        ok = np.isfinite(t)
        self.sum += np.where(ok, t, 0.0).sum(0)
        self.cnt += ok.sum(0, dtype=np.int32)
        if self.lookup is None:
            self.hist += np.bincount(_bins(t[ok], self.nb), minlength=self.nb)

    def _fold_lookup(self):
        counts, values = self.lookup["counts"], self.lookup["values_c"]
        use = (counts > 0) & np.isfinite(values)
        if use.any():
            b = _bins(values[use], self.nb)
            self.hist += np.bincount(b, weights=counts[use], minlength=self.nb).round().astype(np.int64)

    def finish(self, ctx):
        if self.lookup is not None:
            self._fold_lookup()
        with np.errstate(invalid="ignore", divide="ignore"):
            mean = np.where(self.cnt > 0, self.sum / np.maximum(self.cnt, 1), np.nan).astype(np.float32)
        nz = np.flatnonzero(self.hist)
        ctx.shared["picture"] = {
            "mean_c": mean, "first_c": self.first,
            "hist_edges_c": (HIST_LO_C + HIST_STEP * np.arange(nz[0], nz[-1] + 2)) if nz.size else np.array([]),
            "hist_counts": self.hist[nz[0]:nz[-1] + 1] if nz.size else np.array([], np.int64),
            "hist_sampled_every_chunks": (self.lookup or {}).get("sampled_every_chunks", 1),
        }
