"""Bad-pixel stage: replace flagged detector pixels from their valid neighbours, in the
raw data, before linearisation (so the pixel keeps its own emissivity and path)."""
from __future__ import annotations

from ..calibration import BadPixelFiller
from .base import Stage


class BadPixelStage(Stage):
    name = "bad_pixels"
    requires = ("chunk.raw", "ctx.bad_pixel_mask")

    @classmethod
    def applies(cls, ctx):
        return ctx.bad_pixel_mask is not None

    def start(self, ctx):
        self.filler = BadPixelFiller(ctx.bad_pixel_mask)
        ctx.report["bad_pixels_filled"] = self.filler.count

    def process(self, chunk, ctx):
        self.filler.fill(chunk.raw)
