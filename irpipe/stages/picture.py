"""Picture stage: keeps what the report needs to draw a stack without re-reading it: the
frame-averaged temperature image, the hottest-frame index, and the histogram of all
valid values (0.05 K bins)."""
from __future__ import annotations

import numpy as np

from . import Stage

HIST_LO_C, HIST_HI_C, HIST_STEP = -60.0, 650.0, 0.05


class PictureStage(Stage):
    name = "picture"

    def start(self, ctx):
        self.sum = np.zeros(ctx.shape[1:], np.float64)
        self.cnt = np.zeros(ctx.shape[1:], np.int32)
        self.nb = int(round((HIST_HI_C - HIST_LO_C) / HIST_STEP))
        self.hist = np.zeros(self.nb, np.int64)
        self.first = None

    def process(self, chunk, ctx):
        t = chunk.temperature_c
        ok = np.isfinite(t)
        self.sum += np.where(ok, t, 0.0).sum(0)
        self.cnt += ok.sum(0, dtype=np.int32)
        if self.first is None:
            self.first = t[0].copy()
        v = t[ok]
        b = np.clip(((v - HIST_LO_C) / HIST_STEP).astype(np.int64), 0, self.nb - 1)
        self.hist += np.bincount(b, minlength=self.nb)

    def finish(self, ctx):
        with np.errstate(invalid="ignore", divide="ignore"):
            mean = np.where(self.cnt > 0, self.sum / np.maximum(self.cnt, 1), np.nan).astype(np.float32)
        nz = np.flatnonzero(self.hist)
        ctx.shared["picture"] = {
            "mean_c": mean, "first_c": self.first,
            "hist_edges_c": (HIST_LO_C + HIST_STEP * np.arange(nz[0], nz[-1] + 2)) if nz.size else np.array([]),
            "hist_counts": self.hist[nz[0]:nz[-1] + 1] if nz.size else np.array([], np.int64),
        }
