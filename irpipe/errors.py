"""Domain exceptions. Each message says what is wrong, where (file, YAML line, dotted key)
and how to fix it; the CLI prints it on one line and maps the class to an exit code."""
from __future__ import annotations


class IrpipeError(Exception):
    """Base class; ``exit_code`` is what the CLI returns."""

    exit_code = 1


class ConfigError(IrpipeError):
    """The survey config is malformed or out of range (exit code 2)."""

    exit_code = 2


class InputDataError(IrpipeError):
    """An input file (stack, map, response table) is missing, unreadable or inconsistent (exit code 3)."""

    exit_code = 3


class StackError(InputDataError):
    """A thermal stack cannot be read or has the wrong form."""


class OutputError(IrpipeError):
    """An output could not be written (disk full, permissions)."""

    exit_code = 1
