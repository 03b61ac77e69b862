"""Regions of interest as boolean masks, and streaming statistics over frame chunks.

Geometry is (row, col), as in scikit-image: ``rect`` is [row0, col0, row1, col1]
half-open like numpy slices; ``polygon`` vertices are [row, col]; ``ellipse`` has a centre
(row, col) and radii (rows, cols); ``mask`` is any non-zero image.
"""
from __future__ import annotations

import numpy as np

from .defaults import PICTURE_BIN_K, STATISTICS_BIN_K, TABLE_LIMITS_C

# histogram used for percentiles: fine bins over every temperature a table can give
_HIST_LO_C, _HIST_HI_C = TABLE_LIMITS_C
_HIST_STEP = STATISTICS_BIN_K


def rect_mask(shape, rect):
    r0, c0, r1, c1 = (int(v) for v in rect)
    m = np.zeros(shape, bool)
    m[max(r0, 0):max(r1, 0), max(c0, 0):max(c1, 0)] = True
    return m


def polygon_mask(shape, vertices):
    from skimage.draw import polygon2mask

    return polygon2mask(shape, np.asarray(vertices, float))


def ellipse_mask(shape, center, radii):
    from skimage.draw import ellipse

    m = np.zeros(shape, bool)
    rr, cc = ellipse(center[0], center[1], radii[0], radii[1], shape=shape)
    m[rr, cc] = True
    return m


def geometry_problem(shape, region):
    """Return a text describing why ``region`` does not fit an image of ``shape``, or None."""
    rows, cols = shape
    if "rect" in region:
        r0, c0, r1, c1 = region["rect"]
        if not (0 <= r0 < r1 <= rows and 0 <= c0 < c1 <= cols):
            return (f"rect {list(region['rect'])} must satisfy 0 <= row0 < row1 <= {rows} and "
                    f"0 <= col0 < col1 <= {cols} for this {rows}x{cols} stack")
    if "polygon" in region:
        v = np.asarray(region["polygon"], float)
        if v[:, 0].min() < 0 or v[:, 0].max() > rows - 1 or v[:, 1].min() < 0 or v[:, 1].max() > cols - 1:
            return f"polygon vertices must lie within rows 0..{rows - 1} and cols 0..{cols - 1}"
    if "ellipse" in region:
        (r, c), (a, b) = region["ellipse"]["center"], region["ellipse"]["radii"]
        if r - a < -0.5 or r + a > rows - 0.5 or c - b < -0.5 or c + b > cols - 0.5:
            return f"ellipse reaches outside the {rows}x{cols} image"
    return None


def region_mask(shape, region, mask_image=None):
    """Boolean (M, N) mask of one configured region."""
    if "rect" in region:
        return rect_mask(shape, region["rect"])
    if "polygon" in region:
        return polygon_mask(shape, region["polygon"])
    if "ellipse" in region:
        return ellipse_mask(shape, region["ellipse"]["center"], region["ellipse"]["radii"])
    if mask_image is not None:
        return np.asarray(mask_image) != 0
    raise ValueError(f"region {region.get('name')!r} has no geometry")


