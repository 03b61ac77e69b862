"""Stacks compared: temporal products, the difference of two aligned mean frames, its
per-pixel uncertainty, and the connected regions where it changed (differential
thermography, e.g. baseline versus depressurised envelope, EN 13187:1998 clause 4 /
ISO 6781-1:2023; before versus after a retrofit).

Pure functions on arrays; temperatures in degrees Celsius at the edges as elsewhere in
irpipe's frame products, differences in kelvin.

Sign convention: the difference is **this stack minus the aligned baseline**; a ``colder``
finding has a negative ``delta_k`` (e.g. outdoor air drawn in through a leak while the
building is depressurised), a ``warmer`` finding a positive one.

Uncertainty of the difference (per pixel, expanded, k = 2)::

    U = 2 sqrt(u_A^2 + u_B^2) + e_edge,      e_edge = (c_interp + d_reg) g_min

u_A, u_B: the noise of each mean frame, measured from the stack itself (the difference of
its even- and odd-frame means, halved, in flat pixels; :func:`temporal_noise`); g_min:
the smaller of the two mean frames' local gradient magnitudes [K/px] (an edge is an edge
in both states; a change that appears in one state only is not explained by an edge);
d_reg: registration error [px]; c_interp: the residual of resampling a pixel-integrated
sharp step, measured for bilinear resampling at up to 0.72 px times the local gradient
(sharp-edged scenes shifted by known sub-pixel amounts on a 16x finer grid,
``tests/test_compare.py``). e_edge is a bound, not a standard uncertainty, and adds
linearly (JCGM 100:2008 F.2.4.5: a known, uncorrected bias enlarges the uncertainty).
"""
from __future__ import annotations

import numpy as np
from scipy import ndimage

from .alignment import Similarity, register_similarity, register_translation, resample

#: bilinear resampling residual at a pixel-integrated sharp step, in units of the local
#: gradient (measured maximum 0.72 px, see the module notes), rounded up
INTERPOLATION_RESIDUAL_PX = 0.75
#: registration error of two mean frames [px] (measured maximum 0.04 px with one
#: refinement pass on sharp-edged scenes; alignment module notes), rounded up
REGISTRATION_ERROR_PX = 0.05


# --- temporal products ---------------------------------------------------------------------

class TemporalAccumulator:
    """Streaming per-pixel mean and standard deviation over frames (Welford's update,
    B. P. Welford, Technometrics 4 (1962) 419-420), and the even/odd-frame sums and the
    successive-frame differences the noise figures need. NaN values are skipped."""

    def __init__(self, shape):
        self.n = np.zeros(shape, np.int64)
        self.mean = np.zeros(shape, np.float64)
        self.m2 = np.zeros(shape, np.float64)
        self.half = [np.zeros(shape, np.float64), np.zeros(shape, np.float64)]
        self.half_n = [np.zeros(shape, np.int64), np.zeros(shape, np.int64)]
        self.prev = None
        self.diff_sq = np.zeros(shape, np.float64)
        self.diff_n = np.zeros(shape, np.int64)
        self.frames = 0

    def add(self, frames, first):
        for k in range(frames.shape[0]):
            f = np.asarray(frames[k], np.float64)
            ok = np.isfinite(f)
            self.frames += 1
            if not ok.any():
                continue            # a rejected frame: left out
            self.n += ok
            d = np.where(ok, f - self.mean, 0.0)
            self.mean += np.where(ok, d / np.maximum(self.n, 1), 0.0)
            self.m2 += np.where(ok, d * (f - self.mean), 0.0)
            h = (first + k) % 2
            self.half[h] += np.where(ok, f, 0.0)
            self.half_n[h] += ok
            if self.prev is not None:
                both = ok & np.isfinite(self.prev)
                self.diff_sq += np.where(both, (f - self.prev) ** 2, 0.0)
                self.diff_n += both
            self.prev = f

    def products(self):
        """(mean, std) float32 images; NaN where no frame was valid (std: fewer than 2)."""
        with np.errstate(invalid="ignore", divide="ignore"):
            mean = np.where(self.n > 0, self.mean, np.nan).astype(np.float32)
            std = np.where(self.n > 1, np.sqrt(self.m2 / np.maximum(self.n - 1, 1)), np.nan).astype(np.float32)
        return mean, std


def flat_pixels(image, fraction=0.5):
    """Pixels of ``image`` whose local gradient magnitude is in the lowest ``fraction`` of
    the valid pixels (away from edges), as a bool mask."""
    g = local_gradient(image)
    ok = np.isfinite(g)
    if not ok.any():
        return ok
    return ok & (g <= np.quantile(g[ok], fraction))


