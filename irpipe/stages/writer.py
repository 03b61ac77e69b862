"""Writer stage: stream the corrected temperature [C] to ``<name>.temperature.tif``
(float32, (frames, rows, cols), NaN where invalid), atomically on success."""
from __future__ import annotations

import json

from .. import __version__
from ..io import StackWriter
from .base import Stage


class TemperatureWriterStage(Stage):
    name = "write_temperature"
    requires = ("chunk.temperature_c",)

    def start(self, ctx):
        self.file = f"{ctx.name}.temperature.tif"
        meta = {"software": "irpipe", "version": __version__, "quantity": "surface temperature",
                "units": "degC", "axes": "frame,row,col", "stack": ctx.name,
                "source": str(ctx.stack["path"].name), "conditions": ctx.report.get("conditions", {})}
        self.writer = StackWriter(ctx.out_dir / self.file, ctx.shape, json.dumps(meta, default=str),
                                  fsync=ctx.cfg.data["output"].get("fsync", False))

    def process(self, chunk, ctx):
        self.writer.write(chunk.temperature_c)

    def finish(self, ctx):
        self.writer.commit()
        ctx.outputs["temperature"] = self.file

    def abort(self, ctx):
        if hasattr(self, "writer"):
            self.writer.abort()
