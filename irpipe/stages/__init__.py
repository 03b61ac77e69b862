"""Stages of the per-stack chain (protocol and data contract: ``irpipe.stages.base``).

A new stage is one new module in this package plus one entry in ``registry()``; the order
of ``registry()`` is the order of the chain, and ``build_chain`` checks it against what
each stage declares it requires and provides.
"""
from __future__ import annotations

from .base import PREPARED, Chunk, Picture, StackContext, Stage, check_order, processes_chunks

__all__ = ["Chunk", "Picture", "StackContext", "Stage", "PREPARED", "registry", "build_chain", "check_order",
           "processes_chunks"]


def registry():
    """Stage classes in chain order (imported lazily so start-up stays fast)."""
    from .badpixels import BadPixelStage
    from .dataset import DatasetWriterStage
    from .electrical import ElectricalStage
    from .envelope import EnvelopeStage
    from .heatflow import HeatFlowStage
    from .picture import PictureStage
    from .radiometric import RadiometricStage
    from .regionstats import RegionStatsStage
    from .spots import SpotStage
    from .uncertainty import UncertaintyStage
    from .writer import TemperatureWriterStage
    from .align import AlignStage
    from .compare import CompareStage
    from .temporal import TemporalStage
    return [BadPixelStage, AlignStage, RadiometricStage, UncertaintyStage, RegionStatsStage, HeatFlowStage,
            SpotStage, PictureStage, TemporalStage, CompareStage, EnvelopeStage, ElectricalStage,
            DatasetWriterStage, TemperatureWriterStage]


def build_chain(ctx, extra=()):
    """The stages that apply to a stack, in chain order, followed by ``extra`` stages
    (already made; e.g. a field command's collector). Checks the declared data contract
    and tells each stage which of its fields later stages read (``stage.consumers``)."""
    chain = [cls() for cls in registry() if cls.applies(ctx)] + list(extra)
    check_order(chain)
    later = set()
    for s in reversed(chain):
        s.consumers = frozenset(later)
        later.update(s.requires)
    return chain
