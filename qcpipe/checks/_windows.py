"""Time-window helpers for the checks (internal).

Every helper is O(n) in the series length, whatever the window: window edges come
from :func:`numpy.searchsorted` on the sorted times, window statistics from
differences of cumulative sums. There is no loop over samples or over windows.

Times are int64 nanoseconds (see :func:`as_ns`); durations reach the helpers as
int64 nanoseconds. NaN and infinite values are excluded from window statistics.

Numerical note: window sums are differences of running sums. To keep the
cancellation error small, values are shifted by a reference (the series median)
before summing, the "shifted data" approach discussed in [CGL1983]_. The error of
a window sum is then of the order of machine epsilon times the running sum of
shifted values up to that window.

References
----------
.. [CGL1983] See ``docs/references.md``, key CGL1983.
"""

from __future__ import annotations

import numpy as np


def as_ns(times, *, func: str = "as_ns", name: str = "times") -> np.ndarray:
    """Times as a 1-D int64 array of nanoseconds since 1970-01-01.

    Parameters
    ----------
    times : array_like of numpy.datetime64 (any unit) or of int
        Datetimes, or integer nanoseconds since 1970-01-01 (time zone as given;
        qcpipe uses UTC).

    Returns
    -------
    numpy.ndarray of int64
    """
    arr = np.asarray(times)
    if arr.ndim != 1:
        raise ValueError(f"{func}: {name} must be one-dimensional; found shape {arr.shape}")
    kind = arr.dtype.kind
    if kind == "M":
        nat = np.isnat(arr)
        if nat.any():
            raise ValueError(
                f"{func}: {name}[{int(np.argmax(nat))}] is NaT; every sample needs a time "
                "(drop records without a time first)"
            )
        return arr.astype("datetime64[ns]").view(np.int64)
    if kind in "iu":
        if kind == "u" and arr.size and arr.max() > np.iinfo(np.int64).max:
            raise ValueError(f"{func}: {name} holds values beyond the int64 nanosecond range")
        return arr.astype(np.int64, copy=False)
    raise ValueError(
        f"{func}: {name} has dtype {arr.dtype}; expected numpy datetime64 or "
        "int64 nanoseconds since 1970-01-01"
    )


def check_non_decreasing(t: np.ndarray, *, func: str, name: str = "times") -> None:
    """Raise ValueError naming the first index where `t` steps backward."""
    if t.size < 2:
        return
    back = np.diff(t) < 0
    if back.any():
        i = int(np.argmax(back)) + 1
        raise ValueError(
            f"{func}: {name} must be non-decreasing; {name}[{i}] = "
            f"{np.datetime64(int(t[i]), 'ns')} is earlier than {name}[{i - 1}] = "
            f"{np.datetime64(int(t[i - 1]), 'ns')}; sort the records by time first"
        )


def window_bounds(
    t: np.ndarray,
    before_ns: int,
    after_ns: int,
    *,
    include_before: bool,
    include_after: bool,
) -> tuple[np.ndarray, np.ndarray]:
    """Index range ``[start, stop)`` of the window around each sample.

    The window of sample i is the time interval from ``t[i] - before_ns`` to
    ``t[i] + after_ns``; each end is closed when its ``include_*`` is True and open
    otherwise. `t` must be sorted (non-decreasing).
    """
    if t.size == 0:
        empty = np.zeros(0, dtype=np.intp)
        return empty, empty
    # A window longer than the whole record is the same as one just longer than it;
    # capping keeps t +/- window inside int64.
    cap = int(t[-1]) - int(t[0]) + 1
    before_ns, after_ns = min(before_ns, cap), min(after_ns, cap)
    if before_ns == 0:
        start = _equal_run_edge(t, "left" if include_before else "right")
    else:
        start = sorted_search(t, t - before_ns, "left" if include_before else "right")
    if after_ns == 0:
        stop = _equal_run_edge(t, "right" if include_after else "left")
    else:
        stop = sorted_search(t, t + after_ns, "right" if include_after else "left")
    return start, stop


