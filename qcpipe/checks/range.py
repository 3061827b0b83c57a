"""Gross range and climatology checks: fixed limits on each value."""

from __future__ import annotations

import numbers
from collections.abc import Iterable, Sequence

import numpy as np

from .. import arrays as v
from ..arrays import as_ns
from .windows import blocks
from .flags import MISSING, NOT_EVALUATED, PASS, SUSPECT


def gross_range_flags(
    values,
    *,
    sensor_min: float,
    sensor_max: float,
    expected_min: float | None = None,
    expected_max: float | None = None,
) -> np.ndarray:
    """Gross range test: flag values outside the sensor's or the expected limits.

    Parameters
    ----------
    values : array_like of float
        Values in the unit of the limits; NaN marks missing. Any shape.
    sensor_min, sensor_max : float
        Limits of what the sensor can report (its measurement range), in the unit
        of `values`; ``sensor_min < sensor_max``.
    expected_min, expected_max : float, optional
        Limits of plausible values at the site, in the unit of `values`; each may
        be omitted. Must lie within the sensor limits, and
        ``expected_min <= expected_max`` when both are given.

    Returns
    -------
    numpy.ndarray of int8, same shape as `values`
        4 where ``x < sensor_min`` or ``x > sensor_max``; else 3 where
        ``x < expected_min`` or ``x > expected_max``; else 1; 9 where x is NaN.

    Notes
    -----
    The limits themselves pass (the intervals are closed). Infinite values are
    outside any finite sensor limit and fail. Definition: common practice, no
    source.
    """
    func = "gross_range_flags"
    x = v.as_values(values, func=func)
    lo = v.real_number(sensor_min, func=func, name="sensor_min")
    hi = v.real_number(sensor_max, func=func, name="sensor_max")
    v.ordered(lo, hi, func=func, names=("sensor_min", "sensor_max"), strict=True)
    elo = ehi = None
    if expected_min is not None:
        elo = v.real_number(expected_min, func=func, name="expected_min")
        if elo < lo:
            raise ValueError(
                f"{func}: expected_min = {elo!r} is below sensor_min = {lo!r}; "
                "expected limits must lie within the sensor limits"
            )
    if expected_max is not None:
        ehi = v.real_number(expected_max, func=func, name="expected_max")
        if ehi > hi:
            raise ValueError(
                f"{func}: expected_max = {ehi!r} is above sensor_max = {hi!r}; "
                "expected limits must lie within the sensor limits"
            )
    if elo is not None and ehi is not None:
        v.ordered(elo, ehi, func=func, names=("expected_min", "expected_max"), strict=False)

    # flag = 1 + 2 [outside expected or sensor limits] + [outside sensor limits];
    # NaN is outside nothing and becomes 9 last.
    elo = -np.inf if elo is None else elo
    ehi = np.inf if ehi is None else ehi
    flags = np.empty(x.shape, dtype=np.int8)
    with np.errstate(invalid="ignore"):
        for b in blocks(x.size):
            xb = x[b]
            fail = np.less(xb, lo).view(np.int8)
            fail |= np.greater(xb, hi).view(np.int8)
            f = np.less(xb, elo).view(np.int8)
            f |= np.greater(xb, ehi).view(np.int8)
            f |= fail
            f *= SUSPECT - PASS
            f += fail
            f += PASS
            np.copyto(f, MISSING, where=np.isnan(xb))
            flags[b] = f
    return flags


