"""Hot and cold spots: connected components of a running extreme image (max or
min over frames), kept in an :class:`ExtremesState` while a stack is streamed.

Pure functions, no file I/O. Temperatures carry their unit in the name
(``_c`` degrees Celsius, ``_k`` kelvin difference).
"""
import math
from dataclasses import dataclass

import numpy as np
from scipy import ndimage
from skimage.measure import label as _label

__all__ = [
    "ExtremesState",
    "update_extremes",
    "find_spots",
]


@dataclass
class ExtremesState:
    """Running per-pixel extremes over the frames of a stack seen so far.

    Attributes
    ----------
    max_c, min_c : ndarray of shape (M, N), float
        Largest / smallest finite value seen [degC]; NaN where none yet.
    max_frame, min_frame : ndarray of shape (M, N), int64
        Stack frame index of that value (earliest on ties); -1 where none.
    n_valid : ndarray of shape (M, N), int64
        Number of finite samples seen per pixel.
    """

    max_c: np.ndarray
    max_frame: np.ndarray
    min_c: np.ndarray
    min_frame: np.ndarray
    n_valid: np.ndarray

    @classmethod
    def empty(cls, shape, filled=True):
        """State before any frame, for images of the given (M, N) shape. ``filled=False``
        leaves the arrays unset (``fill`` sets them), for a caller that writes them whole."""
        shape = tuple(shape)
        state = cls(max_c=np.empty(shape), max_frame=np.empty(shape, dtype=np.int64),
                    min_c=np.empty(shape), min_frame=np.empty(shape, dtype=np.int64),
                    n_valid=np.empty(shape, dtype=np.int64))
        return state.fill() if filled else state

    def fill(self):
        """Set the state to "no frame seen" (NaN extremes, frame -1, no valid sample)."""
        self.max_c.fill(np.nan)
        self.min_c.fill(np.nan)
        self.max_frame.fill(-1)
        self.min_frame.fill(-1)
        self.n_valid.fill(0)
        return self

    @property
    def shape(self):
        return self.max_c.shape


def _update_one(best, best_frame, chunk, finite, first_frame, sign):
    # sign = +1 for maximum, -1 for minimum; invalid samples become -inf / +inf.
    filled = np.where(finite, chunk, -sign * np.inf)
    idx = filled.argmax(axis=0) if sign > 0 else filled.argmin(axis=0)   # first occurrence
    value = np.take_along_axis(filled, idx[None], axis=0)[0]
    with np.errstate(invalid="ignore"):
        beats = (value > best) if sign > 0 else (value < best)
    better = np.isfinite(value) & (beats | np.isnan(best))   # strict: ties keep the earlier frame
    best[better] = value[better]
    best_frame[better] = first_frame + idx[better]


def _update_one_finite(best, best_frame, chunk, value, first_frame, sign, fresh=False):
    """As _update_one for a chunk without NaN or inf, given ``value``, its per-pixel
    extreme: the earliest frame reaching it is searched only where it beats ``best``
    (everywhere when the state is ``fresh``: no frame seen yet)."""
    f = chunk.shape[0]
    flat = chunk.reshape(f, -1)
    v = value.reshape(-1)
    where = None                        # None: every pixel
    if not fresh:
        with np.errstate(invalid="ignore"):
            better = (value > best) if sign > 0 else (value < best)
        better |= np.isnan(best)
        where = np.flatnonzero(better)
        if where.size == 0:
            return
    every = fresh or where.size == v.size
    if every:
        where = None
    if not every and where.size * 8 < v.size:
        # few pixels: gather them and take the first frame equal to the extreme
        sub = np.take(flat, where, axis=1)
        k = (sub == v[where]).argmax(axis=0)
    else:
        # many pixels (first chunks): weigh the frames that reach the extreme by f - j,
        # so the largest weight is that of the earliest one (every pixel has one)
        typ = np.int16 if f < 32768 else np.int64
        weight = (f - np.arange(f, dtype=typ))[:, None]
        kk = f - (np.equal(flat, v) * weight).max(axis=0)
        k = kk if every else kk[where]
    if every:                           # every pixel (a stack's first chunk): no gather
        best.reshape(-1)[:] = v
        best_frame.reshape(-1)[:] = first_frame + k
        return
    best.reshape(-1)[where] = v[where]
    best_frame.reshape(-1)[where] = first_frame + k


