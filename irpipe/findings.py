"""Findings from corrected surface-temperature stacks: envelope and electrical.

Pure functions, no file I/O. Temperatures at this edge carry their unit in the
name (``_c`` degrees Celsius, ``_k`` kelvin difference, ``_pct`` percent), as the
findings are reported in those units.

* Building envelope: temperature factor, ISO 13788 minimum temperature factor,
  surface humidity / dew point checks, survey-condition warnings.
* Hot and cold spots: connected components of a running extreme image (max or
  min over frames), kept in an :class:`ExtremesState` while a stack is streamed.
* Electrical: grading of temperature rises against a severity table (loaded by
  the caller from ``configs/electrical_severity.yaml``), load scaling.
"""
import math
from dataclasses import dataclass
from numbers import Real

import numpy as np
from scipy import ndimage
from skimage.measure import label as _label

from . import humidity
from .constants import ZERO_CELSIUS

__all__ = [
    "CRITICAL_TEMPERATURE_FACTORS",
    "MOULD_SURFACE_RH",
    "MIN_SURVEY_DIFFERENCE_K",
    "MIN_LOAD_FRACTION",
    "temperature_factor",
    "minimum_temperature_factor",
    "envelope_assessment",
    "survey_condition_warnings",
    "ExtremesState",
    "update_extremes",
    "find_spots",
    "SeverityBand",
    "SeverityTable",
    "load_severity_table",
    "grade_electrical",
    "load_scaled_rise",
]

#: Critical temperature factor f_CRsi by building use, UK practice (BRE IP1/06,
#: Ward 2006; conventions in BR 497). Given from memory; the 0.75 for dwellings
#: is corroborated by several practice pages. Verify against IP1/06 before use.
CRITICAL_TEMPERATURE_FACTORS = {
    "storage": 0.30,
    "office": 0.50,
    "retail": 0.50,
    "dwelling": 0.75,
    "residential": 0.75,
    "school": 0.75,
    "sports_hall": 0.80,
    "kitchen": 0.80,
    "unflued_gas_heating": 0.80,
    "swimming_pool": 0.90,
    "laundry": 0.90,
}

#: Surface relative humidity at or above which mould growth is assumed possible
#: [fraction] (ISO 13788:2012 criterion; clause from memory).
MOULD_SURFACE_RH = 0.8

#: Indoor-outdoor air temperature difference below which an envelope survey is
#: normally not carried out [K] (EN 13187:1998 / EN ISO 6781-1:2023 practice;
#: common practice, no clause checked).
MIN_SURVEY_DIFFERENCE_K = 10.0

#: Load below which electrical thermography is normally not relied on [fraction
#: of rated load] (common practice, no source).
MIN_LOAD_FRACTION = 0.4

def _out(x):
    """0-d results as Python scalars, arrays unchanged."""
    x = np.asarray(x)
    return x.item() if x.ndim == 0 else x


# --------------------------------------------------------------------------- envelope

def temperature_factor(surface_c, indoor_c, outdoor_c):
    """Temperature factor at the internal surface, f_Rsi.

    Parameters
    ----------
    surface_c : array_like
        Internal surface temperature theta_si [degC].
    indoor_c : array_like
        Indoor air temperature theta_i [degC].
    outdoor_c : array_like
        Outdoor air temperature theta_e [degC].

    Returns
    -------
    float or ndarray
        f_Rsi [-]; 1 for a surface at indoor temperature, 0 at outdoor
        temperature. NaN where theta_i == theta_e or an input is NaN.

    Notes
    -----
    ::

        f_Rsi = (theta_si - theta_e) / (theta_i - theta_e)

    as defined in ISO 13788 [1] and ISO 10211 [2] (clauses from memory). The
    measured value is only meaningful under steady conditions; see
    :func:`survey_condition_warnings`.

    References
    ----------
    .. [1] ISO 13788:2012, Hygrothermal performance of building components and
       building elements -- Internal surface temperature to avoid critical
       surface humidity and interstitial condensation -- Calculation methods.
    .. [2] ISO 10211:2017, Thermal bridges in building construction -- Heat
       flows and surface temperatures -- Detailed calculations.
    """
    s = np.asarray(surface_c, dtype=float)
    i = np.asarray(indoor_c, dtype=float)
    e = np.asarray(outdoor_c, dtype=float)
    d = i - e
    with np.errstate(divide="ignore", invalid="ignore"):
        f = np.where(d != 0.0, (s - e) / np.where(d != 0.0, d, 1.0), np.nan)  # [1]
    return _out(f)



