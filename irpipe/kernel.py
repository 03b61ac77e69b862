"""The per-pixel work of the radiometric correction as pure functions of raw values.

One kernel serves every way a stack is run (the one-thread loop, the threaded stream,
the dask cluster and the field commands): :func:`build_tables` turns a stack's prepared
models into one frozen :class:`PixelTables`, and :func:`correct` turns a chunk of raw
values into corrected temperatures with it. Nothing here keeps state between calls,
except the optional :class:`Window` cache, which only speeds up the lookup plan and never
changes a value.

Two plans give the same numbers:

* lookup plan: integer raw data of at most 16 bits, no per-pixel gain/offset maps, an
  emissivity that takes a few distinct values (a number or a label image) and constant
  reflected temperature. Every possible raw value is corrected once per distinct
  emissivity (float64) into a table, and each pixel is one gather.
* per-pixel plan: anything else (float maps, NUC maps, per-frame reflected temperature of
  the reflector method): vectorised float32 arithmetic and a no-search inverse table.

Invalid pixels become NaN and are counted by reason code (``irpipe.correction.REASONS``).

References
----------
.. [1] ASTM E1862-14, "Standard Practice for Measuring and Compensating for Reflected
   Temperature Using Infrared Imaging Radiometers", ASTM International (2014).
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .buffers import BufferPool
from .constants import ZERO_CELSIUS
from .correction import INVALID_INPUT, NON_PHYSICAL, OUT_OF_RANGE, REASONS, SATURATED, VALID
from .errors import InputDataError


@dataclass(frozen=True, eq=False)
class PixelTables:
    """Everything the kernel needs for one stack; picklable (numpy arrays and models)."""

    input: str                         # "counts" or "apparent_temperature"
    calibration: dict                  # offset_counts, gain or raw_scale/raw_offset
    model: object                      # irpipe.correction.MeasurementModel
    air_temperature_k: float
    reflected_temperature_k: float | None    # None: reflector method
    saturation: float | None = None
    nuc: tuple | None = None           # (gain, offset) maps (M, N)
    emissivity: np.ndarray | None = None      # (M, N) float32, per-pixel plan
    reflector_mask: np.ndarray | None = None  # flat (M*N,) bool
    reflector_emissivity: float = 0.0
    # lookup plan
    lookup: bool = False
    base: int = 0                      # raw value of table column 0
    lut_c: np.ndarray | None = None    # (labels, values) float32 temperature [C], NaN invalid
    reason_lut: np.ndarray | None = None   # (labels, values) uint8 reason codes
    label_index: np.ndarray | None = None  # (M, N) int32 label of each pixel, None for one label
    emissivity_values: tuple = ()
    # tally groups of the lookup plan (:func:`tally_groups`): pixels of equal label and
    # equal region membership; the kernel counts (group, raw value) pairs
    group_index: np.ndarray | None = None  # (M, N) int32 group of each pixel, None: groups = labels
    group_label: np.ndarray | None = None  # (G,) int32 table row (label) of each group
    groups_split_regions: bool = False     # groups are also split by the stack's regions

    @property
    def n_values(self):
        return self.lut_c.shape[1]

    @property
    def n_groups(self):
        return self.lut_c.shape[0] if self.group_label is None else int(self.group_label.size)

    def group_rows(self, table):
        """Rows of a (labels, values) table in tally-group order: (groups, values)."""
        return table if self.group_label is None else table[self.group_label]

    @property
    def plan(self):
        return "lookup" if self.lookup else "per-pixel"

    def index_of(self, raw):
        """Flat table index (label * n_values + raw - base) of every pixel, as numpy's index
        type (intp), which ``take`` uses without a converted copy."""
        if self.label_index is None:
            return np.subtract(raw, np.intp(self.base), dtype=np.intp)
        offsets = self.label_index.astype(np.intp) * np.intp(self.n_values) - np.intp(self.base)
        return np.add(raw, offsets, dtype=np.intp)


def linearise(raw, tables: PixelTables):
    """Offset-free signal (camera units, float64) and reason codes (uint8) of raw values.

    Counts: signal = (raw [* NUC gain + NUC offset] - offset_counts) / gain. The camera's
    apparent-temperature export: temperature = raw * raw_scale + raw_offset, turned back
    into signal through the blackbody signal table."""
    cal = tables.calibration
    model = tables.model
    reason = np.zeros(np.shape(raw), np.uint8)
    if tables.saturation is not None:
        reason[raw >= tables.saturation] = SATURATED
    if tables.input == "apparent_temperature":
        with np.errstate(invalid="ignore"):
            t_app = np.asarray(raw).astype(np.float64) * cal["raw_scale"] + cal["raw_offset"]
        bad_in = ~np.isfinite(t_app)
        t_min, t_max = model.t_range
        oor = ~bad_in & ((t_app < t_min) | (t_app > t_max))
        s = model.signal_table.forward_fast(np.where(oor | bad_in, 300.0, t_app))
    else:
        x = np.asarray(raw).astype(np.float64)
        if tables.nuc is not None:
            x = x * tables.nuc[0] + tables.nuc[1]
        bad_in = ~np.isfinite(x)
        s = (x - cal["offset_counts"]) / cal.get("gain", 1.0)
        with np.errstate(invalid="ignore"):
            oor = ~bad_in & ((s < model.signal_table.s_min) | (s > model.signal_table.s_max))
    reason[(reason == VALID) & bad_in] = INVALID_INPUT
    reason[(reason == VALID) & oor] = OUT_OF_RANGE
    return s, reason


def lookup_plan_possible(dtype, nuc, emissivity_field, reflected_temperature_k) -> bool:
    """Whether the lookup plan applies (see the module docstring)."""
    dtype = np.dtype(dtype)
    small_int = np.issubdtype(dtype, np.integer) and dtype.itemsize <= 2
    return small_int and nuc is None and emissivity_field.distinct() is not None and \
        reflected_temperature_k is not None


def build_tables(*, input, calibration, model, air_temperature_k, reflected_temperature_k, dtype,
                 emissivity_field, shape, saturation=None, nuc=None, reflector_mask=None,
                 reflector_emissivity=0.0, per_pixel=False, regions=()) -> PixelTables:
    """The frozen tables of one stack.

    Parameters
    ----------
    input : {"counts", "apparent_temperature"}
    calibration : dict
        Resolved calibration (``offset_counts``, ``gain``; or ``raw_scale``, ``raw_offset``).
    model : irpipe.correction.MeasurementModel
    air_temperature_k, reflected_temperature_k : float [K]
        ``reflected_temperature_k`` None selects the reflector method ([1]_).
    dtype : numpy dtype of the raw stack
    emissivity_field : irpipe.emissivity.EmissivityField
    shape : (M, N)
    saturation : float, optional
        Raw value at or above which a pixel is saturated (default: the integer dtype's maximum).
    nuc : (gain, offset) maps, optional
    reflector_mask : flat bool array, optional
    reflector_emissivity : float
    per_pixel : bool
        Use the per-pixel plan even where the lookup plan applies (aligned stacks, whose
        signal arrives resampled by the align stage).
    regions : sequence of (M, N) bool masks
        Lookup plan: also split the tally groups by membership of these regions, so that
        the (group, raw value) counts give every region's exact histogram (unless that
        needs more than ``MAX_TALLY_ENTRIES`` counters; then groups are the labels).
    """
    dtype = np.dtype(dtype)
    if saturation is None and np.issubdtype(dtype, np.integer):
        saturation = np.iinfo(dtype).max
    common = dict(input=input, calibration=dict(calibration), model=model,
                  air_temperature_k=float(air_temperature_k),
                  reflected_temperature_k=None if reflected_temperature_k is None else float(reflected_temperature_k),
                  saturation=saturation, nuc=nuc, reflector_mask=reflector_mask,
                  reflector_emissivity=float(reflector_emissivity or 0.0))
    if per_pixel or not lookup_plan_possible(dtype, nuc, emissivity_field, reflected_temperature_k):
        return PixelTables(emissivity=emissivity_field.as_array(shape), **common)
    probe = PixelTables(**common)
    info = np.iinfo(dtype)
    values = np.arange(info.min, info.max + 1, dtype=np.int64)
    s, reason = linearise(values, probe)
    eps_values = [emissivity_field.value] if emissivity_field.value is not None else list(emissivity_field.values)
    lut = np.empty((len(eps_values), values.size), np.float32)
    reason_lut = np.empty((len(eps_values), values.size), np.uint8)
    for k, e in enumerate(eps_values):
        t = model.object_temperature(s, e, reflected_temperature_k, air_temperature_k)
        r = reason.copy()
        r[(r == VALID) & ~np.isfinite(t)] = NON_PHYSICAL
        lut[k] = np.where(r == VALID, t - ZERO_CELSIUS, np.nan)
        reason_lut[k] = r
    label_index = None if emissivity_field.value is not None else emissivity_field.index.astype(np.int32)
    groups = tally_groups(label_index, regions, tuple(shape), len(eps_values), values.size)
    return PixelTables(lookup=True, base=int(info.min), lut_c=lut, reason_lut=reason_lut, label_index=label_index,
                       emissivity_values=tuple(float(e) for e in eps_values), **groups, **common)


#: most (group, raw value) counters of a stack's tally (int64 each: 32 MB)
MAX_TALLY_ENTRIES = 1 << 22


def n_groups_ok(n_groups, n_values):
    """Whether a tally of ``n_groups`` x ``n_values`` counters fits ``MAX_TALLY_ENTRIES``."""
    return int(n_groups) * int(n_values) <= MAX_TALLY_ENTRIES


def tally_groups(label_index, regions, shape, n_labels, n_values):
    """Tally groups of the lookup plan: pixels of equal label and equal membership of
    every region (a pure function of the label image and the region masks).

    Within a group every pixel maps raw values through the same table row, and every
    region is a union of whole groups; so the counts of (group, raw value) pairs over a
    stack give, folded through the table, the exact histogram of every region's
    temperatures and of the whole image (``irpipe.regions.counted_statistics``).

    Returns
    -------
    dict
        ``group_index`` ((M, N) int32, or None when the groups are the labels),
        ``group_label`` ((G,) int32, or None) and ``groups_split_regions`` (bool).
        Groups are the labels alone when there are no regions or when splitting needs
        more than ``MAX_TALLY_ENTRIES`` counters.
    """
    labels_only = {"group_index": None, "group_label": None, "groups_split_regions": False}
    masks = [np.asarray(m, bool) for m in regions]
    if not masks or any(m.shape != tuple(shape) for m in masks):
        return labels_only
    lb = max(1, int(n_labels - 1).bit_length())            # bits of the label in the key
    if len(masks) + lb <= 20:
        # dense: a flag per possible key (at most 1 M), groups numbered in key order
        # (int32 throughout: keys below 2^20)
        key = np.zeros(shape, np.int32) if label_index is None else label_index.astype(np.int32)
        for k, m in enumerate(masks):
            key |= m.view(np.uint8).astype(np.int32) << np.int32(k + lb)
        flag = np.zeros(int(key.max()) + 1, np.int32)
        flag[key.ravel()] = 1
        keys = np.flatnonzero(flag)
        inverse = (np.cumsum(flag, dtype=np.int32) - np.int32(1))[key.ravel()]
        lab_of_group = keys & ((1 << lb) - 1)
        if n_groups_ok(lab_of_group.size, n_values):
            return {"group_index": inverse.reshape(shape), "group_label": lab_of_group.astype(np.int32),
                    "groups_split_regions": True}
        return labels_only
    key = np.zeros(shape, np.int64) if label_index is None else label_index.astype(np.int64)
    if len(masks) + lb <= 62:
        for k, m in enumerate(masks):
            key |= m.astype(np.int64) << np.int64(k + lb)
        _, first, inverse = np.unique(key.ravel(), return_index=True, return_inverse=True)
        lab_of_group = key.ravel()[first] & ((1 << lb) - 1)
    else:
        rows = np.concatenate([key.reshape(-1, 1).view(np.uint8),
                               np.packbits(np.stack([m.ravel() for m in masks], 1), axis=1)], 1)
        _, first, inverse = np.unique(rows, axis=0, return_index=True, return_inverse=True)
        lab_of_group = key.ravel()[first]
    if not n_groups_ok(lab_of_group.size, n_values):
        return labels_only
    return {"group_index": inverse.reshape(shape).astype(np.int32), "group_label": lab_of_group.astype(np.int32),
            "groups_split_regions": True}


@dataclass
class Window:
    """Cache of the lookup tables restricted to a window of raw values around the chunks
    seen so far (a speed-up only: the gather gives identical values from it)."""

    bounds: tuple | None = None        # (w0, w1, first column, span)
    lut: np.ndarray | None = None
    bad: np.ndarray | None = None
    bad_any: bool = False
    offsets: object = None
    #: output buffers of the chunks, reused once no stage holds them (``irpipe.buffers``)
    pool: BufferPool = field(default_factory=BufferPool)

    def fit(self, tables: PixelTables, lo: int, hi: int):
        if self.bounds is not None and lo >= self.bounds[0] and hi <= self.bounds[1]:
            return self.bounds
        info_lo, info_hi = tables.base, tables.base + tables.n_values - 1
        w0, w1 = max(info_lo, lo - 1024), min(info_hi, hi + 1024)
        span = w1 - w0 + 1
        a, b = w0 - tables.base, w1 - tables.base + 1
        # rows in tally-group order: one gather gives the temperature and the group's counter
        self.lut = np.ascontiguousarray(tables.group_rows(tables.lut_c[:, a:b])).ravel()
        self.bad = tables.group_rows(tables.reason_lut[:, a:b]) != VALID
        self.bad_any = bool(self.bad.any())
        index = tables.label_index if tables.group_index is None else tables.group_index
        if index is None:
            self.offsets = np.intp(-w0)
        else:
            self.offsets = index.astype(np.intp) * np.intp(span) - np.intp(w0)
        self.bounds = (w0, w1, a, span)
        return self.bounds


@dataclass
class KernelResult:
    """What :func:`correct` returns for a chunk of frames."""

    temperature_c: np.ndarray                  # (F, M, N) float32 [C], NaN invalid
    invalid_counts: dict                       # reason code -> count (all codes present)
    signal: np.ndarray | None = None           # per-pixel plan, when asked for
    lookup_index: np.ndarray | None = None     # lookup plan, when asked for
    reflected_temperature_k: np.ndarray | None = None   # (F,) reflector method
    #: lookup plan: (first column, (groups, span) counts) of the (tally group, raw value)
    #: pairs of the chunk, when counted (always with ``count=True``)
    value_counts: tuple | None = None


def correct(raw, tables: PixelTables, *, want_signal=False, want_index=False, count=False,
            window: Window | None = None, where="stack") -> KernelResult:
    """Corrected surface temperature of a chunk of raw frames.

    Parameters
    ----------
    raw : ndarray of shape (F, M, N)
        Raw values as read (bad pixels already filled).
    tables : PixelTables
    want_signal : bool
        Per-pixel plan: also return the offset-free signal (for the uncertainty stage).
    want_index : bool
        Lookup plan: also return the flat table index of every pixel.
    count : bool
        Lookup plan: also return the (tally group, raw value) counts of the chunk. Without it
        they are counted only when the chunk has invalid pixels (to count those by reason).
    window : Window, optional
        Cache for the lookup plan (pass the same one for the chunks of one stack).
    where : str
        Name of the stack, for messages.
    """
    if tables.lookup:
        return _correct_lookup(raw, tables, want_index, count, window or Window())
    return _correct_per_pixel(raw, tables, want_signal, where)


def _counts_by_reason(codes_of_values, counts):
    codes = np.bincount(codes_of_values.ravel(), weights=counts.ravel(), minlength=max(REASONS) + 1)
    return {c: int(round(codes[c])) for c in REASONS}


def _correct_lookup(raw, t: PixelTables, want_index, count, window):
    nl = t.n_groups
    if want_index:
        # the temperatures and counts as without it, plus the flat (label, raw) index of
        # every pixel for the uncertainty stage's tables
        res = _correct_lookup(raw, t, False, count, window)
        res.lookup_index = t.index_of(raw)
        return res
    lo, hi = int(raw.min()), int(raw.max())
    _, _, a, span = window.fit(t, lo, hi)
    out = window.pool.empty(raw.shape, np.float32)       # every element is written below
    hist = _sweep(raw, window, nl * span, out, count)
    if hist is None and window.bad_any and np.isnan(out).any():
        # every invalid table entry is NaN: only a chunk with NaN needs counting by reason
        hist = _sweep(raw, window, nl * span, None, True)
    if hist is None:
        return KernelResult(out, {c: 0 for c in REASONS})
    h = hist.reshape(nl, span)
    return KernelResult(out, _counts_by_reason(t.group_rows(t.reason_lut[:, a:a + span]), h), value_counts=(a, h))


def _sweep(raw, window, bins, out, tally):
    """The lookup plan's block loop: gather the temperatures into ``out`` (unless None)
    and count the (group, raw value) pairs into ``bins`` counters (when ``tally``)."""
    # about one frame per call, so the index block stays in cache between the gather and
    # the count; more when the counters are many (each call's bincount fills and adds all
    # of them: with 64 groups over a wide raw span that would cost more than the pixels)
    elems = max(1 << 18, min(2 * bins, 1 << 22)) if tally else 1 << 18
    step = max(1, min(raw.shape[0], elems // max(1, raw[0].size)))
    idx = np.empty((step,) + raw.shape[1:], np.intp)
    hist = np.zeros(bins, np.int64) if tally else None
    for k in range(0, raw.shape[0], step):
        m = min(step, raw.shape[0] - k)
        np.add(raw[k:k + m], window.offsets, out=idx[:m])
        if out is not None:
            np.take(window.lut, idx[:m], out=out[k:k + m], mode="clip")
        if tally:
            hist += np.bincount(idx[:m].reshape(-1), minlength=bins)
    return hist


def count_values(raw, tables: PixelTables, window: Window | None = None):
    """The (tally group, raw value) counts of a chunk of raw frames, without correcting it
    (lookup plan; the cluster's workers send these with the temperatures).

    Returns
    -------
    (int, ndarray of shape (groups, span))
        First table column of the counts, and the counts.
    """
    if not tables.lookup:
        raise ValueError("count_values needs the lookup plan")
    window = window or Window()
    _, _, a, span = window.fit(tables, int(raw.min()), int(raw.max()))
    return a, _sweep(raw, window, tables.n_groups * span, None, True).reshape(tables.n_groups, span)


def _correct_per_pixel(raw, t: PixelTables, want_signal, where):
    s, reason = linearise(raw, t)
    return correct_signal(s, reason, t, want_signal=want_signal, where=where)


def correct_signal(s, reason, t: PixelTables, *, want_signal=False, where="stack") -> KernelResult:
    """The per-pixel plan from an already linearised signal and its reason codes (the
    align stage's resampled signal); ``correct`` = ``linearise`` + this.
    Reason codes beyond ``REASONS`` (alignment) stay invalid and are not counted here."""
    refl_series = None
    if t.reflected_temperature_k is None:
        refl_series = reflector_temperature(s, reason, t, where)
        refl = refl_series.reshape(-1, 1, 1)
    else:
        refl = t.reflected_temperature_k
    with np.errstate(invalid="ignore", divide="ignore"):
        temp = t.model.object_temperature(s.astype(np.float32), t.emissivity, refl, t.air_temperature_k,
                                          dtype=np.float32)
    reason[(reason == VALID) & ~np.isfinite(temp)] = NON_PHYSICAL
    temp -= np.float32(ZERO_CELSIUS)
    temp[reason != VALID] = np.nan
    counts = np.bincount(reason.ravel(), minlength=max(REASONS) + 1)
    return KernelResult(temp, {c: int(counts[c]) for c in REASONS}, signal=s if want_signal else None,
                        reflected_temperature_k=refl_series)


def reflector_temperature(signal, reason, tables: PixelTables, where="stack"):
    """Per-frame reflected temperature [K] from a diffuse-reflector region ([1]_).

    The reflector (emissivity ~0) returns the irradiance it receives: its signal, after
    removing the path emission, equals G(T_refl). Averaging is done in signal units,
    because reflected radiance, not temperature, is what adds up.

    With a reflector emissivity eps_r > 0 the reflector's own emission is removed:
    G(T_refl) = [S - path - eps_r G(T_r)] / (1 - eps_r), taking the reflector at the air
    temperature T_r = T_air (an assumption: a thin foil follows the air and its backing;
    an error of 5 K in T_r moves T_refl by about eps_r * 5 K).

    Parameters
    ----------
    signal, reason : ndarray of shape (F, M, N)
        From :func:`linearise`.
    tables : PixelTables
        With ``reflector_mask``.
    where : str
        The stack's name, for the message when a frame has no valid reflector pixel.

    Returns
    -------
    ndarray of shape (F,) [K]
    """
    m = tables.reflector_mask
    model = tables.model
    f = signal.shape[0]
    vals = signal.reshape(f, -1)[:, m]
    ok = reason.reshape(f, -1)[:, m] == VALID
    with np.errstate(invalid="ignore"):
        mean_s = np.where(ok, vals, 0).sum(1) / np.maximum(ok.sum(1), 1)
    _, path = model.background(1.0, 300.0, tables.air_temperature_k)
    g = mean_s - path
    eps_r = tables.reflector_emissivity
    if eps_r > 0:
        g = (g - eps_r * float(model.path_signal(tables.air_temperature_k))) / (1.0 - eps_r)
    tr = model.path_table.inverse(g)
    tr = np.where(ok.sum(1) > 0, tr, np.nan)
    if np.any(~np.isfinite(tr)):
        bad = int(np.flatnonzero(~np.isfinite(tr))[0])
        raise InputDataError(f"stack '{where}' frame {bad}: the reflector region has no valid "
                             "pixels or a non-physical signal; check its position and the camera settings")
    return tr
