"""Reusable array buffers for the chunks of one stack.

Each chunk of a long stack needs arrays of tens of MB (the raw frames as read, the
corrected temperatures). Allocated anew for every chunk, such an array is a fresh memory
map that the kernel zero-fills page by page when it is first written (measured on the
long-stack benchmark: about a tenth of the run's CPU time, in the kernel's page clearing).
A :class:`BufferPool` hands out the same buffers again instead.

A buffer is handed out again only when nothing but the pool refers to it (its reference
count is the pool's own), so a stage that keeps a chunk's array, or any view of it, keeps
that buffer out of the pool: reuse can never overwrite data that is still read.
"""
from __future__ import annotations

import sys

import numpy as np

_TUNED = []


def tune_allocator():
    """Settings of the C allocator (glibc ``mallopt``) for streaming large arrays; called
    once per process by the command line before a run, and by the run's own job
    processes (idempotent). Not by ``irpipe.pipeline.run`` itself: a caller's process
    keeps its own settings. Linux/glibc only; elsewhere nothing.

    * One malloc arena (``M_ARENA_MAX`` 1). glibc gives threads their own arenas, and the
      blocks freed in them were not handed back between the stacks of a survey: one
      process's resident size grew from 324 to 504 MB over 60 stacks of 4 frames, and
      stayed at 285-295 MB with one arena (measured on the survey benchmark's stacks). The
      large allocations here are few, so the arena's lock costs nothing measurable.
    * Large blocks from the heap instead of fresh memory maps, and no trimming of the heap
      top on every free (mmap and trim thresholds, top pad): freed chunk buffers are
      reused instead of being faulted and zero-filled again. ``malloc_trim`` after each
      stack of a survey gives the memory back (``irpipe.pipeline``)."""
    if _TUNED or not sys.platform.startswith("linux"):
        return
    _TUNED.append(True)
    try:
        import ctypes
        libc = ctypes.CDLL("libc.so.6")
        M_TRIM_THRESHOLD, M_TOP_PAD, M_MMAP_THRESHOLD, M_ARENA_MAX = -1, -2, -3, -8
        libc.mallopt(M_ARENA_MAX, 1)
        libc.mallopt(M_MMAP_THRESHOLD, 1 << 30)
        libc.mallopt(M_TRIM_THRESHOLD, (1 << 31) - 1)
        libc.mallopt(M_TOP_PAD, 256 << 20)
    except (OSError, AttributeError):
        pass


class BufferPool:
    """Buffers of given shapes and dtypes, reused once no one else holds them.

    Parameters
    ----------
    keep : int
        Buffers kept by the pool (beyond them, ``empty`` returns plain new arrays).
    """

    def __init__(self, keep=6):
        self._buffers: list = []
        self._keep = int(keep)
        # the reference count of a buffer held by the pool alone, measured through the
        # same method that tests the buffers (so it holds in any Python version)
        self._buffers.append(np.empty(0))
        self._idle = self._refs(0)
        self._buffers.pop()

    def _refs(self, k):
        return sys.getrefcount(self._buffers[k])

    def empty(self, shape, dtype):
        """An uninitialised C-contiguous array of ``shape`` and ``dtype`` (write every
        element before reading it)."""
        shape, dtype = tuple(int(s) for s in shape), np.dtype(dtype)
        for k in range(len(self._buffers)):
            if self._buffers[k].shape == shape and self._buffers[k].dtype == dtype and self._refs(k) <= self._idle:
                return self._buffers[k]
        buf = np.empty(shape, dtype)
        if len(self._buffers) < self._keep:
            self._buffers.append(buf)
        return buf

    def clear(self):
        """Drop every buffer (the arrays live on where they are still referred to)."""
        self._buffers.clear()