def _rh_pct_to_fraction(indoor_rh_pct):
    rh = np.asarray(indoor_rh_pct, dtype=float)
    finite = rh[np.isfinite(rh)]
    if finite.size and (finite.min() < 0.0 or finite.max() > 100.0):
        raise ValueError(f"indoor_rh_pct: {finite.max():g} is not in [0, 100] percent")
    if finite.size and 0.0 < finite.max() <= 1.0:
        raise ValueError(
            f"indoor_rh_pct: {finite.max():g} looks like a fraction; this argument is in "
            f"percent -- did you mean {100 * finite.max():g}?")
    return rh / 100.0


def minimum_temperature_factor(indoor_c, indoor_rh_pct, outdoor_c, surface_rh_limit=MOULD_SURFACE_RH,
                               formula="aerk"):
    """Lowest internal surface temperature and temperature factor that keep the
    surface relative humidity below a limit (ISO 13788 procedure).

    Parameters
    ----------
    indoor_c : array_like
        Indoor air temperature theta_i [degC].
    indoor_rh_pct : array_like
        Indoor relative humidity [%].
    outdoor_c : array_like
        Outdoor air temperature theta_e [degC].
    surface_rh_limit : float, optional
        Critical surface relative humidity [fraction]; 0.8 for mould (default),
        1.0 for condensation on low-inertia elements such as glazing [1].
    formula : str, optional
        Saturation formula, see :func:`irpipe.humidity.saturation_vapour_pressure`.

    Returns
    -------
    theta_si_min_c : float or ndarray
        Minimum acceptable surface temperature [degC].
    f_min : float or ndarray
        Minimum temperature factor f_Rsi,min [-].

    Notes
    -----
    ::

        p_i          = phi_i p_sat(theta_i)
        p_sat,min    = p_i / phi_si,crit
        theta_si,min = p_sat^-1(p_sat,min)
        f_Rsi,min    = (theta_si,min - theta_e) / (theta_i - theta_e)

    (procedure of ISO 13788 [1]; clause from memory). Check values: theta_i =
    20 degC, 60 %, theta_e = 0 degC gives theta_si,min = 15.43 degC and
    f_Rsi,min = 0.7717.

    References
    ----------
    .. [1] ISO 13788:2012, Hygrothermal performance of building components and
       building elements -- Internal surface temperature to avoid critical
       surface humidity and interstitial condensation -- Calculation methods.
    .. [2] ISO 10211:2017, Thermal bridges in building construction -- Heat
       flows and surface temperatures -- Detailed calculations.
    """
    if not 0.0 < surface_rh_limit <= 1.0:
        raise ValueError(f"surface_rh_limit: {surface_rh_limit!r} is not in (0, 1]; it is a fraction, "
                         f"e.g. 0.8")
    t_i = np.asarray(indoor_c, dtype=float) + ZERO_CELSIUS
    p_i = humidity.vapour_pressure(t_i, _rh_pct_to_fraction(indoor_rh_pct), formula)
    p_sat_min = p_i / surface_rh_limit                                           # [1]
    theta_si_min_c = humidity.dew_point_from_vapour_pressure(p_sat_min, formula) - ZERO_CELSIUS
    f_min = temperature_factor(theta_si_min_c, indoor_c, outdoor_c)              # [1]
    return _out(theta_si_min_c), f_min



def _critical_factor(critical_factor):
    if isinstance(critical_factor, str):
        try:
            return CRITICAL_TEMPERATURE_FACTORS[critical_factor]
        except KeyError:
            raise ValueError(
                f"critical_factor={critical_factor!r} is not a known building use; use one of "
                f"{sorted(CRITICAL_TEMPERATURE_FACTORS)} or a number in (0, 1)") from None
    value = float(critical_factor)
    if not 0.0 < value < 1.0:
        raise ValueError(f"critical_factor: {critical_factor!r} is not in (0, 1)")
    return value


