"""Frame times and logged air temperatures: ISO 8601 times, their UTC-offset consistency,
linear interpolation of a log to the frame times, data windows.

Pure functions (no file access); ``irpipe.io`` reads the CSV files. Times are turned into
seconds on one axis: aware times (with a UTC offset) as POSIX seconds, local times (no
offset) as seconds from 1970-01-01 on the local clock. Mixing the two is an error because
the offset between them is unknown.
"""
from __future__ import annotations

import datetime as _dt

import numpy as np

from .errors import InputDataError

_EPOCH = _dt.datetime(1970, 1, 1)


def parse_time(text, where):
    """An ISO 8601 date-time (``2026-01-10T18:00:00``, optional fraction and ``Z`` or
    ``+01:00`` offset) -> datetime. ``where`` names the source in the error message."""
    s = str(text).strip()
    if s.endswith(("Z", "z")):
        s = s[:-1] + "+00:00"
    try:
        t = _dt.datetime.fromisoformat(s)
    except ValueError:
        raise InputDataError(f"{where}: '{text}' is not an ISO 8601 date-time; write e.g. "
                             "2026-01-10T18:00:00 or 2026-01-10T18:00:00+01:00") from None
    if "T" not in s and " " not in s:
        raise InputDataError(f"{where}: '{text}' has no time of day; write e.g. 2026-01-10T18:00:00")
    return t


def is_aware(t):
    return t.tzinfo is not None and t.utcoffset() is not None


def to_seconds(times):
    """Seconds on one axis for datetimes that are all aware or all local."""
    return np.array([t.timestamp() if is_aware(t) else (t - _EPOCH).total_seconds() for t in times], float)


def check_same_kind(a, b, where):
    """Both lists carry a UTC offset, or neither; raise naming ``where`` otherwise."""
    ka = {is_aware(t) for t in a}
    kb = {is_aware(t) for t in b}
    if len(ka | kb) > 1:
        raise InputDataError(f"{where}: frame times and log times mix UTC-offset and local times; give an "
                             "offset (e.g. +01:00) on both or on neither")


def regular_times(start, interval_s, n):
    """n frame times from ``start`` (datetime) every ``interval_s`` seconds."""
    return [start + _dt.timedelta(seconds=float(interval_s) * k) for k in range(n)]


def check_increasing(times, where):
    s = to_seconds(times)
    bad = np.flatnonzero(np.diff(s) <= 0)
    if bad.size:
        k = int(bad[0]) + 1
        raise InputDataError(f"{where}: times must increase strictly; row {k + 1} ({times[k].isoformat()}) "
                             f"is not after row {k} ({times[k - 1].isoformat()})")
    return s


def interpolate_log(log_s, values, frame_s, frame_times, where):
    """Linear interpolation of logged values to the frame times.

    Parameters
    ----------
    log_s : ndarray (L,) increasing log times [s]
    values : ndarray (L,) or (L, K)
    frame_s : ndarray (F,) frame times [s]
    frame_times : list of datetime (for the message)
    where : str, the log file

    Raises
    ------
    InputDataError naming the file and the first frame time outside the log's span.
    """
    out = (frame_s < log_s[0] - 1e-6) | (frame_s > log_s[-1] + 1e-6)
    if out.any():
        k = int(np.flatnonzero(out)[0])
        raise InputDataError(f"{where}: frame {k} at {frame_times[k].isoformat()} is outside the log's span "
                             f"({_iso(log_s[0], frame_times[k])} to {_iso(log_s[-1], frame_times[k])}); "
                             "extend the log or leave the frame out with heat_flow.window")
    v = np.asarray(values, float)
    if v.ndim == 1:
        return np.interp(frame_s, log_s, v)
    return np.stack([np.interp(frame_s, log_s, v[:, j]) for j in range(v.shape[1])], axis=1)


def _iso(s, like):
    if is_aware(like):
        return _dt.datetime.fromtimestamp(s, like.tzinfo).isoformat()
    return (_EPOCH + _dt.timedelta(seconds=float(s))).isoformat()


def window_mask(frame_s, start_s=None, end_s=None):
    """Frames whose time lies in [start, end)."""
    m = np.ones(len(frame_s), bool)
    if start_s is not None:
        m &= frame_s >= start_s - 1e-6
    if end_s is not None:
        m &= frame_s < end_s - 1e-6
    return m


NIGHT_HOURS = (20.0, 6.0)   # local clock; common practice, no source (no sun on the wall)


def night_mask(times, hours=NIGHT_HOURS):
    """Frames taken between ``hours[0]`` and ``hours[1]`` on their own clock."""
    h = np.array([t.hour + t.minute / 60.0 + t.second / 3600.0 for t in times])
    a, b = hours
    return (h >= a) | (h < b) if a > b else (h >= a) & (h < b)
