"""Frames that line up: sub-pixel registration and one-pass resampling onto a reference grid.

Pure functions on arrays (no files). Geometry is (row, col), as in scikit-image.

Sign convention
---------------
``row_shift_px`` / ``col_shift_px`` are the **displacement of a frame's content relative to
the reference frame**, positive down (rows) and right (cols): a wall feature at (r, c) in
the reference is at (r + row_shift_px, c + col_shift_px) in the frame. scikit-image's
``phase_cross_correlation`` returns the opposite (the correction that registers the moving
image), so :func:`register_translation` negates it. Resampling a frame onto the reference
grid reads the frame at ``p_ref + shift`` for every reference pixel ``p_ref``.

A similarity transform (rotation + scale + shift) is written the same way, as the map from
reference coordinates to frame coordinates: ``p_frame = s R(theta) p_ref + t`` with
``p = (row, col)``, so a pure translation is ``s = 1, theta = 0, t = shift``.

Method
------
Translation by phase correlation [1]_ with the matrix-multiply DFT upsampling of [2]_
(scikit-image ``phase_cross_correlation`` with ``upsample_factor``), computed on a robust
image: the NaN-filled image's gradient magnitude (or the image with its mean removed),
mean-removed and multiplied by a 2-D Hann window so that the image border and the
fixed pattern do not pull the estimate towards zero. No masks are given to scikit-image
(with masks it ignores ``upsample_factor`` and returns whole pixels).

The normalisation of the cross-power spectrum was chosen by measuring the sub-pixel bias
on sparse, sharp-edged facades shifted by 37 known amounts within +-3 px, each frame made
by integrating a 64x finer grid over each pixel (figures in the README). Maximum |error|
(RMS) per axis, single pass -> with one refinement pass:

* gradient image, no normalisation: 0.07 (0.035) -> 0.04 (0.015) px  (used)
* gradient image, phase normalisation: 0.13 (0.063) -> 0.045 (0.025) px
* mean-removed signal, no normalisation: 0.13 (0.046) -> 0.05 (0.020) px
* mean-removed signal, phase normalisation: 0.15 (0.089) -> 0.19 (0.067) px

Full phase normalisation pulls the estimate towards whole pixels on such scenes. The
refinement pass moves the frame back by the first estimate (bilinear) and registers it
again: the window does not move with the content and the gradient image of a
pixel-integrated edge is not exactly shift-covariant, errors that shrink with the shift.

``peak_ratio`` (quality figure, our own): the height of the correlation peak divided by
the highest value of the correlation surface outside a 5 x 5 neighbourhood of the peak.
A clear registration gives several units; a value near 1 means no single shift explains
the frame (featureless, saturated or changed scene) and the frame is rejected.

References
----------
.. [1] C. D. Kuglin, D. C. Hines, "The phase correlation image alignment method",
   Proc. IEEE Int. Conf. Cybernetics and Society (1975) 163-165.
.. [2] M. Guizar-Sicairos, S. T. Thurman, J. R. Fienup, "Efficient subpixel image
   registration algorithms", Opt. Lett. 33 (2008) 156-158, doi:10.1364/OL.33.000156.
.. [3] B. S. Reddy, B. N. Chatterji, "An FFT-based technique for translation, rotation,
   and scale-invariant image registration", IEEE Trans. Image Process. 5 (1996)
   1266-1271, doi:10.1109/83.506761.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import ndimage

#: reason codes of pixels made invalid by alignment (continue ``correction.REASONS``;
#: kept apart from it so that stacks without ``align`` report exactly what they did)
NOT_COVERED, FRAME_REJECTED = 5, 6
ALIGN_REASONS = {NOT_COVERED: "not_covered_after_alignment", FRAME_REJECTED: "frame_rejected_by_alignment"}

#: default DFT upsampling factor: shifts resolved to 1/100 px
UPSAMPLE = 100
#: validity below this (after resampling) marks a pixel NOT_COVERED
VALID_LEVEL = 1.0 - 1e-6


@dataclass(frozen=True)
class Similarity:
    """Map from reference (row, col) to frame (row, col): p_frame = scale * R(theta) p_ref + shift.

    ``rotation_deg`` turns the content counter-clockwise as seen on screen (rows down).
    """

    row_shift_px: float = 0.0
    col_shift_px: float = 0.0
    rotation_deg: float = 0.0
    scale: float = 1.0

    @property
    def matrix(self):
        """2x2 matrix in (row, col) acting on reference coordinates."""
        a = np.deg2rad(self.rotation_deg)
        c, s = np.cos(a), np.sin(a)
        # rows point down: a counter-clockwise turn on screen is (r, c) -> (c s' ...)
        return self.scale * np.array([[c, -s], [s, c]])

    @property
    def is_translation(self):
        return self.rotation_deg == 0.0 and self.scale == 1.0

    @property
    def is_identity(self):
        return self.is_translation and self.row_shift_px == 0.0 and self.col_shift_px == 0.0


@dataclass(frozen=True)
class Registration:
    """Result of registering one frame to the reference."""

    transform: Similarity
    peak_ratio: float

    @property
    def row_shift_px(self):
        return self.transform.row_shift_px

    @property
    def col_shift_px(self):
        return self.transform.col_shift_px


# --- robust registration image ----------------------------------------------------------

def fill_invalid(image, valid=None):
    """Copy of ``image`` (float64) with NaN / invalid pixels replaced by the mean of their
    valid neighbours (repeated dilation), or the median of all valid pixels where none is
    near. Registration and spline resampling both need finite input."""
    img = np.array(image, dtype=np.float64, copy=True)
    ok = np.isfinite(img) if valid is None else (np.asarray(valid, bool) & np.isfinite(img))
    if ok.all():
        return img
    if not ok.any():
        return np.zeros_like(img)
    img[~ok] = 0.0
    w = ok.astype(np.float64)
    k = np.ones((3, 3))
    todo = ~ok
    for _ in range(8):
        s = ndimage.convolve(img * w, k, mode="nearest")
        n = ndimage.convolve(w, k, mode="nearest")
        take = todo & (n > 0)
        if not take.any():
            break
        img[take] = s[take] / n[take]
        w[take] = 1.0
        todo &= ~take
        if not todo.any():
            break
    if todo.any():
        img[todo] = np.median(img[w > 0])
    return img


def registration_image(image, kind="gradient", valid=None):
    """The image phase correlation is computed on.

    Parameters
    ----------
    image : ndarray of shape (M, N)
        Linearised signal (or apparent temperature); NaN where invalid.
    kind : {"gradient", "signal"}
        Gradient magnitude (Sobel) of the filled image, or the filled image itself.

    Returns
    -------
    ndarray of shape (M, N), float64: mean removed, times a 2-D Hann window.
    """
    from skimage.filters import window

    img = fill_invalid(image, valid)
    if kind == "gradient":
        img = np.hypot(ndimage.sobel(img, 0, mode="nearest"), ndimage.sobel(img, 1, mode="nearest"))
    elif kind != "signal":
        raise ValueError(f"kind must be 'gradient' or 'signal', got {kind!r}")
    img = img - img.mean()
    return img * window("hann", img.shape)


def _pad_to(a, shape):
    out = np.zeros(shape, a.dtype)
    out[:a.shape[0], :a.shape[1]] = a
    return out


def peak_ratio(reference_image, moving_image, normalization=None, exclude=2):
    """Correlation peak over the highest value outside a (2*exclude+1)^2 neighbourhood of
    the peak (periodic), on the prepared registration images. Our own quality figure."""
    f = np.fft.fft2(reference_image) * np.conj(np.fft.fft2(moving_image))
    if normalization == "phase":
        f = f / np.maximum(np.abs(f), 1e-300)
    cc = np.abs(np.fft.ifft2(f))
    i = np.unravel_index(np.argmax(cc), cc.shape)
    peak = cc[i]
    rows = (np.arange(-exclude, exclude + 1) + i[0]) % cc.shape[0]
    cols = (np.arange(-exclude, exclude + 1) + i[1]) % cc.shape[1]
    cc[np.ix_(rows, cols)] = 0.0
    second = cc.max()
    return float(peak / second) if second > 0 else float("inf")


def register_translation(reference, moving, *, kind="gradient", normalization=None,
                         upsample_factor=UPSAMPLE, reference_prepared=None, refine=1):
    """Sub-pixel translation of ``moving``'s content relative to ``reference``.

    Parameters
    ----------
    reference, moving : ndarray of shape (M, N) or (M2, N2)
        Linearised signal images; NaN where invalid. Different sizes are zero-padded to
        the larger extent (the overlap decides the correlation).
    kind, normalization : see :func:`registration_image` and the module notes.
    upsample_factor : int
        Shifts are resolved to 1/upsample_factor px.
    reference_prepared : ndarray, optional
        ``registration_image(reference, kind)`` computed once for many frames.
    refine : int
        Re-registrations after moving the frame back by the estimate (bilinear).

    Returns
    -------
    Registration
        Displacement of the content (positive down/right, the negated scikit-image
        result) and the peak ratio.
    """
    a = registration_image(reference, kind) if reference_prepared is None else reference_prepared
    d = _correlate(a, registration_image(moving, kind), normalization, upsample_factor)
    for _ in range(refine):
        # the window stays where it is while the content moves, and the gradient image of
        # a pixel-integrated edge is not exactly shift-covariant: re-register the frame
        # after moving it by the first estimate, where the remaining shift is small
        back, _ = resample(moving, Similarity(float(d[0]), float(d[1])), order=1)
        d = d + _correlate(a, registration_image(back, kind), normalization, upsample_factor)
    b = registration_image(moving, kind)
    q = peak_ratio(*_same_shape(a, b), "phase")
    return Registration(Similarity(float(d[0]) + 0.0, float(d[1]) + 0.0), q)


def _same_shape(a, b):
    if a.shape != b.shape:
        shape = (max(a.shape[0], b.shape[0]), max(a.shape[1], b.shape[1]))
        a, b = _pad_to(a, shape), _pad_to(b, shape)
    return a, b


def _correlate(a, b, normalization, upsample_factor):
    """Displacement of b's content relative to a's (negated scikit-image correction)."""
    from skimage.registration import phase_cross_correlation

    a, b = _same_shape(a, b)
    shift, _, _ = phase_cross_correlation(a, b, upsample_factor=upsample_factor, normalization=normalization)
    return -np.asarray(shift, float)


# --- rotation and scale ------------------------------------------------------------------

def register_similarity(reference, moving, *, kind="gradient", upsample_factor=UPSAMPLE):
    """Rotation, scale and shift of ``moving``'s content relative to ``reference``.

    Rotation and scale from the log-polar transform of the Fourier magnitudes ([3]_,
    scikit-image ``warp_polar`` + ``phase_cross_correlation``), then the translation of the
    de-rotated, de-scaled frame by :func:`register_translation`.

    Returns
    -------
    Registration with a :class:`Similarity` mapping reference to frame coordinates.
    """
    from skimage.filters import difference_of_gaussians
    from skimage.registration import phase_cross_correlation
    from skimage.transform import warp_polar

    a = registration_image(reference, kind)
    b = registration_image(moving, kind)
    if a.shape != b.shape:
        shape = (max(a.shape[0], b.shape[0]), max(a.shape[1], b.shape[1]))
        a, b = _pad_to(a, shape), _pad_to(b, shape)
    fa = np.abs(np.fft.fftshift(np.fft.fft2(difference_of_gaussians(a, 1, 8))))
    fb = np.abs(np.fft.fftshift(np.fft.fft2(difference_of_gaussians(b, 1, 8))))
    radius = min(a.shape) // 2
    pa = warp_polar(fa, radius=radius, output_shape=(360, radius), scaling="log", order=1)
    pb = warp_polar(fb, radius=radius, output_shape=(360, radius), scaling="log", order=1)
    half = 180      # the magnitude spectrum is symmetric: use half the circle
    sh, _, _ = phase_cross_correlation(pa[:half], pb[:half], upsample_factor=20, normalization=None)
    klog = radius / np.log(radius)
    # content of b turned by +theta -> its spectrum turned by +theta; content enlarged by
    # s -> spectrum shrunk by 1/s. Hand-held bursts turn by a few degrees: of the two
    # angles the magnitude spectrum cannot tell apart, take the one within +-90 deg.
    theta = _wrap(-float(sh[0]))
    if abs(theta) > 90.0:
        theta = _wrap(theta + 180.0)
    scale = float(np.exp(-sh[1] / klog))
    first = _centre(Similarity(0.0, 0.0, theta, scale), reference.shape)
    moved, _ = resample(moving, first)
    reg = register_translation(reference, moved, kind=kind, upsample_factor=upsample_factor)
    m = first.matrix
    t = m @ np.array([reg.row_shift_px, reg.col_shift_px]) + np.array([first.row_shift_px, first.col_shift_px])
    start = Similarity(float(t[0]), float(t[1]), theta, scale)
    best = _refine_similarity(reference, moving, start)
    moved, _ = resample(moving, best)
    q = peak_ratio(*_same_shape(a, registration_image(moved, kind)), "phase")
    return Registration(best, q)


def _refine_similarity(reference, moving, start):
    """Least-squares refinement of (shift, rotation, scale) on the lightly smoothed
    signal images (the log-polar estimate of the scale is coarse on small frames)."""
    from scipy.optimize import least_squares

    ref = ndimage.gaussian_filter(fill_invalid(reference), 1.0)
    mov = ndimage.gaussian_filter(fill_invalid(moving), 1.0)
    core = np.zeros(ref.shape, bool)
    mr, mc = max(2, ref.shape[0] // 10), max(2, ref.shape[1] // 10)
    core[mr:-mr, mc:-mc] = True
    sd = float(np.std(ref[core])) or 1.0

    def resid(p):
        out, ok = resample(mov, Similarity(p[0], p[1], p[2], np.exp(p[3])), output_shape=ref.shape)
        r = np.where(ok & core, out - ref, 0.0) / sd
        return r[core]

    p0 = np.array([start.row_shift_px, start.col_shift_px, start.rotation_deg, np.log(start.scale)])
    sol = least_squares(resid, p0, x_scale=np.array([1.0, 1.0, 1.0, 0.01]), diff_step=1e-3, max_nfev=200)
    p = sol.x
    return Similarity(float(p[0]), float(p[1]), float(p[2]), float(np.exp(p[3])))


def _wrap(deg):
    return float((deg + 180.0) % 360.0 - 180.0)


def _centre(sim, shape):
    """The similarity ``sim`` (rotation/scale about the image centre) as a map about the
    origin: p_frame = M (p_ref - c) + c + shift."""
    c = (np.asarray(shape[:2], float) - 1.0) / 2.0
    m = sim.matrix
    t = c - m @ c + np.array([sim.row_shift_px, sim.col_shift_px])
    return Similarity(float(t[0]), float(t[1]), sim.rotation_deg, sim.scale)


def similarity_from_points(pairs):
    """Least-squares similarity from point pairs (Umeyama's method, scikit-image
    ``SimilarityTransform``).

    Parameters
    ----------
    pairs : sequence of ((r_ref, c_ref), (r_frame, c_frame))
        At least two pairs: a point in the reference frame and the same point in the frame.

    Returns
    -------
    Similarity mapping reference to frame coordinates (about the origin).
    """
    from skimage.transform import SimilarityTransform

    p = np.asarray(pairs, float)
    if p.ndim != 3 or p.shape[1:] != (2, 2) or p.shape[0] < 2:
        raise ValueError("expected at least two pairs [[row, col], [row, col]] (reference point, frame point)")
    src, dst = p[:, 0, :], p[:, 1, :]
    if np.linalg.matrix_rank(src - src.mean(0)) < 1:
        raise ValueError("the reference points coincide; give distinct points")
    t = SimilarityTransform()
    # skimage works in (x, y) = (col, row)
    import warnings
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", FutureWarning)
        ok = t.estimate(src[:, ::-1], dst[:, ::-1])
    if not ok:
        raise ValueError("the point pairs do not determine a similarity transform")
    m = t.params              # (x, y) homogeneous
    scale = float(np.hypot(m[0, 0], m[1, 0]))
    ang_xy = float(np.degrees(np.arctan2(m[1, 0], m[0, 0])))
    # in (row, col): matrix [[m11, m10], [m01, m00]]; our matrix [[c, -s], [s, c]] * scale
    # equals the (x, y) matrix with the angle negated
    return Similarity(float(m[1, 2]), float(m[0, 2]), -ang_xy, scale)


# --- resampling -------------------------------------------------------------------------

def resample(image, transform: Similarity, valid=None, order=1, output_shape=None):
    """Resample ``image`` onto the reference grid in one pass.

    Parameters
    ----------
    image : ndarray of shape (M, N)
        Signal (never temperature); NaN or ``valid == False`` where invalid.
    transform : Similarity
        Reference -> frame coordinates (see the module notes).
    valid : ndarray of bool, optional
        Validity of the input pixels (default: finite).
    order : int
        Spline order of the data interpolation (1: bilinear, 3: cubic).
    output_shape : (int, int), optional
        Shape of the reference grid (default: the image's).

    Returns
    -------
    out : ndarray (float64), NaN where the resampled validity is below 1
    covered : ndarray of bool, the resampled validity is 1 (the pixel is built only from
        valid input pixels inside the frame)

    Notes
    -----
    The validity mask (1 valid, 0 invalid, 0 outside the frame) is resampled alongside with
    the same geometry and bilinear weights; cubic splines would otherwise spread one NaN
    into a block. The data are filled at invalid pixels first (:func:`fill_invalid`) so
    the spline sees finite values.
    """
    img = np.asarray(image, float)
    ok = np.isfinite(img) if valid is None else (np.asarray(valid, bool) & np.isfinite(img))
    shape = img.shape if output_shape is None else tuple(output_shape)
    if transform.is_identity and shape == img.shape:
        return np.where(ok, img, np.nan), ok.copy()
    filled = fill_invalid(img, ok)
    m = transform.matrix
    off = np.array([transform.row_shift_px, transform.col_shift_px])
    if transform.is_translation:
        m = np.ones(2)
    out = ndimage.affine_transform(filled, m, offset=off, output_shape=shape, order=order, mode="nearest",
                                   prefilter=order > 1)
    v = ndimage.affine_transform(ok.astype(np.float64), m, offset=off, output_shape=shape, order=1,
                                 mode="constant", cval=0.0)
    if order > 1:
        # a cubic spline reaches one pixel further: a pixel is covered when its whole
        # 2x2 neighbourhood of validity is (erosion of the bilinear validity)
        v = ndimage.minimum_filter(v, size=3, mode="constant", cval=0.0) if (~ok).any() else np.minimum(
            v, ndimage.minimum_filter(v, size=3, mode="constant", cval=0.0))
    covered = v >= VALID_LEVEL
    out[~covered] = np.nan
    return out, covered
