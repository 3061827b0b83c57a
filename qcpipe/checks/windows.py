"""Time-window helpers of the checks.

Every helper is O(n) in the series length, whatever the window: window edges come
from :func:`numpy.searchsorted` on the sorted times, window statistics from
differences of cumulative sums. There is no loop over samples or over windows.

Times are int64 nanoseconds (see :func:`qcpipe.arrays.as_ns`); durations reach the helpers as
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

    A symmetric window (same width and same closure on both sides) needs one
    search only: the stop of sample i is the number of samples whose window
    starts at or before i (see :func:`stops_from_starts`).
    """
    start = window_starts(t, before_ns, include_before=include_before)
    if t.size == 0:
        return start, start
    after_ns = min(after_ns, _cap(t))
    if after_ns == min(before_ns, _cap(t)) and include_after == include_before and after_ns > 0:
        stop = stops_from_starts(start, t.size)
    elif after_ns == 0:
        stop = _equal_run_edge(t, "right" if include_after else "left")
    else:
        stop = sorted_search(t, t, "right" if include_after else "left", shift=after_ns)
    return start, stop


def window_starts(t: np.ndarray, before_ns: int, *, include_before: bool) -> np.ndarray:
    """The start of each sample's window in :func:`window_bounds` (its first index), alone."""
    if t.size == 0:
        return np.zeros(0, dtype=np.intp)
    before_ns = min(before_ns, _cap(t))
    if before_ns == 0:
        return _equal_run_edge(t, "left" if include_before else "right")
    return sorted_search(t, t, "left" if include_before else "right", shift=-before_ns)


def _cap(t: np.ndarray) -> int:
    """A window longer than the whole record is the same as one just longer than it; capping
    keeps t +/- window inside int64."""
    return int(t[-1]) - int(t[0]) + 1


_BLOCK = 8192

#: Samples per block of :func:`blocks`: a few float64 temporaries of this length
#: stay in a core's L2 cache.
CACHE_BLOCK = 1 << 15


def blocks(n: int, size: int | None = None):
    """Slices ``[0, size), [size, 2 size), ...`` covering ``range(n)``.

    Element-wise steps of a check run block by block so that their temporaries
    stay in cache instead of each making a full pass over memory; on 10 M
    samples this roughly halves their cost (benchmarks/run.py). The result does
    not depend on the block size (default :data:`CACHE_BLOCK`).
    """
    size = size or CACHE_BLOCK
    for i in range(0, n, size):
        yield slice(i, min(i + size, n))


def sorted_search(t: np.ndarray, keys: np.ndarray, side: str, *, shift: int = 0) -> np.ndarray:
    """``numpy.searchsorted(t, keys + shift, side)`` for sorted `keys`, block by block.

    The answers for a block of consecutive sorted keys lie between the answers
    for its first and last key, so each block is searched in that slice of `t`
    only: the slice stays in cache, which is about a quarter faster on 10 M
    samples than one search over the whole array (benchmarks/run.py). The keys
    plus `shift` (int64 nanoseconds) are formed one block at a time, so a window
    edge ``t + shift`` needs no array of its own.
    """
    n = keys.size
    if n <= 8 * _BLOCK:
        return np.searchsorted(t, keys + shift if shift else keys, side=side)
    out = np.empty(n, dtype=np.intp)
    firsts = keys[::_BLOCK] + shift
    lasts = keys[np.minimum(np.arange(_BLOCK - 1, n + _BLOCK - 1, _BLOCK), n - 1)] + shift
    lo = np.searchsorted(t, firsts, side=side)
    hi = np.searchsorted(t, lasts, side=side)
    for b in range(firsts.size):
        i0 = b * _BLOCK
        seg = slice(lo[b], hi[b] + 1)
        block = keys[i0:i0 + _BLOCK] + shift
        np.add(np.searchsorted(t[seg], block, side=side), lo[b], out=out[i0:i0 + _BLOCK])
    return out