def envelope_assessment(min_surface_c, indoor_c, outdoor_c, indoor_rh_pct=None, critical_factor=0.75,
                        formula="aerk"):
    """Assess the coldest internal surface temperature of an area of the envelope.

    Parameters
    ----------
    min_surface_c : array_like
        Lowest internal surface temperature of the area (e.g. a thermal bridge)
        [degC]; an array assesses several areas at once.
    indoor_c, outdoor_c : array_like
        Indoor and outdoor air temperatures [degC].
    indoor_rh_pct : array_like, optional
        Indoor relative humidity [%]. Without it the humidity results are None.
    critical_factor : float or str, optional
        Critical temperature factor f_CRsi [-], or a key of
        ``CRITICAL_TEMPERATURE_FACTORS`` (building use). Default 0.75, the UK
        value for dwellings [3] (from memory, corroborated by practice pages).
    formula : str, optional
        Saturation formula, see :func:`irpipe.humidity.saturation_vapour_pressure`.

    Returns
    -------
    dict
        ``temperature_factor`` f_Rsi [-]; ``critical_temperature_factor`` [-];
        ``passes`` (f_Rsi >= f_CRsi); ``surface_relative_humidity_pct`` [%];
        ``mould_risk`` (surface RH >= 80 % [1]); ``condensation_risk`` (surface
        at or below the indoor dew point); ``indoor_dew_point_c`` [degC];
        ``minimum_surface_temperature_c`` [degC] and ``minimum_temperature_factor``
        [-] from :func:`minimum_temperature_factor`. The last five are None when
        ``indoor_rh_pct`` is None. Flags are False where an input is NaN (the
        factor is then NaN, which shows it).

    Notes
    -----
    ::

        f_Rsi  = (theta_si - theta_e) / (theta_i - theta_e)          [1], [2]
        phi_si = phi_i p_sat(theta_i) / p_sat(theta_si)               [1]
        mould risk:        phi_si >= 0.8                              [1]
        condensation risk: theta_si <= theta_d(theta_i, phi_i)

    References
    ----------
    .. [1] ISO 13788:2012, Hygrothermal performance of building components and
       building elements -- Internal surface temperature to avoid critical
       surface humidity and interstitial condensation -- Calculation methods.
    .. [2] ISO 10211:2017, Thermal bridges in building construction -- Heat
       flows and surface temperatures -- Detailed calculations.
    .. [3] T. I. Ward, "Assessing the effects of thermal bridging at junctions
       and around openings", BRE Information Paper IP1/06, BRE Press, 2006.
    """
    f = np.asarray(temperature_factor(min_surface_c, indoor_c, outdoor_c))
    f_crit = _critical_factor(critical_factor)
    result = {
        "temperature_factor": _out(f),
        "critical_temperature_factor": f_crit,
        "passes": _out(f >= f_crit),
        "surface_relative_humidity_pct": None,
        "mould_risk": None,
        "condensation_risk": None,
        "indoor_dew_point_c": None,
        "minimum_surface_temperature_c": None,
        "minimum_temperature_factor": None,
    }
    if indoor_rh_pct is None:
        return result
    rh = _rh_pct_to_fraction(indoor_rh_pct)
    t_s = np.asarray(min_surface_c, dtype=float) + ZERO_CELSIUS
    t_i = np.asarray(indoor_c, dtype=float) + ZERO_CELSIUS
    phi_si = humidity.surface_relative_humidity(t_s, t_i, rh, formula)
    dew_c = humidity.dew_point(t_i, rh, formula) - ZERO_CELSIUS
    theta_min, f_min = minimum_temperature_factor(indoor_c, indoor_rh_pct, outdoor_c, formula=formula)
    result.update(
        surface_relative_humidity_pct=_out(100.0 * phi_si),
        mould_risk=_out(phi_si >= MOULD_SURFACE_RH),
        condensation_risk=_out(t_s - ZERO_CELSIUS <= dew_c),
        indoor_dew_point_c=_out(dew_c),
        minimum_surface_temperature_c=theta_min,
        minimum_temperature_factor=f_min,
    )
    return result



