"""Temporal products stage: the per-pixel mean and standard deviation over the (aligned)
frames, ``<name>.mean.tif`` / ``<name>.std.tif`` (float32 (rows, cols) [C]), and the
stack's noise measured from its own frame differences in flat pixels
(``irpipe.compare.temporal_noise``), reported instead of a sqrt(N) assumption.

It runs when ``output.products`` is given, and for every stack that is compared or is the
baseline of a later stack (whose mean is then always written, so that ``--resume`` and
other surveys can read it back). Rejected (all-NaN) frames are left out."""
from __future__ import annotations

import json

import numpy as np

from .. import __version__
from ..compare import TemporalAccumulator, temporal_noise
from ..io import write_tiff_atomic
from .base import Stage


def is_baseline(ctx):
    """Whether a later stack of this config compares with this one."""
    for st in ctx.cfg.data["stacks"]:
        c = st.get("compare") or {}
        if c.get("baseline") == ctx.name:
            return True
    return False


def stack_time(stack):
    """When a stack was taken: its ``time``, else the first frame's of ``frame_times.start``."""
    t = stack.get("time") or (stack.get("frame_times") or {}).get("start")
    return None if t is None else str(t)


class TemporalStage(Stage):
    name = "temporal"
    requires = ("chunk.temperature_c",)
    provides = ("ctx.temporal",)

    @classmethod
    def applies(cls, ctx):
        return bool(ctx.cfg.data["output"].get("products")) or bool(ctx.stack.get("compare")) or is_baseline(ctx)

    def start(self, ctx):
        self.acc = TemporalAccumulator(ctx.shape[1:])
        self.products = list(ctx.cfg.data["output"].get("products") or [])
        if is_baseline(ctx) and "mean" not in self.products:
            self.products.append("mean")

    def process(self, chunk, ctx):
        self.acc.add(chunk.temperature_c, chunk.first)

    def finish(self, ctx):
        mean, std = self.acc.products()
        noise = temporal_noise(self.acc)
        files = {}
        meta = {"software": "irpipe", "version": __version__, "units": "degC", "axes": "row,col", "stack": ctx.name,
                "source": str(ctx.stack["path"].name), "frames_used": noise["frames"],
                "aligned": "alignment" in ctx.report, "mean_noise_k": noise["mean_noise_k"],
                "time": stack_time(ctx.stack)}
        for kind, img, q in (("mean", mean, "mean surface temperature over frames"),
                             ("std", std, "standard deviation of the surface temperature over frames")):
            if kind in self.products:
                f = f"{ctx.name}.{kind}.tif"
                write_tiff_atomic(ctx.out_dir / f, img, json.dumps({**meta, "quantity": q}))
                ctx.outputs[kind] = f
                files[kind] = f
        ctx.report["temporal"] = {
            "frames_used": noise["frames"],
            "frame_noise_k": _r(noise["frame_noise_k"]),
            "mean_noise_k": _r(noise["mean_noise_k"]),
            "white_noise_mean_k": _r(noise["white_noise_mean_k"]),
            "flat_pixels": noise["flat_pixels"],
            "noise_method": "frame_noise_k: RMS of successive-frame differences / sqrt(2); mean_noise_k: half the "
                            "RMS difference of the even- and odd-frame means; both in the flattest half of the "
                            "pixels. white_noise_mean_k = frame_noise_k / sqrt(N) is for comparison only.",
            "files": files}
        entry = {"mean_c": mean, "noise": noise, "time": stack_time(ctx.stack), "name": ctx.name,
                 "indoor_air_c": ctx.cfg.data.get("survey", {}).get("indoor_air_c"),
                 "outdoor_air_c": ctx.cfg.data.get("survey", {}).get("outdoor_air_c")}
        ctx.temporal = entry
        # later stacks of this run (serial: the pipeline runs a survey with comparisons
        # within it one stack after another) compare with it (irpipe.stages.compare)
        ctx.options.setdefault("stack_means", {})[ctx.name] = entry


def _r(x):
    return None if x is None else round(float(x), 5)
