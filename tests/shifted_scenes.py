"""Scenes shifted by known sub-pixel amounts, for the alignment and comparison tests.

Independent of irpipe's alignment: each frame is made by evaluating a continuous scene on
a grid ``k`` times finer than the pixels, displaced by the known shift, converting each
fine sample to band radiance with the independent forward model (``forward_model.Camera``)
and averaging the radiance over each pixel (a detector integrates radiance, not
temperature). No interpolator is involved.
"""
from __future__ import annotations

import numpy as np

from forward_model import Camera

K0 = 273.15
GAIN, OFFSET = 250.0, 2000.0          # linear counts calibration of the test camera

#: facade of sharp-edged rectangles [row0, col0, row1, col1, temperature C] on a 5 C wall
FACADE = [(14.3, 12.6, 40.2, 38.1, -1.0),       # window pane (cold)
          (14.3, 66.4, 40.2, 92.7, -1.0),       # window pane
          (48.6, 20.2, 51.9, 100.5, 14.0),      # heating pipe behind a thin board (warm strip)
          (60.1, 44.5, 84.3, 70.8, 8.0)]        # door
WALL_C = 5.0


def facade_c(y, x, leak=None):
    """Temperature [C] of the facade at continuous (row, col) positions ``y``, ``x``.
    ``leak``: (row, col, depth_k, radius_px): a Gaussian cold plume added."""
    t = np.full(np.shape(y), WALL_C)
    for r0, c0, r1, c1, v in FACADE:
        t = np.where((y >= r0) & (y < r1) & (x >= c0) & (x < c1), v, t)
    if leak is not None:
        r, c, depth, rad = leak
        t = t - depth * np.exp(-((y - r) ** 2 + (x - c) ** 2) / (2 * rad ** 2))
    return t


class Radiance:
    """Band radiance of a blackbody [W m-2 sr-1] from the forward model, tabulated on
    0.002 K nodes (linear interpolation error below 1e-7 relative)."""

    def __init__(self, cam=None, lo_c=-30.0, hi_c=40.0):
        self.cam = cam or Camera(7.5, 14.0)
        self.t = np.arange(lo_c, hi_c, 0.002) + K0
        self.l = self.cam.band(self.t)

    def __call__(self, t_c):
        return np.interp(np.asarray(t_c) + K0, self.t, self.l)

    def apparent_c(self, radiance):
        return np.interp(radiance, self.l, self.t) - K0


def pixel_radiance(rad, shape, shift=(0.0, 0.0), k=32, leak=None, mapping=None, offset_k=0.0):
    """Pixel-averaged radiance of the facade whose content is displaced by ``shift``
    (rows, cols; positive down/right), or seen through ``mapping`` (a function from pixel
    coordinates of the frame to scene coordinates), each pixel the mean over k x k samples
    (an edge's position within a pixel is resolved to 1/k px)."""
    m, n = shape
    out = np.empty(shape)
    x = (np.arange(n * k) + 0.5) / k - 0.5
    for r0 in range(0, m, 8):
        r1 = min(m, r0 + 8)
        y = (np.arange(r0 * k, r1 * k) + 0.5) / k - 0.5
        yy, xx = np.meshgrid(y, x, indexing="ij")
        if mapping is not None:
            yy, xx = mapping(yy, xx)
        else:
            yy, xx = yy - shift[0], xx - shift[1]
        lvl = rad(facade_c(yy, xx, leak) + offset_k)
        out[r0:r1] = lvl.reshape(r1 - r0, k, n, k).mean((1, 3))
    return out


def counts(radiance, rng, noise_counts=1.0):
    """Linear camera counts (uint16) with white noise."""
    return np.rint(GAIN * radiance + OFFSET + rng.normal(0, noise_counts, radiance.shape)).astype(np.uint16)


CAMERA_YAML = ("camera:\n  spectral_band_um: [7.5, 14.0]\n  input: counts\n"
               f"  calibration: {{model: linear, gain: {GAIN}, offset_counts: {OFFSET}}}\n"
               "conditions:\n  emissivity: 1.0\n  reflected_temperature_c: 0.0\n  air_temperature_c: 5.0\n"
               "  distance_m: 0\n")