def survey_condition_warnings(indoor_c, outdoor_c, min_difference_k=MIN_SURVEY_DIFFERENCE_K):
    """Warnings about air temperatures unfit for an envelope survey.

    Parameters
    ----------
    indoor_c, outdoor_c : float
        Indoor and outdoor air temperatures during the survey [degC].
    min_difference_k : float, optional
        Minimum indoor-outdoor difference [K]; 10 K by default.

    Returns
    -------
    list of str
        Empty when the difference is sufficient.

    Notes
    -----
    Envelope surveys normally require theta_i - theta_e >= 10 K, during and for
    about 24 h before the survey [1], [2] (common practice; the numeric
    condition is not checked against the standards' clauses). A measurement
    error u on theta_si moves the temperature factor by u / (theta_i - theta_e).
    Sun, wind, rain and the stability of both temperatures must also be checked
    by the surveyor; they are not inputs here.

    References
    ----------
    .. [1] EN 13187:1998, Thermal performance of buildings -- Qualitative
       detection of thermal irregularities in building envelopes -- Infrared
       method (ISO 6781:1983 modified).
    .. [2] EN ISO 6781-1:2023, Performance of buildings -- Detection of heat, air
       and moisture irregularities in buildings by infrared methods -- Part 1:
       General procedures (title from memory).
    """
    i, e = float(indoor_c), float(outdoor_c)
    if not (math.isfinite(i) and math.isfinite(e)):
        return [f"indoor ({i:g} degC) or outdoor ({e:g} degC) air temperature is unknown; "
                "survey conditions and temperature factors cannot be checked"]
    d = i - e
    if d <= 0.0:
        return [f"indoor air ({i:g} degC) is not warmer than outdoor air ({e:g} degC): heat flows "
                "inwards, so cold-surface findings, temperature factors and the mould check do not apply"]
    if d < min_difference_k:
        return [f"indoor-outdoor difference is {d:.1f} K, below the {min_difference_k:g} K that "
                "envelope surveys normally require (EN 13187 / EN ISO 6781-1 practice): thermal "
                "irregularities may not show, and a 1 K error in surface temperature changes the "
                f"temperature factor by {1.0 / d:.2f}"]
    return []


# --------------------------------------------------------------------------- spots

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
    def empty(cls, shape):
        """State before any frame, for images of the given (M, N) shape."""
        shape = tuple(shape)
        return cls(max_c=np.full(shape, np.nan), max_frame=np.full(shape, -1, dtype=np.int64),
                   min_c=np.full(shape, np.nan), min_frame=np.full(shape, -1, dtype=np.int64),
                   n_valid=np.zeros(shape, dtype=np.int64))

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


def _update_one_finite(best, best_frame, chunk, value, first_frame, sign):
    """As _update_one for a chunk without NaN or inf, given ``value``, its per-pixel
    extreme: the earliest frame reaching it is searched only where it beats ``best``."""
    with np.errstate(invalid="ignore"):
        better = (value > best) if sign > 0 else (value < best)
    better |= np.isnan(best)
    where = np.flatnonzero(better)
    if where.size == 0:
        return
    f = chunk.shape[0]
    flat = chunk.reshape(f, -1)
    v = value.reshape(-1)
    if where.size * 8 < v.size:
        # few pixels: gather them and take the first frame equal to the extreme
        sub = np.take(flat, where, axis=1)
        k = (sub == v[where]).argmax(axis=0)
    else:
        # many pixels (first chunks): walk the frames backwards so the earliest wins
        kk = np.zeros(v.shape, np.int16 if f < 32768 else np.int64)
        eq = np.empty(v.shape, bool)
        for j in range(f - 1, -1, -1):
            np.equal(flat[j], v, out=eq)
            np.copyto(kk, j, where=eq)
        k = kk[where]
    best.reshape(-1)[where] = v[where]
    best_frame.reshape(-1)[where] = first_frame + k


