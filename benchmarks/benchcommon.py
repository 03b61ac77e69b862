"""What the benchmark scripts share: the start of every timed command.

Each timed command writes new files: its earlier outputs are deleted and it starts
``PAUSE_S`` seconds later. On a virtual machine whose guest hands freed pages back to the
host (free page reporting, after about 2 s), filling page-cache pages freed a moment ago
is about ten times faster than filling new ones (measured here: 0.19 s against 2.3 s for
800 MB). Without this, a floor that overwrites its file in place always refilled
just-freed pages, while ``irpipe run``, which writes a temporary file and renames it over
its earlier output only when it succeeds, never did. Dirty pages of earlier runs are
written out first (``os.sync``), so that no run pays for another one's write-back.
"""
from __future__ import annotations

import os
import platform
import shutil
import time
from pathlib import Path

import numpy as np

#: pause between deleting a command's earlier outputs and timing it [s]
PAUSE_S = 3.0


def before_timing(remove=()):
    """Delete ``remove`` (files or folders), write dirty pages out, and pause when
    something was deleted (see the module docstring)."""
    for p in map(Path, remove):
        if p.is_dir():
            shutil.rmtree(p)
        elif p.exists():
            p.unlink()
    if hasattr(os, "sync"):
        os.sync()
    if remove:
        time.sleep(PAUSE_S)


def machine_info():
    """The machine and versions stored with every set of figures."""
    return {"cpus": os.cpu_count(), "python": platform.python_version(),
            "numpy": np.__version__, "platform": platform.platform(terse=True)}