def temporal_noise(acc: TemporalAccumulator, flat=None):
    """Noise figures of a stack, measured from its own frames in flat pixels.

    Returns
    -------
    dict with
      ``frame_noise_k``: single-frame temporal noise, RMS of successive-frame differences
      divided by sqrt(2) (a difference of two frames cancels the fixed pattern and the
      scene; JCGM 100:2008 4.2 on Type A evaluation);
      ``mean_noise_k``: noise of the mean frame, half the RMS difference of the even- and
      odd-frame means (keeps the slow drift and correlated noise that sqrt(N) ignores);
      ``white_noise_mean_k``: frame_noise_k / sqrt(N), the figure for purely white noise,
      for comparison only; ``frames``: valid frames used; ``flat_pixels``.
    """
    mean, _ = acc.products()
    if flat is None:
        flat = flat_pixels(mean)
    n_frames = int(acc.n.max()) if acc.n.size else 0
    out = {"frames": n_frames, "flat_pixels": int(flat.sum()), "frame_noise_k": None, "mean_noise_k": None,
           "white_noise_mean_k": None}
    use = flat & (acc.diff_n > 0)
    if use.any():
        fn = float(np.sqrt(acc.diff_sq[use].sum() / acc.diff_n[use].sum() / 2.0))
        out["frame_noise_k"] = fn
        out["white_noise_mean_k"] = fn / np.sqrt(max(n_frames, 1))
    use = flat & (acc.half_n[0] > 0) & (acc.half_n[1] > 0)
    if use.any() and n_frames >= 2:
        with np.errstate(invalid="ignore", divide="ignore"):
            d = acc.half[0] / np.maximum(acc.half_n[0], 1) - acc.half[1] / np.maximum(acc.half_n[1], 1)
        dd = d[use]
        dd = dd - np.median(dd)        # a slow drift between the halves is not pixel noise
        out["mean_noise_k"] = float(np.sqrt(np.mean(dd ** 2)) / 2.0)
    elif out["frame_noise_k"] is not None:
        out["mean_noise_k"] = out["white_noise_mean_k"]
    return out


# --- differences ---------------------------------------------------------------------------

def local_gradient(image):
    """Gradient magnitude [units/px] by the Sobel operator divided by 8 (a unit ramp gives
    1), NaN neighbours filled first; NaN where the image is NaN."""
    from .alignment import fill_invalid

    img = np.asarray(image, float)
    f = fill_invalid(img)
    g = np.hypot(ndimage.sobel(f, 0, mode="nearest"), ndimage.sobel(f, 1, mode="nearest")) / 8.0
    return np.where(np.isfinite(img), g, np.nan)


def align_mean(mean, baseline_mean, method="translation", points=None):
    """The baseline's mean frame resampled onto this stack's grid.

    Parameters
    ----------
    mean : ndarray (M, N)
        This stack's mean frame (the reference geometry).
    baseline_mean : ndarray (M2, N2)
        The baseline's mean frame; any size (zero-padded for the correlation).
    method : {"translation", "similarity", "points"}
    points : pairs ((r, c) in this stack, (r, c) in the baseline) for ``"points"``.

    Returns
    -------
    aligned : ndarray (M, N), NaN outside the overlap
    registration : alignment.Registration (displacement of the baseline's content
        relative to this stack, positive down/right)
    """
    from .alignment import Registration, similarity_from_points

    if method == "points":
        reg = Registration(similarity_from_points(points), float("nan"))
    elif method == "similarity":
        reg = register_similarity(mean, baseline_mean)
    else:
        reg = register_translation(mean, baseline_mean)
    aligned, _ = resample(baseline_mean, reg.transform, output_shape=np.shape(mean))
    return aligned, reg


def remove_offset(diff, mode="median", region=None):
    """Remove a global offset from a difference image.

    Parameters
    ----------
    diff : ndarray
    mode : {"median", "region", "none"}
    region : bool mask for ``"region"``

    Returns
    -------
    (diff - offset, offset [K])
    """
    ok = np.isfinite(diff)
    if mode == "none" or not ok.any():
        return diff, 0.0
    sel = ok if mode == "median" else (ok & region)
    if not sel.any():
        raise ValueError("the offset region has no pixel inside the overlap of the two stacks")
    off = float(np.median(diff[sel]))
    return diff - off, off


