"""Field-method commands (``irpipe emissivity``, ``irpipe calibrate``): argument parsing
only; the methods live in ``irpipe.fieldmethods``."""
from __future__ import annotations


def register(sub, common):
    """Add the field-method subcommands to the CLI's subparsers."""


def dispatch(args):
    return 1
