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
