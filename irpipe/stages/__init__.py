"""Stages of the per-stack chain.

Every stage has the same small interface and sees frames as they stream past:

* ``applies(ctx)`` (class method): whether the stage is wanted for this stack's config;
* ``start(ctx)``: once per stack, before the first chunk (build tables, masks);
* ``process(chunk, ctx)``: once per chunk of frames, in frame order; may set or read
  ``chunk.temperature_c`` and other chunk fields;
* ``finish(ctx)``: once per stack after the last chunk; puts its results in ``ctx.report``;
* ``abort(ctx)``: the stack failed; release and delete anything half-made.

A new stage is one new module in this package plus one entry in ``REGISTRY``; the order
of ``REGISTRY`` is the order of the chain.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np


@dataclass
class Chunk:
    """Frames [first, first + n) of one stack as they pass through the chain."""

    first: int
    raw: np.ndarray                      # (n, M, N) as read from the stack
    temperature_c: np.ndarray | None = None   # (n, M, N) float32 corrected temperature [C]
    extras: dict = field(default_factory=dict)

    @property
    def n(self):
        return self.raw.shape[0]


@dataclass
class StackContext:
    """What the stages of one stack share."""

    name: str
    index: int                 # position in config stacks (for error messages)
    cfg: Any                   # irpipe.config.Config
    stack: dict                # validated stack section
    conditions: dict           # merged conditions (config units)
    shape: tuple               # (F, M, N)
    dtype: np.dtype
    out_dir: Any
    camera: Any                # irpipe.correction.CameraModel
    materials: dict
    emissivity: Any = None     # irpipe.emissivity.EmissivityField
    masks: dict = field(default_factory=dict)     # region name -> (M, N) bool
    region_cfg: dict = field(default_factory=dict)  # region name -> its config
    model: Any = None          # irpipe.correction.MeasurementModel
    report: dict = field(default_factory=dict)
    invalid: dict = field(default_factory=dict)   # reason -> count
    outputs: dict = field(default_factory=dict)   # kind -> file name
    shared: dict = field(default_factory=dict)    # stage-to-stage values
    options: dict = field(default_factory=dict)   # run options (frame_chunk, workers, ...)


class Stage:
    """Base class; see the module docstring for the protocol."""

    name = "stage"

    @classmethod
    def applies(cls, ctx) -> bool:
        return True

    def start(self, ctx):
        pass

    def process(self, chunk, ctx):
        pass

    def finish(self, ctx):
        pass

    def abort(self, ctx):
        pass


def registry():
    """Stage classes in chain order (imported lazily so start-up stays fast)."""
    from .badpixels import BadPixelStage
    from .radiometric import RadiometricStage
    from .regionstats import RegionStatsStage
    from .spots import SpotStage
    from .uncertainty import UncertaintyStage
    from .writer import TemperatureWriterStage
    from .envelope import EnvelopeStage
    from .electrical import ElectricalStage
    from .picture import PictureStage
    from .dataset import DatasetWriterStage
    from .align import AlignStage            # issue 12
    from .temporal import TemporalStage      # issue 12
    from .compare import CompareStage        # issue 12

    return [BadPixelStage, AlignStage, RadiometricStage, UncertaintyStage, RegionStatsStage, SpotStage,
            PictureStage, TemporalStage, CompareStage, EnvelopeStage, ElectricalStage, DatasetWriterStage,
            TemperatureWriterStage]


def build_chain(ctx):
    return [cls() for cls in registry() if cls.applies(ctx)]