def update_extremes(state, chunk_c, first_frame, kinds=("max", "min")):
    """Fold a chunk of frames into the running per-pixel maximum and minimum.

    Parameters
    ----------
    state : ExtremesState or None
        State to update in place; None starts a new one from the chunk's shape.
    chunk_c : array_like of shape (F, M, N) or (M, N)
        Surface temperatures [degC]; NaN (and +-inf) are invalid and ignored.
    first_frame : int
        Index, in the whole stack, of the chunk's first frame.
    kinds : tuple of {"max", "min"}
        The extremes to keep (a hot-spot search alone needs only the maximum); the
        other's arrays stay as in a new state (NaN, frame -1). ``n_valid`` is always kept.

    Returns
    -------
    ExtremesState
        The updated state (the same object when one was given).

    Notes
    -----
    Per pixel, max_c = max over valid frames of chunk_c, with max_frame its
    earliest frame index; likewise for the minimum. Vectorised over pixels;
    folding chunks in any split gives the same result as one pass. Float32 chunks
    are compared in float32 (the state keeps float64, which holds them exactly); a
    chunk without invalid samples takes a fast path (per-pixel max/min over the
    frames, then the frame index only where the running extreme changes).
    """
    chunk = np.asarray(chunk_c)
    if chunk.dtype not in (np.float32, np.float64):
        chunk = chunk.astype(float)
    if chunk.ndim == 2:
        chunk = chunk[None]
    if chunk.ndim != 3:
        raise ValueError(f"chunk_c: expected shape (F, M, N) or (M, N), got {chunk.shape}")
    fresh_state = state is None
    if fresh_state:
        state = ExtremesState.empty(chunk.shape[1:], filled=False)
    elif chunk.shape[1:] != state.shape:
        raise ValueError(f"chunk_c: frames of shape {chunk.shape[1:]} do not match the state's "
                         f"{state.shape}; start a new state for a stack of another size")
    if int(first_frame) < 0:
        raise ValueError(f"first_frame: {first_frame} is negative")
    if chunk.shape[0] == 0:
        return state.fill() if fresh_state else state
    want_max, want_min = "max" in kinds, "min" in kinds
    hi = chunk.max(axis=0)          # NaN or inf anywhere shows in hi or lo
    lo = chunk.min(axis=0)
    if np.isfinite(hi).all() and np.isfinite(lo).all():
        # no frame seen yet: every pixel is new (a new state's arrays are written whole below)
        fresh = fresh_state or not state.n_valid.any()
        if want_max:
            _update_one_finite(state.max_c, state.max_frame, chunk, hi, int(first_frame), +1, fresh)
        elif fresh_state:
            state.max_c.fill(np.nan)
            state.max_frame.fill(-1)
        if want_min:
            _update_one_finite(state.min_c, state.min_frame, chunk, lo, int(first_frame), -1, fresh)
        elif fresh_state:
            state.min_c.fill(np.nan)
            state.min_frame.fill(-1)
        if fresh_state:
            state.n_valid.fill(chunk.shape[0])
        else:
            state.n_valid += chunk.shape[0]
        return state
    if fresh_state:
        state.fill()
    finite = np.isfinite(chunk)
    if want_max:
        _update_one(state.max_c, state.max_frame, chunk, finite, int(first_frame), +1)
    if want_min:
        _update_one(state.min_c, state.min_frame, chunk, finite, int(first_frame), -1)
    state.n_valid += finite.sum(axis=0)
    return state


