"""Gap test: time steps longer than expected between records."""

from __future__ import annotations

import numpy as np

from .. import arrays as v
from ..arrays import as_ns, check_non_decreasing
from .flags import MISSING, PASS, SUSPECT

#: dtype of the array returned by :func:`find_gaps`.
GAP_DTYPE = np.dtype(
    [("start", "datetime64[ns]"), ("end", "datetime64[ns]"), ("duration_s", "float64")]
)


def _times(times, func: str) -> np.ndarray:
    t = as_ns(times, func=func)
    check_non_decreasing(t, func=func)
    return t


def gap_flags(times, values=None, *, max_gap_s: float) -> np.ndarray:
    """Gap test: flag the first sample after a time step longer than `max_gap_s`.

    Parameters
    ----------
    times : array_like of datetime64 or int64 nanoseconds, shape (n,)
        Sample times, non-decreasing.
    values : array_like of float, shape (n,), optional
        If given, NaN (or infinite) values are missing: they are flagged 9 and
        gaps are measured between the samples with valid values.
    max_gap_s : float
        Longest time step that is not a gap, in seconds (> 0).

    Returns
    -------
    numpy.ndarray of int8, shape (n,)
        3 at the first (valid) sample after a step ``> max_gap_s`` (a step equal
        to `max_gap_s` is not a gap); 1 elsewhere, including the first sample;
        9 where a given value is missing.

    Notes
    -----
    Gaps are flagged at the sample that ends them; no records are inserted to
    fill a gap. Use :func:`find_gaps` to list the gaps themselves. Definition:
    common practice, no source.
    """
    func = "gap_flags"
    t = _times(times, func)
    gap_ns = v.duration_ns(max_gap_s, func=func, name="max_gap_s")
    if values is None:
        ok = np.ones(t.shape, dtype=bool)
    else:
        x = v.as_values(values, func=func)
        v.same_shape(x, t, func=func, names=("values", "times"))
        ok = np.isfinite(x)
    flags = np.full(t.shape, MISSING, dtype=np.int8)
    tv = t[ok]
    verdict = np.full(tv.shape, PASS, dtype=np.int8)
    if tv.size > 1:
        verdict[1:][np.diff(tv) > gap_ns] = SUSPECT
    flags[ok] = verdict
    return flags


def find_gaps(times, *, max_gap_s: float) -> np.ndarray:
    """List the time steps longer than `max_gap_s`, for reports.

    Parameters
    ----------
    times : array_like of datetime64 or int64 nanoseconds, shape (n,)
        Sample times, non-decreasing.
    max_gap_s : float
        Longest time step that is not a gap, in seconds (> 0).

    Returns
    -------
    numpy.ndarray of :data:`GAP_DTYPE`
        One record per gap, in time order: ``start`` (time of the last sample
        before the gap), ``end`` (time of the first sample after it), both
        datetime64[ns], and ``duration_s = end - start`` in seconds. A step
        equal to `max_gap_s` is not a gap. Empty when there is none.
    """
    func = "find_gaps"
    t = _times(times, func)
    gap_ns = v.duration_ns(max_gap_s, func=func, name="max_gap_s")
    if t.size < 2:
        return np.zeros(0, dtype=GAP_DTYPE)
    step = np.diff(t)
    i = np.flatnonzero(step > gap_ns)
    out = np.zeros(i.size, dtype=GAP_DTYPE)
    out["start"] = t[i].view("datetime64[ns]")
    out["end"] = t[i + 1].view("datetime64[ns]")
    out["duration_s"] = step[i] / 1e9
    return out
