"""A small PNG encoder for 8-bit indexed (palette) images: zlib and struct only, no
imaging library, a few milliseconds for a 640 x 512 picture.

File layout per the PNG specification (W3C Recommendation / ISO/IEC 15948:2004): the
8-byte signature, then chunks (length, type, data, CRC-32 of type and data): ``IHDR``
(width, height, bit depth 8, colour type 3 = indexed, compression 0, filter method 0,
interlace 0), ``PLTE`` (RGB triples, at most 256), ``IDAT`` (zlib stream of the filtered
scanlines), ``IEND``.

Every scanline uses filter type 1 (*Sub*: each byte minus the byte to its left, modulo
256), and the zlib stream uses run-length matching only (``Z_RLE``). The indices of a
colour-mapped thermogram vary smoothly along a row, so the differences are mostly 0 and
+-1; on 640 x 512 thermograms (smooth and noisy) this came within 10 % of the smallest
output of zlib levels 1-9 with filters 0-2 at a tenth of the time of level 6 (2-3 ms).
"""
from __future__ import annotations

import struct
import zlib

import numpy as np

SIGNATURE = b"\x89PNG\r\n\x1a\n"       # ISO/IEC 15948:2004, 5.2
FILTER_SUB = 1                          # ISO/IEC 15948:2004, 9.2, filter type 1


def _chunk(kind: bytes, data: bytes) -> bytes:
    return struct.pack(">I", len(data)) + kind + data + struct.pack(">I", zlib.crc32(kind + data) & 0xFFFFFFFF)


def encode_indexed(indices, palette) -> bytes:
    """PNG bytes of an indexed image.

    Parameters
    ----------
    indices : ndarray of uint8, shape (M, N)
        Palette index of each pixel (row 0 at the top).
    palette : array_like of uint8, shape (K, 3), K <= 256
        RGB of each index; only the entries up to the largest index used are written.

    Returns
    -------
    bytes
        A complete PNG file.
    """
    idx = np.ascontiguousarray(indices, np.uint8)
    if idx.ndim != 2 or 0 in idx.shape:
        raise ValueError(f"indices must be a non-empty 2-D array, got shape {idx.shape}")
    pal = np.asarray(palette, np.uint8).reshape(-1, 3)
    used = int(idx.max()) + 1
    if used > len(pal) or len(pal) > 256:
        raise ValueError(f"index {used - 1} is outside the palette of {len(pal)} entries (at most 256)")
    rows, cols = idx.shape
    raw = np.empty((rows, cols + 1), np.uint8)
    raw[:, 0] = FILTER_SUB
    raw[:, 1] = idx[:, 0]                        # the byte left of the first is taken as 0
    np.subtract(idx[:, 1:], idx[:, :-1], out=raw[:, 2:])   # uint8 arithmetic wraps modulo 256
    z = zlib.compressobj(6, zlib.DEFLATED, 15, 9, zlib.Z_RLE)
    data = z.compress(raw.tobytes()) + z.flush()
    ihdr = struct.pack(">IIBBBBB", cols, rows, 8, 3, 0, 0, 0)
    return (SIGNATURE + _chunk(b"IHDR", ihdr) + _chunk(b"PLTE", pal[:used].tobytes())
            + _chunk(b"IDAT", data) + _chunk(b"IEND", b""))