def stops_from_starts(start: np.ndarray, n: int) -> np.ndarray:
    """Window stops of a symmetric window from its starts, in one counting pass.

    For a closed window ``[t_i - w, t_i + w]`` the start of sample j is
    ``start_j = #{m : t_m < t_j - w}``, so ``i >= start_j`` exactly when
    ``t_j - w <= t_i``, that is ``t_j <= t_i + w``. Hence
    ``stop_i = #{j : t_j <= t_i + w} = #{j : start_j <= i}``: a cumulative
    count of the starts. The same holds for an open window (``<=`` and ``<``
    exchanged). Cost O(n) with no search.
    """
    counts = np.bincount(start, minlength=n + 1)[:n]
    return np.cumsum(counts, out=counts)


def _equal_run_edge(t: np.ndarray, side: str) -> np.ndarray:
    """``numpy.searchsorted(t, t, side)`` in one pass: the first index of each sample's run of equal
    times ("left") or one past its last ("right")."""
    n = t.size
    idx = np.arange(n, dtype=np.intp)
    if distinct_times(t):
        return idx if side == "left" else np.add(idx, 1, out=idx)
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
    """The shift before summing: median of the valid values of an evenly strided
    sample of at most about 65 536 values (0.0 if there are none).

    Any value typical of the series keeps the cancellation error small
    [CGL1983]_; a strided sample makes the cost independent of the length.
    """
    sub = x[:: max(1, x.size >> 16)]
    sub = sub[np.isfinite(sub)]
    if sub.size == 0:
        if not ok.any():
            return 0.0
        sub = x[ok]
    return float(np.median(sub))


def _cumulative(values: np.ndarray, dtype) -> np.ndarray:
    """``[0, v0, v0 + v1, ...]``: length n + 1, written in place (no concatenation)."""
    out = np.empty(values.size + 1, dtype=dtype)
    out[0] = 0
    np.cumsum(values, dtype=dtype, out=out[1:])
    return out


def running_sums(x: np.ndarray, ok: np.ndarray, *, ref: float, squares: bool = False):
    """Cumulative count, sum (and sum of squares) of valid ``x - ref``.

    Each returned array has length ``n + 1`` and starts at 0, so that the total
    over samples ``start <= j < stop`` is ``c[stop] - c[start]``. Counts are
    int32 when they fit (smaller to gather), int64 otherwise.
    """
    xz = np.subtract(x, ref)
    np.copyto(xz, 0.0, where=~ok)
    c = _cumulative(ok, np.int32 if x.size < np.iinfo(np.int32).max else np.int64)
    s1 = _cumulative(xz, np.float64)
    if not squares:
        return xz, c, s1
    # cumsum block by block, each block's first square added to the sum so far: the same
    # additions in the same order as one cumsum, without a full array of squares
    s2 = np.empty(x.size + 1, dtype=np.float64)
    s2[0] = 0.0
    for b in blocks(x.size):
        sq = np.square(xz[b])
        if b.start:
            sq[0] += s2[b.start]
        np.cumsum(sq, out=s2[b.start + 1:b.stop + 1])
    return xz, c, s1, s2


def constant_windows(last_change: np.ndarray, k: np.ndarray, c_start: np.ndarray) -> np.ndarray:
    """True where the window ``[start, stop)`` holds at least one valid value and all are equal.

    Exact (no rounding). ``last_change = last_change_before_stop(...)`` (``c[L]``
    for the window's last change L), ``k`` the number of valid values in the
    window and ``c_start = c[start]`` (``c`` the cumulative valid count of
    :func:`running_sums`). The window is constant exactly when its last change
    is before the window or is its first valid sample, i.e. when no valid
    sample lies in ``[start, L)``: ``c[L] <= c[start]``. Works on any block of
    samples, given the same block of each argument.
    """
    out = k > 0
    out &= last_change <= c_start  # stop - 1 = -1 only where the window is empty (k == 0)
    return out


def last_change_before_stop(change: np.ndarray, c: np.ndarray, stop: np.ndarray | None) -> np.ndarray:
    """``c[L]`` for the latest change L at or before ``stop_i - 1`` (0 if none), for
    :func:`constant_windows`.

    `change` marks each valid sample whose value differs from the previous valid
    value; ``stop=None`` stands for ``stop_i = i`` (saves a gather). Since `c` is
    non-decreasing, ``c[L]`` is a running maximum over the changes.
    """
    c_last_change = np.maximum.accumulate(np.where(change, c[:-1], 0))
    if stop is not None:
        return c_last_change[stop - 1]
    out = np.empty_like(c_last_change)
    out[:1] = 0
    out[1:] = c_last_change[:-1]
    return out