_BLOCK = 8192


def sorted_search(t: np.ndarray, keys: np.ndarray, side: str) -> np.ndarray:
    """``numpy.searchsorted(t, keys, side)`` for sorted `keys`, block by block.

    The answers for a block of consecutive sorted keys lie between the answers
    for its first and last key, so each block is searched in that slice of `t`
    only: the slice stays in cache, which is about a quarter faster on 10 M
    samples than one search over the whole array (benchmarks/run.py).
    """
    n = keys.size
    if n <= 8 * _BLOCK:
        return np.searchsorted(t, keys, side=side)
    out = np.empty(n, dtype=np.intp)
    firsts = keys[::_BLOCK]
    lasts = keys[np.minimum(np.arange(_BLOCK - 1, n + _BLOCK - 1, _BLOCK), n - 1)]
    lo = np.searchsorted(t, firsts, side=side)
    hi = np.searchsorted(t, lasts, side=side)
    for b in range(firsts.size):
        i0 = b * _BLOCK
        seg = slice(lo[b], hi[b] + 1)
        np.add(np.searchsorted(t[seg], keys[i0:i0 + _BLOCK], side=side), lo[b], out=out[i0:i0 + _BLOCK])
    return out


def _equal_run_edge(t: np.ndarray, side: str) -> np.ndarray:
    """``numpy.searchsorted(t, t, side)`` in one pass: the first index of each sample's run of equal
    times ("left") or one past its last ("right")."""
    n = t.size
    idx = np.arange(n, dtype=np.intp)
    if side == "left":
        new = np.empty(n, dtype=bool)
        new[0] = True
        np.not_equal(t[1:], t[:-1], out=new[1:])
        return np.maximum.accumulate(np.where(new, idx, 0))
    last = np.empty(n, dtype=bool)
    last[-1] = True
    np.not_equal(t[1:], t[:-1], out=last[:-1])
    return np.minimum.accumulate(np.where(last, idx, n)[::-1])[::-1] + 1


def reference_value(x: np.ndarray, ok: np.ndarray) -> float:
    """Median of the valid values (0.0 if there are none): the shift before summing."""
    return float(np.median(x[ok])) if ok.any() else 0.0


def running_sums(x: np.ndarray, ok: np.ndarray, *, ref: float, squares: bool = False):
    """Cumulative count, sum (and sum of squares) of valid ``x - ref``.

    Each returned array has length ``n + 1`` and starts at 0, so that the total
    over samples ``start <= j < stop`` is ``c[stop] - c[start]``.
    """
    xz = np.where(ok, x - ref, 0.0)
    c = np.concatenate(([0], np.cumsum(ok, dtype=np.int64)))
    s1 = np.concatenate(([0.0], np.cumsum(xz)))
    if not squares:
        return xz, c, s1
    s2 = np.concatenate(([0.0], np.cumsum(xz * xz)))
    return xz, c, s1, s2


def constant_windows(
    x: np.ndarray, ok: np.ndarray, c: np.ndarray, start: np.ndarray, stop: np.ndarray
) -> np.ndarray:
    """True where the window holds at least one valid value and all are equal.

    Exact (no rounding): counts changes between successive valid values.
    """
    xf = x[ok]
    changes = np.zeros(xf.size, dtype=np.int64)
    if xf.size > 1:
        changes[1:] = np.cumsum(xf[1:] != xf[:-1])
    a, b = c[start], c[stop]  # window = valid values a .. b-1 (in valid-only order)
    has = b > a
    out = np.zeros(start.shape, dtype=bool)
    out[has] = changes[b[has] - 1] == changes[a[has]]
    return out


def previous_valid_index(ok: np.ndarray) -> np.ndarray:
    """Index of the last valid sample before each sample, -1 if there is none."""
    prev = np.full(ok.size, -1, dtype=np.intp)
    if ok.size > 1:
        prev[1:] = np.maximum.accumulate(np.where(ok[:-1], np.arange(ok.size - 1), -1))
    return prev
