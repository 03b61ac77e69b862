"""Electrical findings: grading of temperature rises against a severity table
(loaded by the caller from ``configs/electrical_severity.yaml``), load scaling.

Pure functions, no file I/O. Rises carry their unit in the name (``_k`` kelvin).
"""
import math
from dataclasses import dataclass
from numbers import Real

import numpy as np

from ._common import _out

__all__ = [
    "MIN_LOAD_FRACTION",
    "SeverityBand",
    "SeverityTable",
    "load_severity_table",
    "grade_electrical",
    "load_scaled_rise",
]

#: Load below which electrical thermography is normally not relied on [fraction
#: of rated load] (common practice, no source).
MIN_LOAD_FRACTION = 0.4


_CRITERIA = ("rise_over_reference_k", "rise_over_ambient_k")
_BAND_KEYS = ("priority", "label", "action") + _CRITERIA
_TABLE_KEYS = ("source", "note", "bands")


@dataclass(frozen=True)
class SeverityBand:
    """One row of an electrical severity table; ranges are (lower, upper] in K (the
    lowest range of a criterion also holds its lower limit), upper None for
    unbounded, the whole criterion None when the row has none."""

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
        ``[lower, upper]`` in K, read as lower < rise <= upper (the lowest range
        of a criterion also holds its lower limit), ``upper: null`` for no
        limit, or ``null`` when the row has no such band).

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
    The printed integer bands "1-3 / 4-15 / >15" are written [1, 3], [3, 15],
    [15, null]: a reading equal to a printed upper limit belongs to the band
    that prints it (3.0 K is in the 1-3 band, 15.0 K in the 4-15 band), and a
    reading between two printed bands goes to the more severe one (3.5 K is in
    the 4-15 band, 15.5 K in the >15 band).
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
                    f"severity table, {crit}: the range [{lo_a:g}, {hi_a}] of priority {a.priority} "
                    f"does not end where priority {b.priority}'s starts ({lo_b:g}); ranges are "
                    f"[lower, upper] in kelvin and must be contiguous -- printed bands "
                    f"'1-3 / 4-15 / >15' are written [1, 3], [3, 15], [15, null]")
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
    A rise r is in a row's range when lower < r <= upper, or lower <= r for the
    lowest range of a criterion: a reading equal to a printed band limit
    belongs to the band that prints it, and a reading between two printed
    integer bands goes to the more severe one. The result is the row with the
    smallest priority number over both criteria. Rises measured
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
        ranges = [getattr(band, crit) for band in table.bands]
        lowest = min(rng[0] for rng in ranges if rng is not None)
        for band, rng in zip(table.bands, ranges):
            if rng is None:
                continue
            above_lower = r > rng[0] or (rng[0] == lowest and r == lowest)
            if above_lower and (rng[1] is None or r <= rng[1]):
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