def previous_valid_index(ok: np.ndarray, c: np.ndarray | None = None) -> np.ndarray:
    """Index of the last valid sample before each sample, -1 if there is none.

    With ``c`` the cumulative valid count (``c[i]`` valid samples before i, as
    from :func:`running_sums`), that sample is the ``c[i]``-th valid one: one
    gather into the list of valid indices, no running maximum.
    """
    if c is None:
        c = _cumulative(ok, np.intp)
    valid = np.flatnonzero(ok)
    if valid.size == 0:
        return np.full(ok.size, -1, dtype=np.intp)
    prev = valid[c[:-1] - 1]  # c = 0 wraps to the last valid index; set to -1 below
    prev[c[:-1] == 0] = -1
    return prev


def distinct_times(t: np.ndarray) -> bool:
    """True when no two samples share a time (then a zero-width window edge is the sample itself)."""
    return t.size < 2 or not np.equal(t[1:], t[:-1]).any()


_SIGN = np.uint64(1 << 63)


def order_keys(x: np.ndarray) -> np.ndarray:
    """uint64 keys of float64 values in the same order as the values (finite values; -0.0 below 0.0).

    The IEEE 754 bit pattern of a non-negative float, with its sign bit set, and
    the complement of a negative float's pattern, sort as the values do (common
    practice, no source). Exact: :func:`floats_from_keys` gives the values back.
    """
    u = np.ascontiguousarray(x, dtype=np.float64).view(np.uint64)
    return np.where(u >= _SIGN, ~u, u | _SIGN)


def floats_from_keys(keys: np.ndarray) -> np.ndarray:
    """The float64 values of :func:`order_keys`."""
    return np.where(keys >= _SIGN, keys ^ _SIGN, ~keys).view(np.float64)


def segment_running_max(keys: np.ndarray, segment: np.ndarray) -> np.ndarray:
    """Running maximum of uint64 `keys` restarted at each new segment (`segment`: non-decreasing ids from 0).

    A segment's keys are lifted above every earlier segment's by putting the
    segment id in the high bits, so that one :func:`numpy.maximum.accumulate`
    restarts at each segment; the 64-bit keys leave no room for the id, so the
    maximum is taken in two exact passes: the high 32 bits first, then the low
    32 bits among the samples that hold the running high maximum (within each
    stretch of constant running high maximum). Cost O(n).
    """
    n = keys.size
    if n == 0:
        return keys.copy()
    if n >= 1 << 30:
        raise ValueError(f"segment_running_max: {n} samples; at most 2**30 are supported")
    seg = segment.astype(np.int64)
    high = (keys >> np.uint64(32)).astype(np.int64)
    lifted = seg << 32
    lifted |= high
    run_high = np.maximum.accumulate(lifted)
    holds = lifted == run_high
    stretch = np.empty(n, dtype=np.int64)
    stretch[0] = 1
    np.not_equal(run_high[1:], run_high[:-1], out=stretch[1:])
    np.cumsum(stretch, out=stretch)
    low = (keys & np.uint64(0xFFFFFFFF)).astype(np.int64)
    low += 1
    low *= holds
    stretch <<= 33
    stretch |= low
    run_low = np.maximum.accumulate(stretch)
    run_low &= (1 << 33) - 1
    run_low -= 1
    out = (run_high & 0xFFFFFFFF).astype(np.uint64) << np.uint64(32)
    out |= run_low.astype(np.uint64)
    return out


def running_max_in_blocks(x: np.ndarray, block: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Exact maximum of finite `x` from the start of each sample's block to it, and from it to its block's end.

    `block`: non-decreasing block ids from 0. The two running maxima are the
    forward and backward passes of the van Herk / Gil-Werman sliding maximum
    [vHe1992]_ [GW1993]_: a window that holds one block boundary is the end of
    one block and the start of the next. Cost O(n).
    """
    if x.size == 0:
        return x.copy(), x.copy()
    keys = order_keys(x)
    from_start = floats_from_keys(segment_running_max(keys, block))
    to_end = floats_from_keys(segment_running_max(keys[::-1], block[-1] - block[::-1])[::-1])
    return from_start, to_end