class RegionAccumulator:
    """Streaming statistics of one region over all frames of a stack.

    Holds O(frames) per-frame summaries and a fixed-size histogram, never the data.
    Percentiles come from the histogram of every value (bins of ``STATISTICS_BIN_K``), or,
    given the counted values of the stack (``result(counted=...)``, the lookup plan), exactly
    (``counted_statistics``). From the histogram they follow
    the rank rule of ``numpy.percentile``'s default (linear) method applied to the bin
    centres: each order statistic is replaced by the centre of its bin, so the result is
    within half a bin (0.005 K) of the exact percentile.

    A float chunk whose region values are all finite (the usual case) takes a fast path:
    a rectangle is read as a view, any other shape by one gather; per-frame min/max/sum
    are reductions in the chunk's own precision (sums accumulated in float64), the
    moments use a float32-representable shift, and the histogram bins are computed in
    float32. Chunks with invalid values take the general float64 path.
    """

    def __init__(self, name, mask):
        self.name = name
        self.mask = np.asarray(mask, bool)
        self.idx = np.flatnonzero(self.mask)
        self.pixels = int(self.idx.size)
        self.n = 0
        self.shift = None
        self.s1 = 0.0
        self.s2 = 0.0
        self.min = np.inf
        self.max = -np.inf
        self.min_at = None
        self.max_at = None
        self.frames = []
        self.binned = True          # histogram and sum of squares kept (see ``update``)
        self.nbins = int(round((_HIST_HI_C - _HIST_LO_C) / _HIST_STEP))
        self.hist = np.zeros(self.nbins, np.int64)
        self._box = None
        if self.pixels and self.mask.ndim == 2:
            rows = np.flatnonzero(self.mask.any(axis=1))
            cols = np.flatnonzero(self.mask.any(axis=0))
            r0, r1, c0, c1 = int(rows[0]), int(rows[-1]) + 1, int(cols[0]), int(cols[-1]) + 1
            if self.mask[r0:r1, c0:c1].all():
                self._box = (r0, r1, c0, c1)

    def update(self, chunk_c, first_frame, binned=True):
        """Add frames ``chunk_c`` (F, M, N) [C] starting at frame index ``first_frame``.

        ``binned=False``: keep only the per-frame figures, the minimum, the maximum and the
        sum; the spread and the percentiles then come from the stack's counted values
        (``result(counted=...)``), so the histogram and the sum of squares are skipped."""
        self.binned = self.binned and binned
        chunk = np.asarray(chunk_c)
        if self.pixels == 0 or chunk.ndim != 3 or chunk.dtype not in (np.float32, np.float64):
            return self._update_general(chunk, first_frame)
        f = chunk.shape[0]
        if self._box is not None:
            r0, r1, c0, c1 = self._box
            v = chunk[:, r0:r1, c0:c1]
            axes = (1, 2)
        else:
            v = np.take(chunk.reshape(f, -1), self.idx, axis=1)
            axes = 1
        fmin = v.min(axis=axes)
        fmax = v.max(axis=axes)
        if not (np.isfinite(fmin).all() and np.isfinite(fmax).all()):
            return self._update_general(chunk, first_frame)
        p = self.pixels
        typ = v.dtype.type
        if self.shift is None:
            self.shift = float(typ(v.sum(axis=axes, dtype=np.float64).sum() / (f * p)))
        sh = self.shift
        # d = v - shift (exact or nearly so: both in the chunk's precision and close)
        d = np.empty(v.shape, v.dtype)
        np.subtract(v, typ(sh), out=d)
        d2 = d.reshape(f, -1)
        dsum = d2.sum(axis=1, dtype=v.dtype).astype(np.float64)      # pairwise per frame
        self.s1 += float(dsum.sum())
        if self.binned:
            self.s2 += float(sum(np.vdot(d2[k], d2[k]) for k in range(f)))
        self.n += f * p
        fmean = dsum / p + sh
        for k in range(f):
            self.frames.append({"frame": first_frame + k, "valid_pixels": p,
                                "min_c": float(fmin[k]), "max_c": float(fmax[k]), "mean_c": float(fmean[k])})
        k = int(np.argmin(fmin))
        if fmin[k] < self.min:
            self.min = float(fmin[k])
            self.min_at = self._where_fast(first_frame + k, int(np.argmin(v[k])))
        k = int(np.argmax(fmax))
        if fmax[k] > self.max:
            self.max = float(fmax[k])
            self.max_at = self._where_fast(first_frame + k, int(np.argmax(v[k])))
        if not self.binned:
            return
        # histogram bins: (v - lo) / step, truncated (the cast), clipped to the range;
        # a few frames at a time so the integer bins stay small
        np.add(v, typ(-_HIST_LO_C), out=d)
        if fmin.min() < _HIST_LO_C or fmax.max() >= _HIST_HI_C:
            np.clip(d, 0, (self.nbins - 0.5) * _HIST_STEP, out=d)
        step = max(1, (1 << 20) // d2.shape[1])
        q = np.empty((min(step, f), d2.shape[1]), np.intp)
        for k in range(0, f, step):
            m = min(step, f - k)
            np.multiply(d2[k:k + m], typ(1.0 / _HIST_STEP), out=q[:m], casting="unsafe")
            counts = np.bincount(q[:m].reshape(-1))
            self.hist[:counts.size] += counts

    def _where_fast(self, frame, p):
        """Location of the ``p``-th value (raster order) of the region view or gather."""
        if self._box is not None:
            r0, _, c0, c1 = self._box
            w = c1 - c0
            return {"frame": int(frame), "row": int(r0 + p // w), "col": int(c0 + p % w)}
        return self._where(frame, p)

    def _update_general(self, chunk_c, first_frame):
        f = chunk_c.shape[0]
        v = chunk_c.reshape(f, -1)[:, self.idx].astype(np.float64)   # (F, P)
        ok = np.isfinite(v)
        cnt = ok.sum(axis=1)
        if self.shift is None and cnt.sum():
            # a float32 number, so that the fast path can subtract it exactly
            self.shift = float(np.float32(np.nanmean(np.where(ok, v, np.nan))))
        sh = self.shift or 0.0
        d = np.where(ok, v - sh, 0.0)
        self.s1 += float(d.sum())
        self.s2 += float((d * d).sum())
        self.n += int(cnt.sum())
        with np.errstate(invalid="ignore"):
            fmin = np.where(cnt > 0, np.nanmin(np.where(ok, v, np.inf), axis=1), np.nan)
            fmax = np.where(cnt > 0, np.nanmax(np.where(ok, v, -np.inf), axis=1), np.nan)
            fmean = np.where(cnt > 0, d.sum(axis=1) / np.maximum(cnt, 1) + sh, np.nan)
        for k in range(f):
            self.frames.append({"frame": first_frame + k, "valid_pixels": int(cnt[k]),
                                "min_c": _f(fmin[k]), "max_c": _f(fmax[k]), "mean_c": _f(fmean[k])})
        if cnt.sum():
            vv = np.where(ok, v, np.inf)
            j = np.unravel_index(np.argmin(vv), vv.shape)
            if vv[j] < self.min:
                self.min = float(vv[j])
                self.min_at = self._where(first_frame + j[0], j[1])
            vv = np.where(ok, v, -np.inf)
            j = np.unravel_index(np.argmax(vv), vv.shape)
            if vv[j] > self.max:
                self.max = float(vv[j])
                self.max_at = self._where(first_frame + j[0], j[1])
            if self.binned:
                b = np.clip(((v[ok] - _HIST_LO_C) / _HIST_STEP).astype(np.int64), 0, self.nbins - 1)
                self.hist += np.bincount(b, minlength=self.nbins)

    def _where(self, frame, p):
        r, c = np.unravel_index(self.idx[p], self.mask.shape)
        return {"frame": int(frame), "row": int(r), "col": int(c)}

    def percentile(self, q):
        """The ``q``-th percentile [C], within half a bin of ``numpy.percentile`` (linear
        method) over every valid value seen; None without values."""
        if self.n == 0:
            return None
        cum = np.cumsum(self.hist)
        if cum[-1] == 0:
            return None
        h = (cum[-1] - 1) * q / 100.0          # fractional rank, as numpy's linear method
        i = int(np.floor(h))
        j = min(i + 1, int(cum[-1]) - 1)
        ki, kj = np.searchsorted(cum, [i, j], side="right")   # bins holding ranks i and j
        ci, cj = _HIST_LO_C + (ki + 0.5) * _HIST_STEP, _HIST_LO_C + (kj + 0.5) * _HIST_STEP
        return float(ci + (h - i) * (cj - ci))

    def result(self, counted=None):
        """Summary dict for report.json (degrees Celsius).

        ``counted``: (values, counts) of every valid value of the region over the stack
        (the lookup plan's tally, ``counted_statistics``); the spread and the percentiles
        then come from them exactly. Required after ``update(..., binned=False)``."""
        if not self.binned and counted is None:
            raise ValueError(f"region '{self.name}': updated without histogram; pass the counted values")
        if self.n == 0:
            return {"name": self.name, "pixels": self.pixels, "valid_values": 0, "min_c": None, "max_c": None,
                    "mean_c": None, "std_c": None, "p05_c": None, "p95_c": None,
                    "min_at": None, "max_at": None, "frames": self.frames}
        mean_d = self.s1 / self.n
        if counted is not None:
            values, counts = counted
            if int(np.sum(counts)) != self.n:
                raise ValueError(f"region '{self.name}': {int(np.sum(counts))} counted values "
                                 f"for {self.n} valid values seen")
            std, (p05, p95) = counted_statistics(values, counts, (5, 95))
        else:
            std = float(np.sqrt(max(self.s2 / self.n - mean_d**2, 0.0)))
            p05, p95 = self.percentile(5), self.percentile(95)
        return {"name": self.name, "pixels": self.pixels, "valid_values": self.n,
                "min_c": self.min, "max_c": self.max, "mean_c": mean_d + self.shift,
                "std_c": std, "p05_c": p05, "p95_c": p95,
                "min_at": self.min_at, "max_at": self.max_at, "frames": self.frames}


def counted_statistics(values, counts, percentiles=(5, 95)):
    """Standard deviation and percentiles of a multiset given as distinct values and
    their counts (value ``values[j]`` occurs ``counts[j]`` times), exactly as numpy
    computes them on the expanded float64 array.

    Percentiles follow ``numpy.percentile``'s default (linear) method, Hyndman & Fan
    (1996) definition 7: virtual rank h = (n - 1) q / 100 and linear interpolation
    between the order statistics of ranks floor(h) and floor(h) + 1, written as numpy
    writes it (from the nearer end). The standard deviation is the population one
    (``numpy.std``, ddof 0), about the multiset's mean.

    Parameters
    ----------
    values : array_like of float
        Distinct or repeated values (any order); non-finite values must have count 0.
    counts : array_like of int
    percentiles : sequence of float in [0, 100]

    Returns
    -------
    (float, list of float)
        Standard deviation and the percentiles; (None, [None, ...]) for no values.

    References
    ----------
    .. [1] R. J. Hyndman, Y. Fan, "Sample quantiles in statistical packages",
       The American Statistician 50(4), 361-365 (1996), doi:10.2307/2684934.
    """
    v = np.asarray(values, np.float64).ravel()
    c = np.asarray(counts, np.int64).ravel()
    use = c > 0
    v, c = v[use], c[use]
    n = int(c.sum())
    if n == 0:
        return None, [None] * len(percentiles)
    order = np.argsort(v, kind="stable")
    v, c = v[order], c[order]
    mean = float(np.dot(c, v)) / n
    std = float(np.sqrt(np.dot(c, (v - mean) ** 2) / n))
    cum = np.cumsum(c)
    out = []
    for q in percentiles:
        h = (n - 1) * (float(q) / 100.0)
        i = int(np.floor(h))
        gamma = h - i
        a, b = v[np.searchsorted(cum, [i, min(i + 1, n - 1)], side="right")]
        diff = b - a
        out.append(float(b - diff * (1 - gamma) if gamma >= 0.5 else a + diff * gamma))
    return std, out


def _f(x):
    x = float(x)
    return x if np.isfinite(x) else None


def local_linear_smooth(image, mask, radius=2):
    """Local linear (plane) regression of ``image`` over the valid pixels of ``mask``,
    evaluated at each pixel: noise is averaged out while a linear gradient is kept
    exactly, also at the region's edges and corners (where a plain moving mean would be
    biased toward the interior).

    Parameters
    ----------
    image : ndarray of shape (M, N)
    mask : ndarray of bool, shape (M, N)
        Pixels that may be used (region and finite).
    radius : int
        Half-width of the square window [px].

    Returns
    -------
    ndarray of shape (M, N); NaN outside ``mask``.

    Notes
    -----
    Per pixel p, least squares T(q) ~ a + b dr + c dc over q in the window with
    (dr, dc) = q - p; the result is a. The normal-equation sums are convolutions
    (a two-dimensional Savitzky-Golay filter of order 1 on a masked domain: A. Savitzky,
    M. J. E. Golay, Anal. Chem. 36, 1627 (1964), doi:10.1021/ac60214a047).
    """
    m = np.asarray(mask, bool) & np.isfinite(image)
    out = np.full(np.shape(image), np.nan)
    box = mask_box(m, radius)
    if box is None:
        return out
    # only the mask's bounding box plus the window's reach takes part: outside it every
    # weight and value is zero, so the sums (and the result) are those of the whole image
    out[box] = _local_linear_smooth(np.asarray(image)[box], m[box], radius)
    return out


def mask_box(mask, margin=0):
    """(row slice, col slice) of a mask's bounding box widened by ``margin`` pixels
    (within the image), or None for an empty mask."""
    m = np.asarray(mask, bool)
    rows, cols = np.flatnonzero(m.any(axis=1)), np.flatnonzero(m.any(axis=0))
    if rows.size == 0:
        return None
    return (slice(max(0, rows[0] - margin), min(m.shape[0], rows[-1] + margin + 1)),
            slice(max(0, cols[0] - margin), min(m.shape[1], cols[-1] + margin + 1)))


def _window_sum(a, r):
    """Sum of ``a`` over the (2r+1) x (2r+1) window around every pixel, zero outside
    (running sums along each axis; exact for integer arrays)."""
    n, m = a.shape
    k = 2 * r + 1
    c = np.zeros((n + k, m), a.dtype)
    np.cumsum(a, axis=0, out=c[r + 1:n + r + 1])
    c[n + r + 1:] = c[n + r]
    rows = c[k:] - c[:-k]
    d = np.zeros((n, m + k), a.dtype)
    np.cumsum(rows, axis=1, out=d[:, r + 1:m + r + 1])
    d[:, m + r + 1:] = d[:, m + r:m + r + 1]
    return d[:, k:] - d[:, :-k]


def _local_linear_smooth(image, m, radius):
    """The plane-fit intercepts of ``local_linear_smooth`` on a cropped image.

    Where the whole window is in the mask, the offsets' odd moments vanish
    (sum dr = sum dc = sum dr dc = 0 over a symmetric square), so the normal equations
    decouple and the intercept is the window mean: one running sum. Only pixels whose
    window is cut by the mask's edge or a hole solve the 3 x 3 system, on their own
    windows' (2r+1)^2 values."""
    k = 2 * radius + 1
    z = np.where(m, image, 0.0).astype(np.float64)
    count = _window_sum(m.astype(np.int32), radius)
    out = np.full(image.shape, np.nan)
    full = m & (count == k * k)
    out[full] = _window_sum(z, radius)[full] / (k * k)
    few = m & (count < 3)
    out[few] = image[few]
    part = m & (count < k * k) & (count >= 3)
    if not part.any():
        return out
    d = np.arange(-radius, radius + 1)
    dr, dc = np.repeat(d, k), np.tile(d, k)
    width = m.shape[1] + 2 * radius
    pr, pc = np.nonzero(part)
    at = ((pr + radius) * width + (pc + radius))[:, None] + (dr * width + dc)[None, :]
    w = np.pad(m, radius).ravel()[at].astype(np.float64)          # (pixels, window)
    zv = np.pad(z, radius).ravel()[at]
    moments = np.stack([np.ones(k * k), dr, dc, dr * dr, dc * dc, dr * dc], 1).astype(np.float64)
    s0, sr, sc, srr, scc, src = (w @ moments).T
    st, srt, sct = (zv @ moments[:, :3]).T
    # the intercept of the 3x3 symmetric normal equations by Cramer's rule: first row of
    # the adjugate (cofactors c0, c1, c2) over the determinant
    c0 = srr * scc - src * src
    c1 = sc * src - sr * scc
    c2 = sr * src - srr * sc
    det = s0 * c0 + sr * c1 + sc * c2
    good = np.abs(det) > 1e-9
    with np.errstate(invalid="ignore", divide="ignore"):
        vals = (st * c0 + srt * c1 + sct * c2) / det
    # where the plane is undetermined (collinear neighbours), use the window mean
    mean = st / np.maximum(s0, 1)
    out[pr, pc] = np.where(good, vals, mean)
    return out


# --- the report's temperature histogram ------------------------------------------------

_PIC_LO_C = TABLE_LIMITS_C[0]
#: bins of the report's temperature histogram (``PICTURE_BIN_K`` wide over ``TABLE_LIMITS_C``)
PICTURE_BINS = int(round((TABLE_LIMITS_C[1] - TABLE_LIMITS_C[0]) / PICTURE_BIN_K))


def picture_bins(values):
    """Bin of each temperature [C] in the report's histogram (one rule for every path)."""
    return np.clip(((values - _PIC_LO_C) / PICTURE_BIN_K).astype(np.int64), 0, PICTURE_BINS - 1)


def histogram_extent(hist):
    """(edges [C], counts) of the non-empty span of a report histogram."""
    nz = np.flatnonzero(hist)
    if not nz.size:
        return np.array([]), np.array([], np.int64)
    return _PIC_LO_C + PICTURE_BIN_K * np.arange(nz[0], nz[-1] + 2), hist[nz[0]:nz[-1] + 1]