def update_extremes(state, chunk_c, first_frame):
    """Fold a chunk of frames into the running per-pixel maximum and minimum.

    Parameters
    ----------
    state : ExtremesState or None
        State to update in place; None starts a new one from the chunk's shape.
    chunk_c : array_like of shape (F, M, N) or (M, N)
        Surface temperatures [degC]; NaN (and +-inf) are invalid and ignored.
    first_frame : int
        Index, in the whole stack, of the chunk's first frame.

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
    if state is None:
        state = ExtremesState.empty(chunk.shape[1:])
    elif chunk.shape[1:] != state.shape:
        raise ValueError(f"chunk_c: frames of shape {chunk.shape[1:]} do not match the state's "
                         f"{state.shape}; start a new state for a stack of another size")
    if int(first_frame) < 0:
        raise ValueError(f"first_frame: {first_frame} is negative")
    if chunk.shape[0] == 0:
        return state
    hi = chunk.max(axis=0)          # NaN or inf anywhere shows in hi or lo
    lo = chunk.min(axis=0)
    if np.isfinite(hi).all() and np.isfinite(lo).all():
        _update_one_finite(state.max_c, state.max_frame, chunk, hi, int(first_frame), +1)
        _update_one_finite(state.min_c, state.min_frame, chunk, lo, int(first_frame), -1)
        state.n_valid += chunk.shape[0]
        return state
    finite = np.isfinite(chunk)
    _update_one(state.max_c, state.max_frame, chunk, finite, int(first_frame), +1)
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


# --------------------------------------------------------------------------- electrical

_CRITERIA = ("rise_over_reference_k", "rise_over_ambient_k")
_BAND_KEYS = ("priority", "label", "action") + _CRITERIA
_TABLE_KEYS = ("source", "note", "bands")


@dataclass(frozen=True)
class SeverityBand:
    """One row of an electrical severity table; ranges are [lower, upper) in K,
    upper None for unbounded, the whole criterion None when the row has none."""

    priority: int
    label: str
    action: str
    rise_over_reference_k: tuple | None
    rise_over_ambient_k: tuple | None


@dataclass(frozen=True)
class SeverityTable:
    """A validated severity table (see :func:`load_severity_table`)."""

    source: str
    note: str
    bands: tuple


def _range(value, where):
    if value is None:
        return None
    if not isinstance(value, (list, tuple)) or len(value) != 2:
        raise ValueError(f"{where}: expected [lower, upper] in kelvin (upper null for no limit) or "
                         f"null, got {value!r}")
    lo, hi = value
    if isinstance(lo, bool) or not isinstance(lo, Real) or not math.isfinite(lo) or lo < 0:
        raise ValueError(f"{where}: lower limit {lo!r} must be a finite number >= 0")
    if hi is not None and (isinstance(hi, bool) or not isinstance(hi, Real) or not hi > lo):
        raise ValueError(f"{where}: upper limit {hi!r} must be null or a number > lower limit {lo!r}")
    return (float(lo), None if hi is None else float(hi))


def load_severity_table(mapping):
    """Validate a parsed electrical severity table.

    Parameters
    ----------
    mapping : dict
        The parsed YAML (``configs/electrical_severity.yaml``): keys ``source``,
        ``note`` (non-empty strings) and ``bands``, a list of rows with
        ``priority`` (int >= 1, 1 most severe), ``label``, ``action`` (strings),
        ``rise_over_reference_k`` and ``rise_over_ambient_k`` (each
        ``[lower, upper]`` in K, read as the half-open range [lower, upper),
        ``upper: null`` for no limit, or ``null`` when the row has no such band).

    Returns
    -------
    SeverityTable

    Raises
    ------
    ValueError
        Naming the dotted key, what was expected and what was given. Besides
        types, per criterion the ranges must be contiguous (no gaps, no
        overlaps), the highest must be unbounded, and priority must become more
        severe (smaller) as the rise grows.

    Notes
    -----
    Ranges are upper-exclusive, so a printed integer band "4-15" is written
    [4, 16): a reading is graded by its whole-kelvin part (15.9 K is in the
    4-15 band, 16.0 K is above it).
    """
    if not isinstance(mapping, dict):
        raise ValueError(f"severity table: expected a mapping with keys {list(_TABLE_KEYS)}, "
                         f"got {type(mapping).__name__}")
    unknown = sorted(set(mapping) - set(_TABLE_KEYS))
    if unknown:
        raise ValueError(f"severity table: unknown key(s) {unknown}; valid keys are {list(_TABLE_KEYS)}")
    for key in ("source", "note"):
        if not isinstance(mapping.get(key), str) or not mapping[key].strip():
            raise ValueError(f"severity table, {key}: a non-empty text is required "
                             f"(got {mapping.get(key)!r})")
    rows = mapping.get("bands")
    if not isinstance(rows, list) or not rows:
        raise ValueError(f"severity table, bands: expected a non-empty list of rows, got {rows!r}")

    bands, seen = [], set()
    for n, row in enumerate(rows):
        where = f"bands[{n}]"
        if not isinstance(row, dict):
            raise ValueError(f"{where}: expected a mapping with keys {list(_BAND_KEYS)}, got {row!r}")
        unknown = sorted(set(row) - set(_BAND_KEYS))
        missing = [k for k in _BAND_KEYS if k not in row]
        if unknown or missing:
            raise ValueError(f"{where}: unknown key(s) {unknown}, missing key(s) {missing}; "
                             f"a row has exactly {list(_BAND_KEYS)}")
        p = row["priority"]
        if isinstance(p, bool) or not isinstance(p, int) or p < 1:
            raise ValueError(f"{where}.priority: {p!r} is not an integer >= 1")
        if p in seen:
            raise ValueError(f"{where}.priority: {p} appears twice; priorities must be unique")
        seen.add(p)
        for key in ("label", "action"):
            if not isinstance(row[key], str) or not row[key].strip():
                raise ValueError(f"{where}.{key}: a non-empty text is required (got {row[key]!r})")
        ranges = {c: _range(row[c], f"{where}.{c}") for c in _CRITERIA}
        if all(r is None for r in ranges.values()):
            raise ValueError(f"{where}: needs at least one of {list(_CRITERIA)}")
        bands.append(SeverityBand(priority=p, label=row["label"].strip(), action=row["action"].strip(),
                                  **ranges))

    for crit in _CRITERIA:
        chain = sorted((b for b in bands if getattr(b, crit) is not None),
                       key=lambda b: getattr(b, crit)[0])
        if not chain:
            continue
        for a, b in zip(chain, chain[1:]):
            (lo_a, hi_a), (lo_b, _) = getattr(a, crit), getattr(b, crit)
            if hi_a is None or hi_a != lo_b:
                raise ValueError(
                    f"severity table, {crit}: the range [{lo_a:g}, {hi_a}) of priority {a.priority} "
                    f"does not end where priority {b.priority}'s starts ({lo_b:g}); ranges are "
                    f"[lower, upper) in kelvin and must be contiguous -- a printed band '4-15' is "
                    f"written [4, 16]")
            if b.priority >= a.priority:
                raise ValueError(
                    f"severity table, {crit}: priority {b.priority} covers larger rises than "
                    f"priority {a.priority}; priority 1 must be the most severe (largest rises)")
        if getattr(chain[-1], crit)[1] is not None:
            raise ValueError(f"severity table, {crit}: the highest range (priority "
                             f"{chain[-1].priority}) must have upper null, so that no large rise "
                             f"goes ungraded")
    return SeverityTable(source=mapping["source"].strip(), note=mapping["note"].strip(),
                         bands=tuple(sorted(bands, key=lambda b: b.priority)))


def _as_rise(value, name):
    if value is None:
        return None
    if np.ndim(value) != 0:
        raise ValueError(f"{name}: grade one component at a time (a scalar), got shape {np.shape(value)}")
    v = float(value)
    return v if math.isfinite(v) else None


def grade_electrical(rise_over_reference_k, rise_over_ambient_k, table):
    """Severity of an electrical hot spot from its temperature rises.

    Parameters
    ----------
    rise_over_reference_k : float or None
        Rise over a similar component under similar load [K]; None or NaN if
        there is no such reference.
    rise_over_ambient_k : float or None
        Rise over ambient air [K]; None or NaN if unknown.
    table : SeverityTable or dict
        From :func:`load_severity_table` (a dict is validated here).

    Returns
    -------
    dict or None
        ``priority``, ``label``, ``action`` of the most severe row either rise
        falls in, ``governing_criterion`` (``"rise_over_reference_k"``,
        ``"rise_over_ambient_k"`` or ``"both"``) and the two rises. None when
        neither rise reaches a band (e.g. below 1 K, or negative).

    Notes
    -----
    A rise r is in a row's range when lower <= r < upper. The result is the
    row with the smallest priority number over both criteria. Rises measured
    at partial load should first be scaled with :func:`load_scaled_rise`.
    The default table's bands are those commonly reproduced from [1] (from
    memory; verify against the current edition); prefer equipment maximum
    temperatures from manufacturers or product standards where they exist.

    References
    ----------
    .. [1] InterNational Electrical Testing Association, ANSI/NETA MTS,
       Standard for Maintenance Testing Specifications for Electrical Power
       Equipment and Systems, Table 100.18 (edition not checked).
    .. [2] ISO 18434-1:2008, Condition monitoring and diagnostics of machines --
       Thermography -- Part 1: General procedures.
    """
    if not isinstance(table, SeverityTable):
        table = load_severity_table(table)
    rises = {"rise_over_reference_k": _as_rise(rise_over_reference_k, "rise_over_reference_k"),
             "rise_over_ambient_k": _as_rise(rise_over_ambient_k, "rise_over_ambient_k")}
    hits = {}
    for crit, r in rises.items():
        if r is None:
            continue
        for band in table.bands:
            rng = getattr(band, crit)
            if rng is not None and rng[0] <= r and (rng[1] is None or r < rng[1]):
                hits[crit] = band
                break
    if not hits:
        return None
    best = min(hits.values(), key=lambda b: b.priority)
    governing = [c for c, b in hits.items() if b.priority == best.priority]
    return dict(priority=best.priority, label=best.label, action=best.action,
                governing_criterion=governing[0] if len(governing) == 1 else "both", **rises)


def load_scaled_rise(rise_k, load_fraction, exponent=2.0):
    """Scale a temperature rise measured at partial load to rated load.

    Parameters
    ----------
    rise_k : array_like
        Measured rise [K].
    load_fraction : array_like
        Measured current over rated current, I_meas / I_rated [fraction], > 0.
    exponent : float, optional
        Exponent n; about 1.6-2 in practice (common practice, no source);
        2 for purely resistive (I^2 R) heating.

    Returns
    -------
    scaled_rise_k : float or ndarray
        Estimated rise at rated load [K].
    warnings : list of str
        A warning when any load is below 40 % of rated (scaling is then
        unreliable; common practice, no source) or above rated.

    Notes
    -----
    ::

        dT_rated = dT_meas (I_rated / I_meas)^n

    Joule heating P = I^2 R with a rise proportional to P gives n = 2;
    convection and radiation losses that grow faster than linearly with the
    rise lower the effective n (from memory).

    References
    ----------
    .. [1] ISO 18434-1:2008, Condition monitoring and diagnostics of machines --
       Thermography -- Part 1: General procedures (load to be reported;
       clause from memory).
    """
    load = np.asarray(load_fraction, dtype=float)
    if not np.all(np.isfinite(load) & (load > 0.0)):
        raise ValueError(f"load_fraction: every value must be a finite fraction > 0 of rated load, got "
                         f"{load_fraction!r}")
    if not (math.isfinite(exponent) and exponent > 0.0):
        raise ValueError(f"exponent: {exponent!r} must be a positive number (about 1.6-2)")
    scaled = np.asarray(rise_k, dtype=float) * (1.0 / load) ** exponent
    warnings = []
    if load.min() < MIN_LOAD_FRACTION:
        warnings.append(
            f"load is {100 * load.min():.0f} % of rated, below {100 * MIN_LOAD_FRACTION:.0f} %: the "
            f"rise scaled to rated load (x{(1 / load.min()) ** exponent:.1f}) is unreliable; "
            "re-survey at higher load if possible and report the load")
    if load.max() > 1.0:
        warnings.append(f"load is {100 * load.max():.0f} % of rated, above rated load; the scaled "
                        "rise is lower than the measured one")
    return _out(scaled), warnings