def difference_uncertainty(mean, aligned_baseline, noise_mean_k, noise_baseline_k,
                           registration_error_px=REGISTRATION_ERROR_PX,
                           interpolation_px=INTERPOLATION_RESIDUAL_PX):
    """Per-pixel expanded uncertainty U (k = 2) of the difference and its edge part [K].

    See the module notes for the equation. Returns ``(U, edge_residual)``, NaN outside
    the overlap.
    """
    ga = local_gradient(mean)
    gb = local_gradient(aligned_baseline)
    g = np.fmin(ga, gb)
    edge = (interpolation_px + registration_error_px) * g
    noise = 2.0 * np.hypot(noise_mean_k or 0.0, noise_baseline_k or 0.0)
    u = noise + edge
    bad = ~(np.isfinite(mean) & np.isfinite(aligned_baseline))
    u[bad] = np.nan
    edge[bad] = np.nan
    return u, edge


def _describe(lab, idx, diff, sign):
    sl = ndimage.find_objects(lab)[idx - 1]
    m = lab[sl] == idx
    vals = diff[sl][m]
    k = int(np.argmax(sign * vals))
    rr, cc = np.nonzero(m)
    return {"row": int(rr[k] + sl[0].start), "col": int(cc[k] + sl[1].start), "delta_k": round(float(vals[k]), 4),
            "mean_delta_k": round(float(vals.mean()), 4), "area_px": int(m.sum()),
            "bbox": [int(sl[0].start), int(sl[1].start), int(sl[0].stop), int(sl[1].stop)]}


def find_changes(diff, uncertainty, edge_residual, below_k=None, above_k=None, min_area_px=6):
    """Connected regions (8-connectivity) of the difference at or beyond the thresholds.

    A pixel counts when its difference is at or beyond the threshold and beyond its own
    expanded uncertainty. Candidate pixels (at or beyond the threshold) that do not count
    because the expected edge residual alone reaches the threshold are grouped the same way
    and returned as suppressed.

    Parameters
    ----------
    diff, uncertainty, edge_residual : ndarray (M, N) [K]
    below_k, above_k : float or None
        Thresholds (positive numbers): ``colder`` where diff <= -below_k, ``warmer`` where
        diff >= above_k.
    min_area_px : int

    Returns
    -------
    (findings, suppressed): lists of dicts with ``kind`` (colder/warmer), ``row``, ``col``
    (extreme pixel), ``delta_k`` (extreme difference), ``mean_delta_k``, ``area_px``,
    ``bbox`` [row0, col0, row1, col1) and ``threshold_k``; largest |delta_k| first.
    """
    found, suppressed = [], []
    eight = np.ones((3, 3), bool)
    ok = np.isfinite(diff) & np.isfinite(uncertainty)
    with np.errstate(invalid="ignore"):
        for kind, thr, sign in (("colder", below_k, -1.0), ("warmer", above_k, 1.0)):
            if thr is None:
                continue
            cand = ok & (sign * diff >= thr)
            counts = cand & (sign * diff > uncertainty)
            edge = cand & ~counts & (edge_residual >= thr)
            for mask, out, why in ((counts, found, None), (edge, suppressed, "expected edge residual reaches the threshold")):
                lab, n = ndimage.label(mask, structure=eight)
                for i in range(1, n + 1):
                    d = _describe(lab, i, diff, sign)
                    if d["area_px"] < min_area_px:
                        continue
                    d = {"kind": kind, **d, "threshold_k": float(thr)}
                    if why:
                        d["suppressed"] = why
                    out.append(d)
    found.sort(key=lambda d: -abs(d["delta_k"]))
    suppressed.sort(key=lambda d: -abs(d["delta_k"]))
    return found, suppressed


def temperature_factor_difference(mean_c, baseline_c, indoor_c, outdoor_c, baseline_indoor_c, baseline_outdoor_c):
    """Difference of temperature factors f = (T_si - T_e) / (T_i - T_e) (ISO 13788:2012,
    3.1.1 / Eq. 1), this state minus the baseline, for comparisons across winters."""
    fa = (np.asarray(mean_c, float) - outdoor_c) / (indoor_c - outdoor_c)
    fb = (np.asarray(baseline_c, float) - baseline_outdoor_c) / (baseline_indoor_c - baseline_outdoor_c)
    return fa - fb


def checkerboard(a, b, tile=16):
    """Image taking tiles alternately from ``a`` and ``b`` (same shape), to check a
    registration by eye: edges run on across tile borders when it is right."""
    r = (np.arange(a.shape[0]) // tile)[:, None]
    c = (np.arange(a.shape[1]) // tile)[None, :]
    return np.where((r + c) % 2 == 0, a, b)
