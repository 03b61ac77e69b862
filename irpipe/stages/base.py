"""The stage protocol and the typed data that stages pass to each other.

Every stage has the same small interface and sees frames as they stream past:

* ``applies(ctx)`` (class method): whether the stage is wanted for this stack's config;
* ``start(ctx)``: once per stack, before the first chunk (build tables, masks);
* ``process(chunk, ctx)``: once per chunk of frames, in frame order;
* ``finish(ctx)``: once per stack after the last chunk; puts its results in ``ctx.report``;
* ``abort(ctx)``: the stack failed; release and delete anything half-made.

Data contract
-------------
Stages never talk through string keys. What one stage hands to a later one is a typed
field, either of the :class:`Chunk` (per chunk of frames) or of the :class:`StackContext`
(per stack). Each stage declares the fields it reads (``requires``) and the fields it
sets (``provides``), as ``"chunk.<field>"`` / ``"ctx.<field>"`` names;
:func:`check_order` (called by ``build_chain``) fails when a stage requires a field that
no earlier stage of the chain and not the preparation (``PREPARED``) provides.

Submodules of ``irpipe.stages`` import this module, never the package's ``__init__``.
"""
from __future__ import annotations

import numpy as np

from ..context import PREPARED, Chunk, Picture, StackContext

__all__ = ["Chunk", "Picture", "StackContext", "PREPARED", "Stage", "check_order", "processes_chunks",
           "tally_covers_regions", "region_groups"]


class Stage:
    """Base class; see the module docstring for the protocol and the data contract."""

    name = "stage"
    #: fields read, ``"chunk.x"`` / ``"ctx.x"`` (see the module docstring)
    requires: tuple = ()
    #: fields set
    provides: tuple = ()

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


def tally_covers_regions(ctx) -> bool:
    """Whether the stack's (tally group, raw value) counts give every region's values
    exactly: lookup plan, counts kept, and tally groups split by the regions
    (``irpipe.kernel.tally_groups``). Then a region's figures of any function of the
    (label, raw value) table are sums over the counts, with no per-pixel work."""
    t = ctx.tables
    return ctx.lookup_counts is not None and t is not None and t.lookup and t.groups_split_regions


def region_groups(ctx):
    """{region name: tally groups of the region's pixels} (with ``tally_covers_regions``)."""
    t = ctx.tables
    return {name: np.flatnonzero(np.bincount(t.group_index[mask], minlength=t.n_groups))
            for name, mask in ctx.masks.items()}


def processes_chunks(stage) -> bool:
    """Whether a stage does per-chunk work (the runner gives those a thread)."""
    return type(stage).process is not Stage.process


def check_order(stages):
    """Raise ``RuntimeError`` naming the stage and field when a stage requires a field
    that neither the preparation nor an earlier stage provides (a programming error in a
    chain, not a user error)."""
    have = set(PREPARED)
    for s in stages:
        missing = [f for f in s.requires if f not in have]
        if missing:
            raise RuntimeError(f"stage '{s.name}' requires {', '.join(missing)}, which no earlier stage provides; "
                               "move it after the stage that provides it in irpipe.stages.registry()")
        have.update(s.provides)
