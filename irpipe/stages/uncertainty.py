"""Per-pixel measurement uncertainty (GUM). Filled in by the uncertainty work; until the
config asks for it the stage is not in the chain."""
from __future__ import annotations

from . import Stage


class UncertaintyStage(Stage):
    name = "uncertainty"

    @classmethod
    def applies(cls, ctx):
        return False