def find_spots(extreme_c, extreme_frame, threshold_c, min_area_px=4, kind="hot", reference_c=None):
    """Hot or cold spots: connected regions of an extreme image beyond a threshold.

    Parameters
    ----------
    extreme_c : ndarray of shape (M, N)
        Per-pixel maximum over frames (``kind="hot"``) or minimum (``"cold"``)
        [degC], e.g. ``ExtremesState.max_c``; NaN never counts.
    extreme_frame : ndarray of shape (M, N), int
        Frame index of each pixel's extreme.
    threshold_c : float or ndarray of shape (M, N)
        Pixels strictly above (hot) or below (cold) it are candidates [degC].
    min_area_px : int, optional
        Smallest kept region [pixels].
    kind : {"hot", "cold"}, optional
    reference_c : float or ndarray of shape (M, N), optional
        Reference temperature for ``delta_k`` [degC] (e.g. ambient air, a
        similar component, or the surrounding surface); an array is read at
        each spot's peak pixel.

    Returns
    -------
    list of dict
        One per region: ``kind``; ``frame`` of its peak; ``row``, ``col`` of the
        peak pixel (first in raster order on ties); ``peak_c`` (the maximum,
        or for cold spots the minimum) [degC]; ``mean_c`` of the extreme image
        over the region [degC]; ``area_px``; ``delta_k`` = peak_c - reference
        [K] or None; ``bbox`` = [r0, c0, r1, c1], half-open. Sorted by
        decreasing ``|delta_k|`` when a reference is given, else hottest
        (hot) or coldest (cold) first.

    Notes
    -----
    Regions are 8-connected components (``connectivity=2``) of the mask
    ``extreme_c > threshold_c`` (hot) or ``<`` (cold), labelled with
    scikit-image [1]. Working on the extreme image lets a stack be streamed:
    a spot that moves slightly between frames stays one region whose peak
    carries the frame where it was reached.

    References
    ----------
    .. [1] S. van der Walt et al., "scikit-image: image processing in Python",
       PeerJ 2, e453, 2014, doi:10.7717/peerj.453
    """
    if kind not in ("hot", "cold"):
        raise ValueError(f"kind={kind!r} is not known; use 'hot' or 'cold'")
    ext = np.asarray(extreme_c, dtype=float)
    frames = np.asarray(extreme_frame)
    if ext.ndim != 2:
        raise ValueError(f"extreme_c: expected an (M, N) image, got shape {ext.shape}; "
                         "reduce the stack with update_extremes first")
    if frames.shape != ext.shape:
        raise ValueError(f"extreme_frame: shape {frames.shape} does not match extreme_c {ext.shape}")
    if int(min_area_px) < 1:
        raise ValueError(f"min_area_px: {min_area_px} must be at least 1")

    def _image(value, name):
        arr = np.asarray(value, dtype=float)
        if arr.ndim not in (0, 2) or (arr.ndim == 2 and arr.shape != ext.shape):
            raise ValueError(f"{name}: expected a scalar or shape {ext.shape}, got shape {arr.shape}")
        return np.broadcast_to(arr, ext.shape)

    thr = _image(threshold_c, "threshold_c")
    ref = None if reference_c is None else _image(reference_c, "reference_c")
    hot = kind == "hot"
    with np.errstate(invalid="ignore"):
        mask = np.isfinite(ext) & np.isfinite(thr) & ((ext > thr) if hot else (ext < thr))
    labels, n = _label(mask, connectivity=2, return_num=True)
    if n == 0:
        return []
    flat = np.flatnonzero(labels)                       # raster order
    lab = labels.ravel()[flat]
    val = ext.ravel()[flat]
    area = np.bincount(lab, minlength=n + 1)
    mean = np.bincount(lab, weights=val, minlength=n + 1)[1:] / np.maximum(area[1:], 1)
    # peak pixel per label: most extreme value, first in raster order on ties
    order = np.lexsort((flat, -val if hot else val, lab))
    first = order[np.r_[True, lab[order][1:] != lab[order][:-1]]]
    peak_flat = np.zeros(n + 1, dtype=np.int64)
    peak_flat[lab[first]] = flat[first]
    keep = np.flatnonzero(area >= int(min_area_px))
    keep = keep[keep > 0]
    if keep.size == 0:
        return []
    boxes = ndimage.find_objects(labels)

    spots = []
    for k in keep:
        r, c = (int(i) for i in np.unravel_index(peak_flat[k], ext.shape))
        peak = float(ext[r, c])
        delta = None
        if ref is not None and math.isfinite(ref[r, c]):
            delta = peak - float(ref[r, c])
        box = boxes[k - 1]
        spots.append(dict(kind=kind, frame=int(frames[r, c]), row=r, col=c, peak_c=peak,
                          mean_c=float(mean[k - 1]), area_px=int(area[k]), delta_k=delta,
                          bbox=[box[0].start, box[1].start, box[0].stop, box[1].stop]))
    if ref is not None:
        spots.sort(key=lambda s: -abs(s["delta_k"]) if s["delta_k"] is not None else math.inf)
    else:
        spots.sort(key=lambda s: -s["peak_c"] if hot else s["peak_c"])
    return spots