def _month_table(ranges, func: str):
    """Per-month (1..12) arrays: has a range, low, high."""
    has = np.zeros(13, dtype=bool)
    low = np.full(13, np.nan)
    high = np.full(13, np.nan)
    if isinstance(ranges, (str, bytes)) or not isinstance(ranges, Iterable):
        raise ValueError(
            f"{func}: ranges = {ranges!r}; expected a sequence of (months, low, high)"
        )
    for k, item in enumerate(ranges):
        if isinstance(item, (str, bytes)) or not isinstance(item, Sequence) or len(item) != 3:
            raise ValueError(
                f"{func}: ranges[{k}] = {item!r}; expected (months, low, high)"
            )
        months, lo, hi = item
        lo = v.real_number(lo, func=func, name=f"ranges[{k}] low")
        hi = v.real_number(hi, func=func, name=f"ranges[{k}] high")
        v.ordered(lo, hi, func=func, names=(f"ranges[{k}] low", f"ranges[{k}] high"),
                  strict=False)
        given = months
        months = [] if isinstance(months, (str, bytes)) or not isinstance(months, Iterable) \
            else list(months)
        if not months:
            raise ValueError(
                f"{func}: ranges[{k}] months = {given!r}; expected a non-empty "
                "sequence of month numbers 1..12"
            )
        for m in months:
            if isinstance(m, bool) or not isinstance(m, numbers.Integral) or not 1 <= m <= 12:
                raise ValueError(
                    f"{func}: ranges[{k}] month {m!r}; expected an integer 1..12 "
                    "(1 = January)"
                )
            if has[m]:
                raise ValueError(
                    f"{func}: month {int(m)} appears in more than one of ranges "
                    f"(again in ranges[{k}]); give each month one range"
                )
            has[m], low[m], high[m] = True, lo, hi
    return has, low, high


def climatology_flags(values, times, *, ranges) -> np.ndarray:
    """Climatology test: flag values outside the range expected for their month.

    Parameters
    ----------
    values : array_like of float, shape (n,)
        Values; NaN marks missing.
    times : array_like of datetime64 or int64 nanoseconds, shape (n,)
        Time of each value. The month is taken in the time zone of the
        timestamps (UTC in qcpipe). Need not be sorted.
    ranges : sequence of (months, low, high)
        ``months`` is a non-empty sequence of month numbers (1 = January ..
        12 = December); ``low <= high`` in the unit of `values`. Each month may
        appear in one entry only.

    Returns
    -------
    numpy.ndarray of int8, shape (n,)
        For a sample in a month that has a range: 3 where ``x < low`` or
        ``x > high``, else 1 (the limits pass). 2 in months without a range;
        9 where x is NaN.

    Notes
    -----
    Definition: common practice, no source. A climatology only ever makes a value
    suspect, never failed: unusual is not impossible.
    """
    func = "climatology_flags"
    x = v.as_1d(v.as_values(values, func=func), func=func, name="values")
    t = as_ns(times, func=func)
    v.same_shape(x, t, func=func, names=("values", "times"))
    has, low, high = _month_table(ranges, func)

    flags = np.empty(x.shape, dtype=np.int8)
    with np.errstate(invalid="ignore"):
        for b, month in _months_by_block(t):
            xb = x[b]
            f = np.less(xb, low[month]).view(np.int8)
            f |= np.greater(xb, high[month]).view(np.int8)
            f *= SUSPECT - PASS
            f += PASS
            np.copyto(f, NOT_EVALUATED, where=~has[month])
            np.copyto(f, MISSING, where=np.isnan(xb))
            flags[b] = f
    return flags


def _months_by_block(t_ns: np.ndarray):
    """Yield ``(block, month)`` over :func:`blocks` of `t_ns`: `month` is an int
    (1-12) where the whole block lies in one calendar month, else an int8 array.

    The month starts between the earliest and the latest time are few, so times
    are placed among them in a small table rather than converted field by
    field; a block within one month (nearly every block of a sorted record)
    needs no search at all.
    """
    if t_ns.size == 0:
        return
    first = np.datetime64(int(t_ns.min()), "ns").astype("datetime64[M]")
    last = np.datetime64(int(t_ns.max()), "ns").astype("datetime64[M]")
    starts = np.arange(first, last + 1)
    edges = starts.astype("datetime64[ns]").view(np.int64)
    months = (starts.astype(np.int64) % 12 + 1).astype(np.int8)
    for b in blocks(t_ns.size):
        tb = t_ns[b]
        i, j = np.searchsorted(edges, (tb.min(), tb.max()), side="right") - 1
        yield b, (int(months[i]) if i == j else months[np.searchsorted(edges, tb, side="right") - 1])


def calendar_month(t_ns: np.ndarray) -> np.ndarray:
    """Calendar month (1-12, int8) of each time (int64 ns since 1970, UTC)."""
    out = np.empty(t_ns.shape, dtype=np.int8)
    for b, month in _months_by_block(t_ns):
        out[b] = month
    return out
